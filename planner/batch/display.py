"""Terminal output of ``cueplan triage``, drawn with rich. Computes nothing: every figure comes from a record."""

from __future__ import annotations

import contextlib
import csv
import dataclasses
from collections.abc import Iterator, Sequence
from typing import IO, Any

from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TaskID, TextColumn, TimeRemainingColumn
from rich.table import Table
from rich.text import Text

from planner.batch.reports import EpisodeReport, ReportRow
from planner.batch.triage import TriageSummary

_FINISHED = ("done", "failed")


class TriageProgress:
    """Progress of a batch: one bar for the episodes (with ETA), one per running episode showing its stage.

    Not on a terminal: one line per finished episode. With ``quiet``: nothing.
    """

    def __init__(self, console: Console, *, quiet: bool = False) -> None:
        self._console = console
        self._quiet = quiet
        self._bars: Progress | None = None
        self._tasks: dict[str, TaskID] = {}

    @contextlib.contextmanager
    def shown(self) -> Iterator[TriageProgress]:
        """Draw the bars (on a terminal) while the block runs."""
        if self._quiet or not self._console.is_terminal:
            yield self
            return
        self._bars = Progress(
            TextColumn("{task.description:<32}"),
            BarColumn(),
            MofNCompleteColumn(),
            TimeRemainingColumn(),
            console=self._console,
            transient=True,
        )
        with self._bars:
            yield self

    def episodes(self, stage: str, done: float, total: float) -> None:
        """The overall callback: ``("episodes", finished, to do)``."""
        if self._bars is None:
            return
        if stage not in self._tasks:
            self._tasks[stage] = self._bars.add_task(stage, total=max(total, 1))
        self._bars.update(self._tasks[stage], completed=done, total=max(total, 1))

    def stage(self, episode_id: str, stage: str, done: float, total: float) -> None:
        """The per-episode callback: an analysis stage, or ``done`` / ``failed`` at the end."""
        if self._bars is None:
            if stage in _FINISHED and not self._quiet:
                self._console.print(f"{episode_id}: {stage}", highlight=False, markup=False)
            return
        key = f"  {episode_id}"
        if stage in _FINISHED:
            if key in self._tasks:
                self._bars.remove_task(self._tasks.pop(key))
            return
        label = f"  {episode_id[:18]} {stage}"
        if key not in self._tasks:
            self._tasks[key] = self._bars.add_task(label, total=max(total, 1e-9))
        self._bars.update(self._tasks[key], description=label, completed=min(done, total), total=max(total, 1e-9))


def _fmt(value: float | None, digits: int = 2) -> str:
    return "n/a" if value is None else f"{value:.{digits}f}"


def print_run(console: Console, summary: TriageSummary) -> None:
    """What a batch did, then the failed episodes and the files left out."""
    table = Table(title=Text(f"triage: {summary.catalog}"), show_header=False, title_justify="left")
    table.add_column("what", style="bold")
    table.add_column("count", justify="right")
    table.add_row("episodes found", str(summary.total))
    table.add_row("finished now", str(len(summary.done)))
    table.add_row("already current (skipped)", str(len(summary.skipped)))
    table.add_row("[red]failed[/]" if summary.failed else "failed", str(len(summary.failed)))
    table.add_row("files not in an episode", str(len(summary.unpaired)))
    table.add_row("time", f"{summary.elapsed_s:.1f} s")
    console.print(table)
    if summary.failed:
        failed = Table(title="failed episodes", title_justify="left")
        failed.add_column("episode", no_wrap=True)
        failed.add_column("message", overflow="fold")
        for episode_id, message in summary.failed:
            failed.add_row(Text(episode_id), Text(message))
        console.print(failed)
    if summary.unpaired:
        unpaired = Table(title="files not in an episode", title_justify="left")
        unpaired.add_column("file", overflow="fold")
        unpaired.add_column("why", overflow="fold")
        for item in summary.unpaired:
            unpaired.add_row(Text(item.path), Text(item.reason))
        console.print(unpaired)


