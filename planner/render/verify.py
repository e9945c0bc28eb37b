"""Verify a render: re-score every planned cue on the rendered audio and compare with the plan.

The rendered programme is scored by :func:`planner.analysis.masking.score_cues` with the
plan's own aligned timings, speech activity and analysis settings, so the only thing that
differs from the analysis is the audio: read from the rendered files (:func:`verify`), or,
for a stems render, the processed stems computed again beside the render
(:func:`verifying_stems`, so that nothing is written to be read back). With the processed
stems the scores are exact (``kind="stems"``); from the rendered mix alone they are
estimates (``kind="mix"``, with the estimators' confidence), and conservative ones: the
speech-free context the estimators read around a cue was not ducked, so they take the
background under the cue to be louder than it is. The prediction per cue is the planner's own re-score of the
cue's analysed spectra (or loudness difference) under the event's lift and cut
(:class:`planner.planning.gains.Scorer`).

A render normalised for loudness plays at another level than the analysed programme; the
SII depends on level (hearing threshold, ANSI S3.5 Eq. 11), so ``level_gain_db`` (the
render's :attr:`~planner.render.renderer.RenderReport.gain_applied_db`) is taken back out of
the listening level, scoring the render as loud as the original was assumed to play.
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import io
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np

from planner._typing import FloatArray
from planner.analysis.masking import score_cues, score_spans
from planner.errors import PlanFileError
from planner.io.audio import Programme, iter_programme
from planner.io.files import atomic_write_text
from planner.io.parallel import band_worker, call_worker, use_workers
from planner.model import AudioInfo, CueScore, CueTiming, GainEvent, Plan, Record
from planner.planning.gains import STEP_DB, Scorer, analysis_thresholds
from planner.progress import Progress
from planner.render.renderer import gain_envelopes, processed_stems
from planner.settings import AnalysisSettings

#: A score counts as reaching its target within half a unit of its displayed last digit
#: (SII shown to 0.01, loudness differences to 0.1 LU): our choice, so that a render that
#: rounds to the target is not called a miss.
REACH_TOLERANCE = {"sii": 0.005, "lu": 0.05}

_MIX_NOTE = (
    "scored from the rendered mix alone, so the scores are estimates: the speech-free context around a "
    "ducked cue keeps the background at its old level, which makes the estimated background under the cue "
    "too high and the measured gain too small; pass the processed stems for exact scores"
)

#: Columns of verify.csv, in order.
VERIFY_COLUMNS = (
    "cue", "event_id", "score_kind", "target", "score_before", "predicted_after", "measured_after",
    "reached_target", "planned_reachable", "method", "confidence",
)  # fmt: skip


@dataclass(frozen=True)
class VerifyRow(Record):
    """One planned cue: its score before (analysis), predicted after (plan) and measured after (render).

    Scores are in the unit of ``score_kind`` (SII, or speech-to-background loudness
    difference in LU). ``reached`` is ``None`` when the render could not be scored.
    """

    cue_index: int
    event_id: str
    score_kind: Literal["sii", "lu"]
    target: float
    score_before: float | None
    predicted_after: float | None
    measured_after: float | None
    reached: bool | None
    planned_reachable: bool
    method: str
    confidence: float


@dataclass(frozen=True)
class VerifyReport(Record):
    """Every planned cue re-scored, and the counts per cue and per event.

    An event reached its target when every scored cue of it did. ``method`` says how the
    render was scored (``stems`` exact, ``mix`` estimated).
    """

    method: Literal["stems", "mix"]
    rows: tuple[VerifyRow, ...]
    n_cues: int
    n_cues_reached: int
    n_cues_unscored: int
    n_events: int
    n_events_reachable: int
    n_events_reached: int
    n_reachable_events_reached: int
    level_gain_db: float = 0.0
    notes: tuple[str, ...] = ()


def verify(
    plan: Plan,
    rendered: Programme,
    *,
    processed_stems: Programme | None = None,
    progress: Progress | None = None,
    level_gain_db: float = 0.0,
    k_power: FloatArray | None = None,
) -> VerifyReport:
    """Re-score the planned cues on the rendered audio.

    Parameters
    ----------
    plan : Plan
        The plan that was rendered.
    rendered : Programme
        The rendered mix (``kind="mix"``).
    processed_stems : Programme, optional
        The processed dialogue and background (``render(..., stems_out=...)``); scored as
        stems, which is exact, instead of estimating from the rendered mix.
    progress : Progress, optional
        Called as ``progress("scoring", seconds done, seconds total)``.
    level_gain_db : float
        Loudness gain the render applied, dB (module docstring).
    k_power : ndarray, optional
        The rendered mix's frame K-weighted powers, measured while it was written
        (``render(..., k_frames=...)``), so that it is not K-weighted again (scored from
        the mix only; see :func:`~planner.analysis.masking.score_cues`).

    Returns
    -------
    VerifyReport

    Raises
    ------
    PlanFileError
        The audio does not have the rate and channel count the plan was made for.
    """
    audio = processed_stems if processed_stems is not None else rendered
    _check_format(plan, audio.info)
    timings, settings = _planned(plan, level_gain_db)
    with contextlib.ExitStack() as stack:
        # frame features in a second process on a long programme (same scores; planner.io.parallel)
        given = k_power if audio.kind == "mix" else None
        frame_s = plan.analysis.activity.frame_s
        bands = stack.enter_context(band_worker(audio, frame_s, given)) if use_workers(audio.info) else None
        measured = score_cues(
            iter_programme(audio), info=audio.info, kind=audio.kind, timings=timings,
            activity=plan.analysis.activity, settings=settings, progress=progress, bands=bands,
            stoi=False,  # the rows compare SII or level differences only
            k_power=given,
        )  # fmt: skip
    return verify_report(plan, measured, audio.kind, level_gain_db)


@contextlib.contextmanager
def verifying_stems(plan: Plan, programme: Programme) -> Iterator[Callable[[float], VerifyReport]]:
    """Score the planned cues on the processed stems of a stems programme, beside its render.

    The processed stems are computed again from the input stems and the plan
    (:func:`~planner.render.renderer.processed_stems`: the samples the render writes to its
    stems and sums to its output, before the loudness gain), so nothing is written to be read
    back. They are scored at the analysed listening level, which is scoring the normalised
    stems with the render's gain taken out of the level (module docstring), from the samples
    themselves rather than their 24-bit rounding. On a long programme with two cores the
    scoring runs in a second process from the moment the context opens, beside the render's
    passes; otherwise when the report is asked for. The context gives a function from the
    render's loudness gain (dB, recorded in the report) to the report.
    """
    _check_format(plan, programme.info)
    if use_workers(programme.info):
        with call_worker(_stems_scores, (plan, programme)) as scores:
            yield lambda level_gain_db: verify_report(plan, scores(), "stems", level_gain_db)
    else:
        yield lambda level_gain_db: verify_report(plan, _stems_scores(plan, programme), "stems", level_gain_db)


def _stems_scores(plan: Plan, programme: Programme) -> tuple[CueScore, ...]:
    """The planned cues scored on the processed stems, reading only the audio around them (:func:`score_spans`)."""
    timings, settings = _planned(plan, 0.0)
    activity = plan.analysis.activity
    spans = score_spans(timings, programme.info, activity.frame_s)
    return score_cues(
        processed_stems(programme, gain_envelopes(plan, programme.info), spans=spans), info=programme.info,
        kind="stems", timings=timings, activity=activity, settings=settings, stoi=False,
    )  # fmt: skip


def _check_format(plan: Plan, info: AudioInfo) -> None:
    a = plan.analysis.audio
    if (a.sample_rate_hz, a.n_channels) != (info.sample_rate_hz, info.n_channels):
        raise PlanFileError(
            f"the plan was made for {a.n_channels}-channel audio at {a.sample_rate_hz} Hz, the rendered audio is "
            f"{info.n_channels}-channel at {info.sample_rate_hz} Hz; verify the render of this plan",
            field="analysis.audio",
        )


def _planned(plan: Plan, level_gain_db: float) -> tuple[list[CueTiming], AnalysisSettings]:
    """The planned cues' timings, and the analysis settings with ``level_gain_db`` taken out of the listening level."""
    base = AnalysisSettings.from_dict(plan.analysis.settings)
    settings = dataclasses.replace(base, listening_level_db_spl=base.listening_level_db_spl - level_gain_db)
    planned = {i for ev in plan.events for i in ev.cue_indices}
    return [t for t in plan.analysis.timings if t.index in planned], settings


