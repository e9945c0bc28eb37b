"""One episode's plan boiled down to the figures an archive triage ranks by.

:func:`summarise` turns a :class:`~planner.model.Plan` into an :class:`EpisodeSummary`
(programme figures, the episode score, its confidence, the action class and the worst
scenes) and one :class:`CatalogueCue` per cue. Pure: records in, records out.

Episode figures (docs/triage.md, "Catalogue"):

- ``coverage``: share of the detected speech under an aligned cue, 0..1
  (:func:`planner.report.figures.coverage`; 1 with no speech);
- ``score``: ``1 - sum(scene severity) / scored speech``, 0..1, 1 when no scored speech
  falls short of the target. Scene severity is speech seconds weighted by how far each
  at-risk or masked cue falls short (:mod:`planner.planning.scenes`), so the score is the
  speech-weighted share of the target the episode reaches; ``None`` with no scored speech;
- ``action``, ``confidence`` and ``verdict_line``: the episode verdict of the reports,
  :func:`planner.report.views.episode_verdict` (the one rule for the action class).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from typing import Any

from planner.model import CueScore, Plan
from planner.report.figures import coverage
from planner.report.views import ActionClass, episode_verdict
from planner.settings import AnalysisSettings, PlanSettings

#: Worst scenes kept per episode in the catalogue.
WORST_SCENES = 3
#: Version of the summary's layout and rules; part of the settings fingerprint, so a change here
#: makes a rerun redo every episode.
SUMMARY_VERSION = 1


@dataclass(frozen=True)
class WorstScene:
    """One of an episode's worst scenes: where it is, how bad, and why (``rank`` 1 = worst)."""

    rank: int
    scene_id: str
    start_s: float
    end_s: float
    severity: float
    masked_s: float
    worst_cue_index: int | None
    worst_cue_text: str
    reason: str


@dataclass(frozen=True)
class EpisodeSummary:
    """The episode's figures for the catalogue. Times s, levels LUFS / LU / dBTP, shares 0..1."""

    duration_s: float
    n_cues: int
    speech_s: float
    coverage: float
    alignment_offset_s: float
    alignment_ratio: float
    alignment_rate_name: str
    alignment_confidence: float
    alignment_breaks: int
    n_clear: int
    n_at_risk: int
    n_masked: int
    n_no_score: int
    integrated_lufs: float | None
    loudness_range_lu: float | None
    true_peak_dbtp: float
    speech_lufs: float | None
    n_events: int
    score: float | None
    confidence: float
    action: ActionClass
    verdict_line: str
    worst_scenes: tuple[WorstScene, ...]
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class CatalogueCue:
    """One cue of an episode: subtitle and aligned times (s), flags, scores, and its planned move (dB)."""

    cue_index: int
    cue_id: str
    text: str
    start_s: float
    end_s: float
    aligned_start_s: float | None
    aligned_end_s: float | None
    onset_error_ms: float | None
    flags: tuple[str, ...]
    method: str
    verdict: str
    speech_s: float | None
    sii: float | None
    sbld_lu: float | None
    stoi: float | None
    confidence: float | None
    reason: str
    event_id: str | None
    background_gain_db: float | None
    dialogue_gain_db: float | None


def canonical_json(data: Any) -> str:
    """JSON with sorted keys and no spaces: equal data gives equal text."""
    return json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def settings_fingerprint(analysis: AnalysisSettings, plan: PlanSettings) -> str:
    """Hex SHA-256 of the canonical JSON of the analysis and plan settings (and :data:`SUMMARY_VERSION`)."""
    data = {"analysis": analysis.to_dict(), "plan": plan.to_dict(), "summary_version": SUMMARY_VERSION}
    return hashlib.sha256(canonical_json(data).encode("utf-8")).hexdigest()


def _opt(value: float | None) -> float | None:
    return None if value is None else float(value)


