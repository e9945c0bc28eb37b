"""Words and figures every report shares: timecodes, scores in words, the summary, worst cues.

Pure functions of the records (:mod:`planner.model`); no drawing, no files. Timecodes are at
the analysis frame rate and programme start (``AnalysisSettings.fps``, ``drop_frame``,
``programme_start``), nearest frame (:mod:`planner.io.timecode`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol

import numpy as np

from planner.analysis.checks import FLAGS
from planner.io.timecode import FrameRate, frame_rate, seconds_to_timecode
from planner.model import Analysis, CueScore, CueTiming, GainEvent, Plan
from planner.planning.gains import FLAGGED_VERDICTS, fmt_score

#: Verdicts from worst to best: the order of every count and of "worst" comparisons.
VERDICT_ORDER = ("masked", "at-risk", "no-score", "clear")


@dataclass(frozen=True)
class Clock:
    """Programme seconds to timecode at one rate and programme start."""

    rate: FrameRate
    start: str

    def tc(self, t_s: float) -> str:
        """Timecode label of the frame nearest ``t_s`` (times before 0 s read as 0 s)."""
        return seconds_to_timecode(max(0.0, t_s), self.rate, start=self.start)


def clock_of(analysis: Analysis) -> Clock:
    """The clock recorded in an analysis's settings."""
    s = analysis.settings
    return Clock(frame_rate(str(s.get("fps", "25")), bool(s.get("drop_frame", False))), str(s.get("programme_start", "00:00:00:00")))


class VerifiedCue(Protocol):
    """What the reports read of one cue re-scored on a render (:class:`planner.render.verify.VerifyRow` has it).

    ``measured_after`` is in the plan's score unit; ``reached`` is None when the cue could not be scored.
    """

    @property
    def cue_index(self) -> int: ...

    @property
    def measured_after(self) -> float | None: ...

    @property
    def reached(self) -> bool | None: ...


def one_line(text: str) -> str:
    """Cue text on one line, lines joined by `` / ``, verbatim otherwise (markup kept as text)."""
    return " / ".join(part.strip() for part in text.splitlines() if part.strip())


def score_kind(plan: Plan) -> str:
    """``"sii"`` or ``"lu"``: the unit the plan's target and event scores are in."""
    return str(plan.settings.get("target_kind", "sii"))


def score_value(score: CueScore, kind: str) -> float | None:
    """A cue's score in the plan's unit (SII or loudness difference, LU)."""
    return score.sii if kind == "sii" else score.sbld_lu


def score_words(score: CueScore | None, kind: str) -> str:
    """``SII 0.31`` / ``+2.0 LU``, or why there is no score."""
    if score is None:
        return "not scored"
    value = score_value(score, kind)
    return fmt_score(kind, value) if value is not None else (score.reason or "not scored")


def move_words(event: GainEvent) -> str:
    """The gains of an event in words: ``background -8.2 dB, dialogue +2.0 dB`` or ``no move``."""
    parts = []
    if event.background_gain_db < 0:
        parts.append(f"background {event.background_gain_db:+.1f} dB")
    if event.dialogue_gain_db > 0:
        parts.append(f"dialogue {event.dialogue_gain_db:+.1f} dB")
    return ", ".join(parts) if parts else "no move"


def cue_span_words(indices: Sequence[int]) -> str:
    """Cue numbers as runs: ``15-17, 20``."""
    runs: list[list[int]] = []
    for i in sorted(indices):
        if runs and i == runs[-1][-1] + 1:
            runs[-1].append(i)
        else:
            runs.append([i])
    return ", ".join(str(r[0]) if len(r) == 1 else f"{r[0]}-{r[-1]}" for r in runs)


def worst_key(score: CueScore, kind: str) -> tuple[int, float, int]:
    """Sort key putting the worst cue first: verdict, then score (lowest first), then index."""
    value = score_value(score, kind)
    return (VERDICT_ORDER.index(score.verdict), np.inf if value is None else value, score.index)


# --------------------------------------------------------------------------- cues


@dataclass(frozen=True)
class CueRow:
    """One cue for a list of worst lines."""

    index: int
    tc_in: str
    tc_out: str
    start_s: float
    end_s: float
    verdict: str
    score: float | None
    score_text: str
    flags: tuple[str, ...]
    text: str


def worst_cues(analysis: Analysis, kind: str, top: int) -> tuple[CueRow, ...]:
    """The ``top`` worst at-risk and masked cues: masked first, then by score, lowest first."""
    clock, timings, cues = clock_of(analysis), {t.index: t for t in analysis.timings}, cue_texts(analysis)
    flagged = [s for s in analysis.scores if s.verdict in FLAGGED_VERDICTS and s.index in timings]
    flagged.sort(key=lambda s: worst_key(s, kind))
    rows = []
    for s in flagged[: max(0, top)]:
        t = timings[s.index]
        rows.append(CueRow(index=s.index, tc_in=clock.tc(t.aligned_start_s), tc_out=clock.tc(t.aligned_end_s),
                           start_s=t.aligned_start_s, end_s=t.aligned_end_s, verdict=s.verdict,
                           score=score_value(s, kind), score_text=score_words(s, kind), flags=t.flags,
                           text=one_line(cues.get(s.index, ""))))  # fmt: skip
    return tuple(rows)


def cue_texts(analysis: Analysis) -> dict[int, str]:
    """Cue text by cue index."""
    return {c.index: c.text for c in analysis.subtitles.cues}


# --------------------------------------------------------------------------- summary


