"""Reading a triage catalogue back: episodes ranked worst first, and one episode in full.

Ranking (docs/triage.md, "Report"): finished episodes by score, lowest first (the score is
the speech-weighted share of the target reached, :mod:`planner.batch.summary`), ties by
higher confidence first, then by episode id; episodes with no scored speech follow, then
failed and still-running ones, by id.
"""

from __future__ import annotations

import difflib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, get_args

from planner.batch.catalogue import Catalogue
from planner.errors import InputError, SettingsError
from planner.io.timecode import frame_rate
from planner.report.figures import Clock
from planner.report.views import ActionClass

#: The action classes, from least to most work.
ACTIONS: tuple[str, ...] = get_args(ActionClass)


@dataclass(frozen=True)
class ReportRow:
    """One episode in the ranked report. Times in seconds of programme; score and confidence 0..1.

    ``reason`` is the worst scene's reason for a finished episode, the message for a failed one.
    """

    rank: int
    episode_id: str
    status: str
    score: float | None
    confidence: float | None
    action: str | None
    duration_s: float | None
    fps: str | None
    worst_scene_id: str | None
    worst_start_s: float | None
    worst_end_s: float | None
    worst_tc_in: str
    worst_tc_out: str
    worst_cue_text: str
    reason: str


@dataclass(frozen=True)
class EpisodeReport:
    """One episode's catalogue row (JSON columns decoded), its cue rows by cue index, and its clock."""

    episode: dict[str, Any]
    cues: tuple[dict[str, Any], ...]
    clock: Clock

    def tc(self, t_s: float | None) -> str:
        """Timecode of a programme time at the episode's frame rate and start ("" for None)."""
        return "" if t_s is None else self.clock.tc(t_s)


def clock_of_row(row: dict[str, Any]) -> Clock:
    """The clock (frame rate, drop-frame, programme start) an episode was analysed with."""
    analysis = json.loads(row["settings_json"])["analysis"]
    rate = frame_rate(str(analysis["fps"]), bool(analysis["drop_frame"]))
    return Clock(rate, str(analysis["programme_start"]))


def _rank_key(row: dict[str, Any]) -> tuple[Any, ...]:
    if row["status"] != "done":
        return (2, 0.0, 0.0, row["episode_id"])
    if row["score"] is None:
        return (1, 0.0, 0.0, row["episode_id"])
    return (0, row["score"], -(row["confidence"] or 0.0), row["episode_id"])


def _report_row(rank: int, row: dict[str, Any]) -> ReportRow:
    scenes = row.get("worst_scenes_json") or []
    worst = scenes[0] if scenes else None
    clock = clock_of_row(row)
    if row["status"] == "done":
        reason = "no scene" if worst is None else worst["reason"]
    else:
        reason = row["message"] or "still running, or stopped by a killed run; rerun the batch"
    return ReportRow(
        rank=rank,
        episode_id=row["episode_id"],
        status=row["status"],
        score=row["score"],
        confidence=row["confidence"],
        action=row["action"],
        duration_s=row["duration_s"],
        fps=row["fps"],
        worst_scene_id=None if worst is None else worst["scene_id"],
        worst_start_s=None if worst is None else worst["start_s"],
        worst_end_s=None if worst is None else worst["end_s"],
        worst_tc_in="" if worst is None else clock.tc(worst["start_s"]),
        worst_tc_out="" if worst is None else clock.tc(worst["end_s"]),
        worst_cue_text="" if worst is None else worst["worst_cue_text"],
        reason=reason,
    )


def triage_report(catalog: str | Path, *, action: str | None = None, min_confidence: float | None = None) -> list[ReportRow]:
    """The catalogue's episodes ranked worst first (module docstring), optionally filtered.

    Parameters
    ----------
    catalog : str or Path
        The catalogue file.
    action : {"ok", "targeted-gains", "remix-needed"}, optional
        Keep only finished episodes of this action class.
    min_confidence : float, optional
        Keep only finished episodes whose confidence is at least this, 0..1.

    Raises
    ------
    InputError
        A missing or unusable catalogue; SettingsError for a bad filter value.
    """
    if action is not None and action not in ACTIONS:
        raise SettingsError(f"action={action!r} must be one of {', '.join(ACTIONS)}; pass one of those")
    if min_confidence is not None and not 0.0 <= min_confidence <= 1.0:
        raise SettingsError(f"min_confidence={min_confidence!r} must be between 0 and 1; pass a value in that range")
    with Catalogue(catalog, create=False) as catalogue:
        rows = catalogue.episodes()
    if action is not None:
        rows = [r for r in rows if r["status"] == "done" and r["action"] == action]
    if min_confidence is not None:
        rows = [r for r in rows if r["confidence"] is not None and r["confidence"] >= min_confidence]
    return [_report_row(rank, row) for rank, row in enumerate(sorted(rows, key=_rank_key), start=1)]


def episode_report(catalog: str | Path, episode_id: str) -> EpisodeReport:
    """One episode's catalogue row and cue rows.

    Raises
    ------
    InputError
        A missing or unusable catalogue, or an episode id the catalogue does not hold (the
        message suggests the closest ids).
    """
    with Catalogue(catalog, create=False) as catalogue:
        row = catalogue.episode(episode_id)
        if row is None:
            ids = [r["episode_id"] for r in catalogue.episodes()]
            close = difflib.get_close_matches(episode_id, ids, n=3)
            hint = f"did you mean {', '.join(close)}?" if close else "`cueplan triage report` lists the episode ids"
            raise InputError(f"no episode {episode_id!r} in the catalogue; {hint}", path=catalog)
        return EpisodeReport(episode=row, cues=tuple(catalogue.cues(episode_id)), clock=clock_of_row(row))