def summarise(plan: Plan) -> tuple[EpisodeSummary, tuple[CatalogueCue, ...]]:
    """The episode summary and the per-cue rows (by cue index) of a plan.

    Parameters
    ----------
    plan : Plan
        A plan from :func:`planner.planning.scenes.make_plan` with its analysis.

    Returns
    -------
    (EpisodeSummary, tuple of CatalogueCue)
    """
    a = plan.analysis
    scored_s = float(sum(s.speech_s for s in a.scores if s.verdict != "no-score"))
    severity = float(sum(sc.severity for sc in plan.scenes))
    detected_s = float(a.activity.is_speech.sum()) * a.activity.frame_s
    verdict = episode_verdict(plan)
    counts = {v: sum(1 for s in a.scores if s.verdict == v) for v in ("clear", "at-risk", "masked", "no-score")}
    first = a.alignment.segments[0]
    texts = {c.index: c.text for c in a.subtitles.cues}
    worst = tuple(
        WorstScene(
            rank=sc.rank,
            scene_id=sc.scene_id,
            start_s=float(sc.start_s),
            end_s=float(sc.end_s),
            severity=float(sc.severity),
            masked_s=float(sc.masked_s),
            worst_cue_index=sc.worst_cue_index,
            worst_cue_text="" if sc.worst_cue_index is None else texts.get(sc.worst_cue_index, ""),
            reason=sc.reason,
        )
        for sc in sorted(plan.scenes, key=lambda s: s.rank)[:WORST_SCENES]
    )
    ld = a.loudness
    summary = EpisodeSummary(
        duration_s=float(a.audio.duration_s),
        n_cues=len(a.subtitles.cues),
        speech_s=round(detected_s, 6),
        coverage=round(coverage(a), 6),
        alignment_offset_s=float(first.offset_s),
        alignment_ratio=float(first.rate_ratio),
        alignment_rate_name=a.alignment.rate_name,
        alignment_confidence=float(a.alignment.confidence),
        alignment_breaks=len(a.alignment.breaks_s),
        n_clear=counts["clear"],
        n_at_risk=counts["at-risk"],
        n_masked=counts["masked"],
        n_no_score=counts["no-score"],
        integrated_lufs=_opt(ld.integrated_lufs),
        loudness_range_lu=_opt(ld.loudness_range_lu),
        true_peak_dbtp=float(ld.true_peak_dbtp),
        speech_lufs=_opt(ld.speech_lufs),
        n_events=len(plan.events),
        score=None if scored_s <= 0.0 else round(min(1.0, max(0.0, 1.0 - severity / scored_s)), 6),
        confidence=float(verdict.confidence),
        action=verdict.action,
        verdict_line=verdict.line,
        worst_scenes=worst,
        warnings=tuple(a.warnings),
    )
    return summary, _cue_rows(plan)


def _cue_rows(plan: Plan) -> tuple[CatalogueCue, ...]:
    a = plan.analysis
    timings = {t.index: t for t in a.timings}
    scores: dict[int, CueScore] = {s.index: s for s in a.scores}
    events = {i: e for e in plan.events for i in e.cue_indices}
    rows = []
    for cue in sorted(a.subtitles.cues, key=lambda c: c.index):
        t, s, e = timings.get(cue.index), scores.get(cue.index), events.get(cue.index)
        rows.append(
            CatalogueCue(
                cue_index=cue.index,
                cue_id=cue.cue_id,
                text=cue.text,
                start_s=float(cue.start_s),
                end_s=float(cue.end_s),
                aligned_start_s=None if t is None else float(t.aligned_start_s),
                aligned_end_s=None if t is None else float(t.aligned_end_s),
                onset_error_ms=None if t is None else _opt(t.onset_error_ms),
                flags=() if t is None else tuple(t.flags),
                method="none" if s is None else s.method,
                verdict="no-score" if s is None else s.verdict,
                speech_s=None if s is None else float(s.speech_s),
                sii=None if s is None else _opt(s.sii),
                sbld_lu=None if s is None else _opt(s.sbld_lu),
                stoi=None if s is None else _opt(s.stoi),
                confidence=None if s is None else float(s.confidence),
                reason="" if s is None else s.reason,
                event_id=None if e is None else e.event_id,
                background_gain_db=None if e is None else float(e.background_gain_db),
                dialogue_gain_db=None if e is None else float(e.dialogue_gain_db),
            )
        )
    return tuple(rows)
