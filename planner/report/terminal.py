"""Terminal output drawn with rich. Computes nothing: every row comes from :mod:`planner.report.views`.

Data (cue text above all) is always drawn as :class:`rich.text.Text`, never parsed as
markup. ``plain=True`` draws with ASCII rules and no style at all, for logs and pipes.
Everything fits 80 columns (cells wrap).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from rich import box
from rich.console import Console
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from planner.model import Analysis, Plan
from planner.report.figures import VERDICT_ORDER, VerifiedCue, score_kind, summary, worst_cues, worst_timed
from planner.report.palette import ACTION_COLOURS, MOVE_COLOUR, UNCOVERED_COLOUR, VERDICT_COLOURS
from planner.report.views import (
    MOVE_SYMBOL,
    SHORT_SYMBOL,
    STRIP_LEGEND,
    STRIP_SYMBOLS,
    Report,
    View,
    build_report,
    report_json,
)

if TYPE_CHECKING:
    from planner.pipeline import Inspection
    from planner.render.renderer import RenderReport
    from planner.render.verify import VerifyReport

__all__ = [
    "print_alignment_summary", "print_inspection", "print_render", "print_report", "print_run_summary", "print_verify",
    "report_json",
]  # fmt: skip


def _fmt(value: float | None, unit: str, digits: int = 1) -> str:
    return "n/a" if value is None else f"{value:.{digits}f} {unit}"


def _clock(t_s: float) -> str:
    m, s = divmod(t_s, 60.0)
    h, m = divmod(int(m), 60)
    return f"{h:d}:{m:02d}:{s:06.3f}"


def print_inspection(console: Console, result: Inspection) -> None:
    """Summary of one audio file and, when given, its subtitles."""
    a, ld = result.audio, result.loudness
    table = Table(title=f"inspect: {result.path}", show_header=False, title_justify="left")
    table.add_column("what", style="bold")
    table.add_column("value")
    depth = f"{a.bit_depth}-bit" if a.bit_depth else "float"
    table.add_row("audio", f"{a.format} {a.subtype} ({depth}), {a.sample_rate_hz} Hz, {a.n_channels} ch ({a.layout})")
    table.add_row("duration", f"{_clock(a.duration_s)} ({a.duration_s:.3f} s)")
    table.add_row("integrated loudness", _fmt(ld.integrated_lufs, "LUFS"))
    table.add_row("loudness range", _fmt(ld.loudness_range_lu, "LU"))
    table.add_row("true peak", _fmt(ld.true_peak_dbtp, "dBTP"))
    table.add_row("max momentary / short-term", f"{_fmt(ld.max_momentary_lufs, 'LUFS')} / {_fmt(ld.max_short_term_lufs, 'LUFS')}")
    if result.subtitles is not None:
        s = result.subtitles
        table.add_row("subtitles", f"{result.subtitles_path}: {s.format.upper()}, {s.encoding}{' with BOM' if s.bom else ''}")
        table.add_row("cues", str(len(s.cues)))
        if s.cues:
            first, last = s.cues[0].start_s, max(c.end_s for c in s.cues)
            table.add_row("subtitle span", f"{_clock(first)} to {_clock(last)} (audio ends {_clock(a.duration_s)})")
            if last > a.duration_s:
                table.add_row("[yellow]warning[/]", "cues run past the end of the audio")
        for note in s.notes:
            table.add_row("[yellow]note[/]", note)
    console.print(table)


# ----------------------------------------------------------------------------- drawing helpers
_STRIP_STYLES = {
    **{sym: f"bold {VERDICT_COLOURS[name]}" for name, sym in STRIP_SYMBOLS if name in VERDICT_COLOURS},
    "!": f"bold {UNCOVERED_COLOUR}",
    MOVE_SYMBOL: MOVE_COLOUR,
    SHORT_SYMBOL: f"bold {VERDICT_COLOURS['masked']}",
}


class _Pen:
    """Styles that vanish in plain mode, and tables drawn the same way everywhere."""

    def __init__(self, plain: bool) -> None:
        self.plain = plain

    def style(self, style: str) -> str:
        return "" if self.plain else style

    def text(self, value: str, style: str = "") -> Text:
        return Text(value, style=self.style(style))

    def verdict(self, verdict: str) -> Text:
        return self.text(verdict, f"bold {VERDICT_COLOURS[verdict]}" if verdict in VERDICT_COLOURS else "")

    def table(self, title: str) -> Table:
        return Table(
            title=Text(title, style=self.style("bold")), title_justify="left", box=box.ASCII if self.plain else box.SIMPLE_HEAD,
            header_style=self.style("bold"), title_style="", border_style=self.style("dim"), pad_edge=False, expand=False,
            safe_box=True, collapse_padding=True,
        )  # fmt: skip

    def heading(self, console: Console, title: str) -> None:
        console.print(Text(title, style=self.style("bold")))


def _more(shown: int, total: int) -> str:
    return f"{shown} of {total}" if total > shown else f"{total}"


def _draw_verdict(console: Console, report: Report, pen: _Pen) -> None:
    v = report.verdict
    line = Text(v.action, style=pen.style(f"bold {ACTION_COLOURS[v.action]}"))
    line.append(f": {v.why}")
    console.print(line)
    console.print(Text(f"confidence {v.confidence:.2f}, {v.moves} planned moves, {v.masked_cues} masked lines, "
                       f"{100 * v.flagged_share:.0f} % of the dialogue at risk or masked"))  # fmt: skip


def _summary_panel(lines: Sequence[tuple[str, str]], title: str, pen: _Pen) -> Panel:
    grid = Table.grid(padding=(0, 1))
    grid.add_column(style=pen.style("bold"), no_wrap=True)
    grid.add_column(overflow="fold")
    for label, value in lines:
        grid.add_row(Text(label), pen.text(value, "yellow" if label == "warning" else ""))
    return Panel(grid, title=Text(title), title_align="left", box=box.ASCII if pen.plain else box.ROUNDED,
                 border_style=pen.style("dim"), expand=False, safe_box=True)  # fmt: skip


def _draw_strip(console: Console, report: Report, pen: _Pen) -> None:
    st = report.strip
    pen.heading(console, f"how the programme runs (one mark = {st.slice_s:.1f} s; scenes: rank 1-9)")
    for label, lane in (("score ", st.score), ("moves ", st.moves), ("scenes", st.scenes)):
        row = Text(f"{label} |")
        for ch in lane:
            row.append(ch, style=pen.style(_STRIP_STYLES.get(ch, "")))
        row.append("|")
        console.print(row, no_wrap=True, overflow="crop")
    axis = f"{st.tc_start}{' ' * max(1, len(st.score) + 2 - len(st.tc_start) - len(st.tc_end))}{st.tc_end}"
    console.print(Text(f"       {axis}"), no_wrap=True, overflow="crop")
    legend = Text("       ")
    for sym, words in STRIP_LEGEND:
        legend.append(sym, style=pen.style(_STRIP_STYLES.get(sym, "")))
        legend.append(f" {words}  ")
    console.print(legend)


def _draw_scenes(console: Console, report: Report, pen: _Pen) -> None:
    t = pen.table(f"worst scenes ({_more(len(report.scenes), report.n_scenes)})")
    t.add_column("#", justify="right", no_wrap=True)
    t.add_column("TC in / out", no_wrap=True)
    t.add_column("why, worst line, planned move", overflow="fold")
    for r in report.scenes:
        cell = Text(r.reason)
        if r.worst_cue is not None:
            cell.append(f"\nline {r.worst_cue}: ")
            cell.append(Text(f'"{r.worst_text}"', style=pen.style("italic")))
            cell.append(" ")
            cell.append(pen.verdict(r.worst_verdict))
            cell.append(f" {r.worst_score}")
        cell.append(f"\nmove: {r.move}")
        if r.measured:
            cell.append(f"\n{r.measured}")
        t.add_row(Text(str(r.rank)), Text(f"{r.tc_in}\n{r.tc_out}\n{r.scene_id}"), cell)
    console.print(t if report.scenes else Text("no scene has a masked or at-risk line"))


def _draw_events(console: Console, report: Report, pen: _Pen) -> None:
    t = pen.table(f"gain moves ({_more(len(report.events), report.n_events)}), most needed, in time order")
    unit = report.score_unit
    for name, justify in (("event", "left"), ("TC in", "left"), ("TC out", "left"), ("bkg", "right"), ("dia", "right"),
                          ("ramps", "right"), ("cues", "left"), (unit, "left")):  # fmt: skip
        t.add_column(name, justify=justify, no_wrap=name != "cues", overflow="fold")  # type: ignore[arg-type]
    for r in report.events:
        score = Text(r.change)
        if not r.reachable:
            score.append(" " + SHORT_SYMBOL, style=pen.style(_STRIP_STYLES[SHORT_SYMBOL]))
        t.add_row(Text(r.event_id), Text(r.tc_in), Text(r.tc_out), Text(f"{r.background_gain_db:+.1f}"),
                  Text(f"{r.dialogue_gain_db:+.1f}"), Text(f"{r.ramp_in_ms:.0f}/{r.ramp_out_ms:.0f}"), Text(r.cues),
                  score)  # fmt: skip
    if not report.events:
        console.print(Text("no gain moves planned"))
        return
    console.print(t)
    console.print(Text(f"gains dB, ramps ms; {unit}: worst cue before>after, {SHORT_SYMBOL} short of target"))


def _draw_subtitles(console: Console, report: Report, pen: _Pen) -> None:
    t = pen.table(f"subtitle problems and lines viewers must read ({_more(len(report.subtitles), report.n_subtitle_rows)})")
    t.add_column("TC in", no_wrap=True)
    t.add_column("cue", justify="right", no_wrap=True)
    t.add_column("problem", overflow="fold", ratio=1)
    t.add_column("text", overflow="fold", ratio=1)
    for r in report.subtitles:
        problem = Text(r.problem)
        if r.verdict in ("masked", "at-risk"):
            problem.append(" (")
            problem.append(pen.verdict(r.verdict))
            problem.append(f", {r.score})")
        t.add_row(Text(r.tc_in), Text("-" if r.cue is None else str(r.cue)), problem, Text(r.text))
    console.print(t if report.subtitles else Text("no subtitle problems and no masked lines"))


# ----------------------------------------------------------------------------- reports
def print_report(
    console: Console,
    plan: Plan,
    *,
    top: int = 10,
    view: View = "editor",
    verify_rows: Sequence[VerifiedCue] | None = None,
    plain: bool = False,
) -> None:
    """The ranked report of a plan for one reader (``cueplan report``).

    Sections in the view's order (:data:`planner.report.views.SECTIONS`): the editor view
    opens with subtitle problems, the mixer view with the gain moves, the archive view with
    the episode verdict; then the summary, the strip and the worst scenes (``top`` rows per list).
    """
    report = build_report(plan, view=view, top=top, verify_rows=verify_rows)
    pen = _Pen(plain)
    for n, section in enumerate(report.sections):
        if n:
            console.print()
        if section == "verdict":
            _draw_verdict(console, report, pen)
        elif section == "summary":
            lines = (("episode", report.verdict.line), *report.summary.lines())
            console.print(_summary_panel(lines, f"summary ({report.view} view)", pen))
        elif section == "strip":
            _draw_strip(console, report, pen)
        elif section == "scenes":
            _draw_scenes(console, report, pen)
        elif section == "events":
            _draw_events(console, report, pen)
        elif section == "subtitles":
            _draw_subtitles(console, report, pen)


def print_run_summary(console: Console, plan: Plan, written: Mapping[str, Path], *, plain: bool = False) -> None:
    """End of ``cueplan analyse`` / ``cueplan demo``: counts per verdict, the ten worst cues, the files written."""
    pen = _Pen(plain)
    a = plan.analysis
    counts = Text(f"{len(a.scores)} cues: ")
    for n, verdict in enumerate(VERDICT_ORDER):
        counts.append(", " if n else "")
        counts.append(f"{sum(1 for s in a.scores if s.verdict == verdict)} ")
        counts.append(pen.verdict(verdict))
    counts.append(f"; {len(plan.events)} gain moves planned, {len(plan.scenes)} scenes")
    console.print(counts)
    rows = worst_cues(a, score_kind(plan), 10)
    if rows:
        t = pen.table(f"worst cues ({len(rows)})")
        for name in ("cue", "TC in", "verdict", "score", "text"):
            t.add_column(name, justify="right" if name == "cue" else "left", no_wrap=name != "text", overflow="fold")
        for r in rows:
            t.add_row(Text(str(r.index)), Text(r.tc_in), pen.verdict(r.verdict), Text(r.score_text), Text(r.text))
        console.print(t)
    else:
        console.print(Text("no cue is at risk or masked"))
    files = pen.table("written")
    files.add_column("what", no_wrap=True)
    files.add_column("where", overflow="fold")
    for name, path in sorted(written.items()):
        files.add_row(Text(name), Text(str(path)))
    console.print(files)


def print_alignment_summary(console: Console, analysis: Analysis, *, top: int = 10, plain: bool = False) -> None:
    """``cueplan align``: the mapping found, coverage, counts per flag, the worst-timed cues."""
    pen = _Pen(plain)
    s = summary(analysis)
    lines = [("alignment", s.alignment), *[l for l in s.lines() if l[0] in ("coverage", "subtitle flags", "warning")]]
    console.print(_summary_panel(lines, "alignment", pen))
    rows = worst_timed(analysis, top)
    t = pen.table(f"worst-timed cues ({len(rows)}), ms from the speech after the mapping (+ late)")
    for name in ("cue", "TC in", "in ms", "out ms", "flags", "text"):
        t.add_column(name, justify="right" if name in ("cue", "in ms", "out ms") else "left",
                     no_wrap=name in ("cue", "TC in"), overflow="fold")  # fmt: skip
    for r in rows:
        t.add_row(Text(str(r.index)), Text(r.tc_in), Text(_ms(r.onset_error_ms)), Text(_ms(r.offset_error_ms)),
                  Text(", ".join(r.flags) or "-"), Text(r.text))  # fmt: skip
    console.print(t if rows else Text("no cue has speech under it"))


def _ms(value: float | None) -> str:
    return "-" if value is None else f"{value:+.0f}"


# ----------------------------------------------------------------------------- render and verify
#: Printed after every render: what the output is and what it is not.
LISTEN_CAUTION = "the output is loudness-normalised and peak-limited: listen to it before delivery"


def print_render(console: Console, render: RenderReport, verify: VerifyReport | None = None, *, plain: bool = False) -> None:
    """End of ``cueplan render``: loudness and true peak before and after, the limiter, then the verify counts."""
    pen = _Pen(plain)

    def lufs(v: float | None) -> str:
        return "n/a" if v is None else f"{v:.1f} LUFS"

    ok = {True: "within tolerance", False: "OUTSIDE tolerance", None: "no target"}[render.within_tolerance]
    peak_ok = {True: "at or below the ceiling", False: "ABOVE the ceiling", None: "no ceiling"}[render.true_peak_ok]
    lines = [
        ("output", render.output_path),
        ("standard", render.standard),
        ("loudness", f"{lufs(render.loudness_before_lufs)} in, {lufs(render.loudness_after_lufs)} out ({ok}), "
                     f"gain {render.gain_applied_db:+.1f} dB"),
        ("true peak", f"{render.true_peak_before_dbtp:.1f} dBTP in, {render.true_peak_after_dbtp:.1f} dBTP out ({peak_ok})"),
        ("limiter", f"{render.limiter_max_reduction_db:.1f} dB at most, active {render.limiter_active_s:.1f} s"),
        ("events", f"{render.n_events} applied over {render.duration_s:.0f} s"),
        *[("note", n) for n in render.notes],
    ]  # fmt: skip
    console.print(_summary_panel(lines, f"render ({render.kind})", pen))
    console.print(pen.text(LISTEN_CAUTION, "yellow"))
    if verify is not None:
        print_verify(console, verify, plain=plain)


def print_verify(console: Console, report: VerifyReport, *, plain: bool = False, top: int = 10) -> None:
    """``cueplan verify``: how many planned cues reached the target, and the ``top`` furthest from it."""
    pen = _Pen(plain)
    console.print(Text(f"{report.n_cues_reached} of {report.n_cues} planned cues reached the target "
                       f"({report.method} scoring, {report.n_cues_unscored} not scored); "
                       f"{report.n_reachable_events_reached} of {report.n_events_reachable} reachable events"))  # fmt: skip
    short = [r for r in report.rows if r.reached is False][: max(0, top)]
    if short:
        t = pen.table(f"short of the target ({len(short)} shown)")
        for name in ("cue", "event", "before", "predicted", "measured", "target"):
            t.add_column(name, justify="right" if name != "event" else "left", no_wrap=True)
        for r in short:
            t.add_row(Text(str(r.cue_index)), Text(r.event_id), Text(_num(r.score_before)), Text(_num(r.predicted_after)),
                      Text(_num(r.measured_after)), Text(_num(r.target)))  # fmt: skip
        console.print(t)
    for note in report.notes:
        console.print(pen.text(f"note: {note}", "yellow"))


def _num(value: float | None) -> str:
    return "-" if value is None else f"{value:.2f}"