def verify_report(plan: Plan, measured: Sequence[CueScore], kind: Literal["mix", "stems"], level_gain_db: float) -> VerifyReport:
    """Compare the measured scores of the planned cues with the plan (one row per planned cue)."""
    by_index = {s.index: s for s in measured}
    before = {s.index: s for s in plan.analysis.scores}
    thresholds = analysis_thresholds(plan.analysis.settings)
    rows = []
    event_reached: list[bool] = []
    for ev in plan.events:
        ev_rows = [_row(ev, i, before.get(i), by_index.get(i), thresholds) for i in sorted(ev.cue_indices)]
        rows.extend(ev_rows)
        scored = [r.reached for r in ev_rows if r.reached is not None]
        event_reached.append(bool(scored) and all(scored))
    reachable = [ev.reachable for ev in plan.events]
    notes = () if kind == "stems" else (_MIX_NOTE,)
    return VerifyReport(
        method=kind,
        rows=tuple(rows),
        n_cues=len(rows),
        n_cues_reached=sum(r.reached is True for r in rows),
        n_cues_unscored=sum(r.reached is None for r in rows),
        n_events=len(plan.events),
        n_events_reachable=sum(reachable),
        n_events_reached=sum(event_reached),
        n_reachable_events_reached=sum(r and ok for r, ok in zip(reachable, event_reached)),
        level_gain_db=level_gain_db,
        notes=notes,
    )