@dataclass(frozen=True)
class Summary:
    """The figures of the summary panel. ``coverage`` is the share of detected speech under a cue."""

    inputs: tuple[tuple[str, str], ...]
    programme: str
    alignment: str
    alignment_confidence: float
    coverage: float
    uncovered_s: float
    uncovered_runs: int
    verdicts: dict[str, int]
    flags: dict[str, int]
    loudness: str
    scoring: str
    warnings: tuple[str, ...]

    def lines(self) -> tuple[tuple[str, str], ...]:
        """(label, value) pairs in display order."""
        counts = ", ".join(f"{n} {v}" for v, n in self.verdicts.items()) or "not scored"
        flags = ", ".join(f"{n} {f}" for f, n in self.flags.items() if n) or "none"
        rows = [(role, path) for role, path in self.inputs]
        rows += [("programme", self.programme), ("alignment", self.alignment),
                 ("coverage", f"{100 * self.coverage:.0f} % of detected speech has a cue"
                  + (f" ({self.uncovered_runs} runs, {self.uncovered_s:.0f} s without)" if self.uncovered_runs else "")),
                 ("verdicts", counts), ("subtitle flags", flags), ("loudness", self.loudness), ("scoring", self.scoring)]  # fmt: skip
        rows += [("warning", w) for w in self.warnings]
        return tuple(rows)


def coverage(analysis: Analysis) -> float:
    """Share of detected speech frames inside an aligned cue span (1.0 when there is no speech)."""
    act = analysis.activity
    covered = np.zeros(act.n_frames, dtype=bool)
    for t in analysis.timings:
        covered[max(0, int(np.floor(t.aligned_start_s / act.frame_s))) : max(0, int(np.ceil(t.aligned_end_s / act.frame_s)))] = True
    speech = int(act.is_speech.sum())
    return 1.0 if speech == 0 else float((act.is_speech & covered).sum() / speech)


def alignment_words(analysis: Analysis) -> str:
    """The subtitle-to-audio mapping found, in words."""
    al = analysis.alignment
    seg = al.segments[0]
    speed = "at programme speed" if al.rate_name == "1" else f"at {al.rate_name} of programme speed"
    edits = f", {len(al.breaks_s)} edit{'s' if len(al.breaks_s) != 1 else ''} found" if al.breaks_s else ""
    return f"subtitles {speed}, shifted {seg.offset_s:+.2f} s{edits} (confidence {al.confidence:.2f})"


def summary(analysis: Analysis, plan: Plan | None = None) -> Summary:
    """Summary figures of an analysis (and the scoring target of a plan, when given)."""
    info, ld = analysis.audio, analysis.loudness
    verdicts = {v: sum(1 for s in analysis.scores if s.verdict == v) for v in VERDICT_ORDER}
    flags = {f: sum(1 for t in analysis.timings if f in t.flags) for f in FLAGS}
    methods: list[str] = sorted({s.method for s in analysis.scores if s.method != "none"}) or ["none"]
    scoring = f"from {'+'.join(methods)}, hearing {analysis.settings.get('hearing', 'normal')}"
    if plan is not None:
        kind = score_kind(plan)
        target = plan.settings.get("target_sii") if kind == "sii" else plan.settings.get("target_lu")
        scoring += f", target {fmt_score(kind, float(target or 0.0))}"

    def fmt(v: float | None, unit: str) -> str:
        return "n/a" if v is None else f"{v:.1f} {unit}"

    loud = (f"{fmt(ld.integrated_lufs, 'LUFS')} integrated, range {fmt(ld.loudness_range_lu, 'LU')}, "
            f"true peak {fmt(ld.true_peak_dbtp, 'dBTP')}")
    if ld.speech_lufs is not None:
        loud += f", speech {fmt(ld.speech_lufs, 'LUFS')}"
    clock = clock_of(analysis)
    counting = " DF" if clock.rate.drop_frame else ""
    programme = f"{info.layout} {info.sample_rate_hz} Hz, {clock.tc(0.0)} to {clock.tc(info.duration_s)} at {clock.rate.name} fps{counting}"
    return Summary(
        inputs=tuple((f.role, f.path) for f in analysis.inputs), programme=programme, alignment=alignment_words(analysis),
        alignment_confidence=analysis.alignment.confidence, coverage=round(coverage(analysis), 4),
        uncovered_s=round(sum(u.end_s - u.start_s for u in analysis.uncovered), 3), uncovered_runs=len(analysis.uncovered),
        verdicts={v: n for v, n in verdicts.items() if n}, flags={f: n for f, n in flags.items() if n}, loudness=loud,
        scoring=scoring, warnings=tuple(analysis.warnings),
    )  # fmt: skip


# --------------------------------------------------------------------------- alignment


@dataclass(frozen=True)
class TimingRow:
    """One cue's timing against its speech after the global mapping, ms (positive: cue late)."""

    index: int
    tc_in: str
    onset_error_ms: float | None
    offset_error_ms: float | None
    flags: tuple[str, ...]
    text: str


def worst_timed(analysis: Analysis, top: int) -> tuple[TimingRow, ...]:
    """The ``top`` cues whose start or end lies furthest from their speech (cues with speech only)."""
    clock, cues = clock_of(analysis), cue_texts(analysis)
    timed = [t for t in analysis.timings if t.onset_error_ms is not None or t.offset_error_ms is not None]

    def error(t: CueTiming) -> float:
        return max(abs(t.onset_error_ms or 0.0), abs(t.offset_error_ms or 0.0))

    timed.sort(key=lambda t: (-error(t), t.index))
    return tuple(TimingRow(index=t.index, tc_in=clock.tc(t.aligned_start_s), onset_error_ms=t.onset_error_ms,
                           offset_error_ms=t.offset_error_ms, flags=t.flags, text=one_line(cues.get(t.index, "")))
                 for t in timed[: max(0, top)])  # fmt: skip