def print_report(console: Console, rows: Sequence[ReportRow]) -> None:
    """The ranked episodes, worst first."""
    table = Table(title="episodes, worst first", title_justify="left")
    table.add_column("#", justify="right", no_wrap=True)
    table.add_column("episode", overflow="fold", max_width=24)
    table.add_column("action", no_wrap=True)
    table.add_column("score", justify="right", no_wrap=True)
    table.add_column("conf", justify="right", no_wrap=True)
    table.add_column("worst scene", no_wrap=True)
    table.add_column("reason", overflow="fold", ratio=1)
    for r in rows:
        where = f"{r.worst_scene_id}\n{r.worst_tc_in}\n{r.worst_tc_out}" if r.worst_scene_id else ""
        action = r.action if r.status == "done" else f"[red]{r.status}[/]" if r.status == "failed" else r.status
        table.add_row(str(r.rank), Text(r.episode_id), action or "", _fmt(r.score), _fmt(r.confidence), where, Text(r.reason))
    if not rows:
        console.print("no episodes match", highlight=False)
        return
    console.print(table)


def write_report_csv(stream: IO[str], rows: Sequence[ReportRow]) -> None:
    """The ranked episodes as CSV: a header of :class:`ReportRow` field names, one row per episode."""
    names = [f.name for f in dataclasses.fields(ReportRow)]
    writer = csv.writer(stream, lineterminator="\n")
    writer.writerow(names)
    for r in rows:
        writer.writerow(["" if getattr(r, n) is None else getattr(r, n) for n in names])


def print_episode(console: Console, report: EpisodeReport) -> None:
    """One episode from the catalogue: its figures, worst scenes, and its at-risk and masked cues."""
    e: dict[str, Any] = report.episode
    table = Table(title=Text(f"episode {e['episode_id']}"), show_header=False, title_justify="left")
    table.add_column("what", style="bold", no_wrap=True)
    table.add_column("value", overflow="fold")
    table.add_row("status", Text(e["status"] + (f": {e['message']}" if e["message"] else "")))
    for role in ("mix", "dialogue", "background", "subtitles"):
        if e[f"{role}_path"]:
            table.add_row(role, Text(e[f"{role}_path"]))
    if e["status"] == "done":
        table.add_row("verdict", Text(e["verdict_line"]))
        table.add_row("score / confidence", f"{_fmt(e['score'])} / {_fmt(e['confidence'])}")
        table.add_row("duration", f"{report.tc(0.0)} to {report.tc(e['duration_s'])} ({e['duration_s']:.1f} s)")
        table.add_row("coverage", f"{100 * e['coverage']:.0f} % of detected speech has a cue")
        table.add_row(
            "alignment",
            f"rate {e['alignment_rate_name']}, offset {e['alignment_offset_s']:+.2f} s, "
            f"{e['alignment_breaks']} edits, confidence {e['alignment_confidence']:.2f}",
        )
        table.add_row(
            "verdicts", f"{e['n_masked']} masked, {e['n_at_risk']} at-risk, {e['n_clear']} clear, {e['n_no_score']} no-score"
        )
        table.add_row("loudness", f"{_fmt(e['integrated_lufs'], 1)} LUFS, true peak {_fmt(e['true_peak_dbtp'], 1)} dBTP")
        for warning in e["warnings_json"] or ():
            table.add_row("[yellow]warning[/]", Text(warning))
    table.add_row("attempts", str(e["attempts"]))
    console.print(table)
    if e["status"] != "done":
        return
    scenes = Table(title="worst scenes", title_justify="left")
    for name in ("#", "scene", "TC in", "TC out"):
        scenes.add_column(name, no_wrap=True)
    scenes.add_column("reason", overflow="fold")
    for sc in e["worst_scenes_json"] or ():
        scenes.add_row(str(sc["rank"]), sc["scene_id"], report.tc(sc["start_s"]), report.tc(sc["end_s"]), Text(sc["reason"]))
    console.print(scenes)
    flagged = [c for c in report.cues if c["verdict"] in ("masked", "at-risk")]
    cues = Table(title=f"at-risk and masked cues ({len(flagged)} of {len(report.cues)})", title_justify="left")
    for name in ("cue", "TC in", "verdict", "SII", "move dB"):
        cues.add_column(name, no_wrap=True)
    cues.add_column("text", overflow="fold")
    for c in flagged:
        move = "" if c["event_id"] is None else f"{c['background_gain_db']:+.1f}/{c['dialogue_gain_db']:+.1f}"
        text = Text(c["text"].replace("\n", " / "))
        cues.add_row(str(c["cue_index"]), report.tc(c["aligned_start_s"]), c["verdict"], _fmt(c["sii"]), move, text)
    console.print(cues)