def _value(score: CueScore | None, kind: str) -> float | None:
    if score is None:
        return None
    return score.sii if kind == "sii" else score.sbld_lu


def _row(ev: GainEvent, index: int, before: CueScore | None, after: CueScore | None, thresholds: np.ndarray) -> VerifyRow:
    kind = ev.target_kind
    predicted = None
    if before is not None:
        scorer = Scorer(kind, [before], thresholds)
        if scorer.usable()[0]:
            lift = np.array([[round(ev.dialogue_gain_db / STEP_DB)]])
            cut = np.array([[round(-ev.background_gain_db / STEP_DB)]])
            predicted = float(scorer(np.array([0]), lift, cut)[0, 0])
    measured = _value(after, kind)
    return VerifyRow(
        cue_index=index,
        event_id=ev.event_id,
        score_kind=kind,
        target=ev.target,
        score_before=_value(before, kind),
        predicted_after=predicted,
        measured_after=measured,
        reached=None if measured is None else bool(measured >= ev.target - REACH_TOLERANCE[kind]),
        planned_reachable=ev.reachable,
        method=after.method if after is not None else "none",
        confidence=after.confidence if after is not None else 0.0,
    )


def _cell(value: float | bool | None, places: int) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    return f"{value:.{places}f}"


def write_verify_csv(report: VerifyReport, path: str | Path, *, inputs: tuple[str | Path, ...] = ()) -> None:
    """Write ``verify.csv``: a ``#`` summary line, the header (:data:`VERIFY_COLUMNS`), one row per planned cue.

    Scores to 3 decimals (SII) or 2 (LU); ``reached_target`` is ``yes``/``no`` (empty if unscored).
    The layout follows the other CSV exports (``planner.io.exports``).
    """
    buf = io.StringIO()
    buf.write(
        f"# {report.n_cues_reached} of {report.n_cues} planned cues reached the target ({report.method} scoring); "
        f"{report.n_reachable_events_reached} of {report.n_events_reachable} reachable events\n"
    )
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(VERIFY_COLUMNS)
    for r in report.rows:
        places = 3 if r.score_kind == "sii" else 2
        writer.writerow([
            str(r.cue_index), r.event_id, r.score_kind, _cell(r.target, places), _cell(r.score_before, places),
            _cell(r.predicted_after, places), _cell(r.measured_after, places), _cell(r.reached, 0),
            _cell(r.planned_reachable, 0), r.method, _cell(r.confidence, 2),
        ])  # fmt: skip
    atomic_write_text(path, buf.getvalue(), inputs=inputs)


__all__ = ["REACH_TOLERANCE", "VERIFY_COLUMNS", "VerifyReport", "VerifyRow", "verify", "write_verify_csv"]
