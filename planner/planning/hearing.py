"""Re-plan for another hearing profile from a saved analysis, without the audio.

The scoring pass stores every cue's SII for ``normal`` and each age preset
(``CueScore.sii_by_profile``), so switching profile only re-reads those values and
re-applies the verdict rule of :mod:`planner.analysis.verdicts`.
"""

from __future__ import annotations

import dataclasses

from planner.analysis.verdicts import verdict
from planner.errors import SettingsError
from planner.model import Analysis, CueScore


def for_hearing(analysis: Analysis, hearing: str) -> Analysis:
    """The analysis as if it had been scored for hearing profile ``hearing``.

    Raises
    ------
    SettingsError
        If the analysis holds no scores for that profile (an audiogram needs a new
        ``cueplan analyse --audiogram FILE``).
    """
    if hearing == analysis.settings.get("hearing"):
        return analysis
    available = sorted({k for s in analysis.scores for k in s.sii_by_profile if "@" not in k})
    if analysis.scores and hearing not in available:
        raise SettingsError(
            f"hearing={hearing!r} was not scored in this analysis; pass one of {', '.join(available)}, "
            "or run cueplan analyse again with --hearing/--audiogram"
        )

    def rescored(score: CueScore) -> CueScore:
        if score.verdict == "no-score" or hearing not in score.sii_by_profile:
            return score
        value = score.sii_by_profile[hearing]
        # sii_short is only computed for the analysis profile: it does not carry over.
        return dataclasses.replace(score, sii=value, sii_short=None, verdict=verdict(value, score.sbld_lu))

    return dataclasses.replace(
        analysis,
        settings={**analysis.settings, "hearing": hearing},
        scores=tuple(rescored(s) for s in analysis.scores),
    )
