"""Hand-built plans for the report tests, planned by the real planner from constructed analyses.

Built on tests/plan_factory.py (per-band SNRs whose SII comes from the reference package).
The programme is 60 s; what each cue is, by construction:

- cues 1, 2 (2-4 s, 5-7 s): +30 dB, clear;
- cues 3, 4, 5 (20-27 s): -6 dB, masked (reference SII 0.26), cue 3 flagged ``late-in``,
  cue 4's text carries markup (HTML and rich) that must show as text;
- cue 6 (40-42 s): +6 dB, at risk (reference SII 0.67);
- speech with no cue 50-52 s;
- cue 7 (54-56 s): +30 dB, clear, flagged ``too-fast``.

Also here: :func:`write_tone` (synthesized audio of known amplitude per channel) and
:func:`ref_tc`, the timecode label of a time by the reference package ``timecode``.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np
import soundfile as sf
from plan_factory import CueSpec, make_analysis
from timecode import Timecode

from planner.model import SCHEMA_VERSION, Analysis, GainEvent, Plan
from planner.planning.scenes import make_plan
from planner.settings import PlanSettings

#: Cue text with markup of both kinds: a page must show it as text, a terminal must not style it.
MARKUP_TEXT = "<script>alert('cue')</script> [bold]Stop[/bold] <b>now</b> & go"
DURATION_S = 60.0
FLAGS = {3: ("late-in",), 7: ("too-fast",)}
MASKED, AT_RISK, CLEAR = (3, 4, 5), (6,), (1, 2, 7)
UNCOVERED = (50.0, 52.0)


def specs() -> list[CueSpec]:
    """The seven cues of the module docstring."""
    return [
        CueSpec(2.0, 4.0, snr_db=30.0, text="Evening, all.\nSit anywhere."),
        CueSpec(5.0, 7.0, snr_db=30.0, text="The kettle is on."),
        CueSpec(20.0, 22.0, snr_db=-6.0, text="Turn that music down!"),
        CueSpec(22.5, 24.5, snr_db=-6.0, text=MARKUP_TEXT),
        CueSpec(25.0, 27.0, snr_db=-6.0, text="I can't hear a word."),
        CueSpec(40.0, 42.0, snr_db=6.0, text="Rain again tonight."),
        CueSpec(54.0, 56.0, snr_db=30.0, text="Goodnight, goodnight, goodnight, all of you."),
    ]


def report_analysis(**kw: Any) -> Analysis:
    """The constructed analysis, with the subtitle flags of :data:`FLAGS` set on its timings."""
    a = make_analysis(specs(), duration_s=DURATION_S, uncovered=[UNCOVERED], **kw)
    timings = tuple(dataclasses.replace(t, flags=FLAGS.get(t.index, ())) for t in a.timings)
    return dataclasses.replace(a, timings=timings)


def report_plan(**kw: Any) -> Plan:
    """The constructed analysis planned with default settings."""
    return make_plan(report_analysis(**kw), PlanSettings())


def plan_with_events(analysis: Analysis, events: list[GainEvent]) -> Plan:
    """A plan with hand-made events (and no scenes), for testing rules on events directly."""
    return Plan(schema=SCHEMA_VERSION, settings=PlanSettings().to_dict(), analysis=analysis, events=tuple(events), scenes=())


def event(cues: tuple[int, ...], start_s: float, end_s: float, *, cut_db: float, reachable: bool) -> GainEvent:
    """A hand-made background cut over ``cues``."""
    return GainEvent(event_id=f"E{cues[0]:03d}", start_s=start_s, end_s=end_s, ramp_in_ms=400.0, ramp_out_ms=600.0,
                     background_gain_db=cut_db, dialogue_gain_db=0.0, cue_indices=cues, reason="constructed",
                     target_kind="sii", target=0.75, score_before=0.3, score_after=0.8 if reachable else 0.6,
                     reachable=reachable)  # fmt: skip


def write_tone(path: Path, amplitudes: Sequence[float], *, freq_hz: float = 1000.0, rate_hz: int = 48000,
               duration_s: float = DURATION_S) -> Path:  # fmt: skip
    """A sine of ``freq_hz`` at a peak amplitude per channel, written as 24-bit WAV (the audio of the plans)."""
    t = np.arange(int(round(duration_s * rate_hz))) / rate_hz
    tone = np.sin(2 * np.pi * freq_hz * t)
    sf.write(path, np.stack([a * tone for a in amplitudes], axis=1).astype(np.float32), rate_hz, subtype="PCM_24")
    return path


_FPS = {"25": Fraction(25), "29.97": Fraction(30000, 1001)}


def ref_tc(t_s: float, name: str = "25", start: str = "00:00:00:00") -> str:
    """Label of the frame nearest ``t_s`` from ``start`` by the ``timecode`` package (its frames are 1-based)."""
    frames = math.floor(Fraction(t_s) * _FPS[name] + Fraction(1, 2))  # nearest frame, halves up (planner/units.py rule)
    return str(Timecode(name, frames=Timecode(name, start).frames + frames))
