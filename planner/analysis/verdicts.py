"""The per-cue verdict (clear / at-risk / masked) from the SII and the speech-to-background difference.

Rule (docs/methods.md, "Verdict"):

- ``no-score`` when there is no SII (no speech frames, silent dialogue);
- ``masked`` when SII <= :data:`SII_POOR` (0.45), whatever the loudness difference;
- ``clear`` when SII >= :data:`SII_GOOD` (0.75) *and* the speech is at least
  ``min_sbld_lu`` (default :data:`SBLD_MUSIC_LU`, 10 LU) above the background, or the
  background is silent;
- ``at-risk`` otherwise.

The SII decides intelligibility; the loudness difference can only withhold ``clear``, since
the published figures are the differences listeners *prefer*, not the point where words are
lost. The 15 LU preferred over ambience is not applied by default because the tool does not
classify the background; pass ``min_sbld_lu=SBLD_AMBIENCE_LU`` where the background is known
to be ambience.

References
----------
SII >= 0.75 good and <= 0.45 poor communication: from memory, usually attributed to the
informative text of ANSI S3.5-1997 (not confirmed).
Torcoli, M., Freke-Morin, A., Paulus, J., Simon, C. and Shirley, B. (2019), "Preferred levels
for background ducking to produce esthetically pleasing audio for TV with clear speech",
J. Audio Eng. Soc. 67(12), 1003-1011: at least 10 LU over music, 15 LU over ambience.
"""

from __future__ import annotations

import math

from planner.model import Verdict

#: SII at or above which communication is rated good (from memory, ANSI S3.5 informative text).
SII_GOOD = 0.75
#: SII at or below which communication is rated poor (same source).
SII_POOR = 0.45
#: Speech-over-music loudness difference listeners prefer at least, LU (Torcoli et al. 2019).
SBLD_MUSIC_LU = 10.0
#: Speech-over-ambience loudness difference listeners prefer at least, LU (Torcoli et al. 2019).
SBLD_AMBIENCE_LU = 15.0


def verdict(sii: float | None, sbld_lu: float | None, *, min_sbld_lu: float = SBLD_MUSIC_LU) -> Verdict:
    """Verdict of one cue.

    Parameters
    ----------
    sii : float or None
        Speech Intelligibility Index for the chosen hearing profile, 0..1.
    sbld_lu : float or None
        Speech minus background K-weighted level, LU; ``None`` when the background is silent.
    min_sbld_lu : float, keyword-only
        Loudness difference needed for ``clear``, LU (default 10, speech over music).

    Returns
    -------
    {"clear", "at-risk", "masked", "no-score"}
    """
    if sii is None or not math.isfinite(sii):
        return "no-score"
    if sii <= SII_POOR:
        return "masked"
    if sii >= SII_GOOD and (sbld_lu is None or sbld_lu >= min_sbld_lu):
        return "clear"
    return "at-risk"
