"""The HTML report's timeline of the whole programme, drawn with plotly.

Two panels on one time axis: lanes (detected speech, cues by verdict, planned moves,
scenes) above, the per-cue score below, with a range slider under it so an hour can be
zoomed to a line. The time axis is a plotly date axis carrying programme time from the
programme-start timecode (``10:00:00`` reads as 10:00:00); hover texts give exact
timecodes. Every subtitle text is HTML-escaped before it goes into a hover text (plotly
renders a subset of HTML in them), and plotly itself escapes ``<`` and ``>`` inside the
JSON it embeds.
"""

from __future__ import annotations

import html
from collections.abc import Sequence
from datetime import datetime, timedelta

import plotly.graph_objects as go
import plotly.io as pio
from plotly.subplots import make_subplots

from planner.io.timecode import timecode_to_seconds
from planner.model import Plan
from planner.report.figures import (
    VERDICT_ORDER,
    Clock,
    VerifiedCue,
    clock_of,
    cue_texts,
    move_words,
    one_line,
    score_kind,
    score_value,
)
from planner.report.palette import CLEAR_SCENE_COLOUR, MOVE_COLOUR, SCENE_COLOURS, SPEECH_COLOUR, UNCOVERED_COLOUR, VERDICT_COLOURS

#: Fill patterns by verdict, so the lanes read without colour.
VERDICT_PATTERNS = {"masked": "x", "at-risk": "/", "no-score": ".", "clear": ""}
#: Score markers by verdict.
VERDICT_MARKERS = {"masked": "x", "at-risk": "diamond", "no-score": "circle-open", "clear": "circle"}
LANES = ("speech", "cues", "moves", "scenes")  # bottom to top
_EPOCH = datetime(1970, 1, 1)
#: The div holding the chart (fixed, so the page is byte-identical for equal plans).
CHART_ID = "timeline"


class _Axis:
    """Programme seconds to the date-axis values plotly takes (ISO strings, durations in ms)."""

    def __init__(self, clock: Clock) -> None:
        self.clock = clock
        self.origin_s = timecode_to_seconds(clock.start, clock.rate)

    def at(self, t_s: float) -> str:
        return (_EPOCH + timedelta(seconds=self.origin_s + t_s)).isoformat(timespec="milliseconds")

    @staticmethod
    def ms(start_s: float, end_s: float) -> float:
        return round(1000.0 * max(end_s - start_s, 0.0), 3)

    def span(self, start_s: float, end_s: float) -> str:
        return f"{self.clock.tc(start_s)} - {self.clock.tc(end_s)}"


def _bars(axis: _Axis, spans: Sequence[tuple[float, float, str]], lane: str, name: str, colour: str, pattern: str = "") -> go.Bar:
    return go.Bar(
        orientation="h", y=[lane] * len(spans), base=[axis.at(a) for a, _, _ in spans], x=[axis.ms(a, b) for a, b, _ in spans],
        hovertext=[h for _, _, h in spans], hoverinfo="text", name=name, marker={"color": colour, "line": {"width": 0},
        "pattern": {"shape": pattern, "fgcolor": "#ffffff", "size": 6}}, width=0.7, legendgroup=lane,
    )  # fmt: skip


def timeline_figure(plan: Plan, *, verify_rows: Sequence[VerifiedCue] | None = None) -> go.Figure:
    """The timeline of a plan (module docstring): lanes above, per-cue score below, a range slider."""
    a, kind = plan.analysis, score_kind(plan)
    axis = _Axis(clock_of(a))
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.06, row_heights=[0.55, 0.45])
    speech = [(s, e, f"speech {axis.span(s, e)}") for s, e in a.activity.segments()]
    fig.add_trace(_bars(axis, speech, "speech", "detected speech", SPEECH_COLOUR), row=1, col=1)
    gaps = [(u.start_s, u.end_s, f"speech with no cue {axis.span(u.start_s, u.end_s)}") for u in a.uncovered]
    if gaps:
        fig.add_trace(_bars(axis, gaps, "speech", "speech with no cue", UNCOVERED_COLOUR, "x"), row=1, col=1)
    texts, scores = cue_texts(a), {s.index: s for s in a.scores}
    by_verdict: dict[str, list[tuple[float, float, str]]] = {v: [] for v in VERDICT_ORDER}
    points: dict[str, list[tuple[str, float, str]]] = {v: [] for v in VERDICT_ORDER}
    for t in a.timings:
        s = scores.get(t.index)
        state: str = s.verdict if s is not None else "no-score"
        value = score_value(s, kind) if s is not None else None
        shown = f"{value:.2f}" if value is not None and kind == "sii" else f"{value:+.1f} LU" if value is not None else "no score"
        flags = f"<br>flags: {', '.join(t.flags)}" if t.flags else ""
        text = html.escape(one_line(texts.get(t.index, "")))
        hover = f"cue {t.index} {axis.span(t.aligned_start_s, t.aligned_end_s)}<br>{state}, {shown}{flags}<br>{text}"
        by_verdict[state].append((t.aligned_start_s, t.aligned_end_s, hover))
        if value is not None:
            points[state].append((axis.at((t.aligned_start_s + t.aligned_end_s) / 2), value, hover))
    for verdict in reversed(VERDICT_ORDER):
        if by_verdict[verdict]:
            fig.add_trace(_bars(axis, by_verdict[verdict], "cues", f"cue {verdict}", VERDICT_COLOURS[verdict],
                                VERDICT_PATTERNS[verdict]), row=1, col=1)  # fmt: skip
        if points[verdict]:
            fig.add_trace(go.Scatter(
                x=[p[0] for p in points[verdict]], y=[p[1] for p in points[verdict]], hovertext=[p[2] for p in points[verdict]],
                hoverinfo="text", mode="markers", name=f"score {verdict}", legendgroup="cues", showlegend=False,
                marker={"color": VERDICT_COLOURS[verdict], "symbol": VERDICT_MARKERS[verdict], "size": 8,
                        "line": {"width": 1, "color": VERDICT_COLOURS[verdict]}},
            ), row=2, col=1)  # fmt: skip
    moves = [(e.start_s - e.ramp_in_ms / 1000, e.end_s + e.ramp_out_ms / 1000,
              f"{e.event_id} {axis.span(e.start_s, e.end_s)}<br>{move_words(e)}<br>{html.escape(e.reason)}")
             for e in plan.events]  # fmt: skip
    short = [m for m, e in zip(moves, plan.events) if not e.reachable]
    reached = [m for m, e in zip(moves, plan.events) if e.reachable]
    if reached:
        fig.add_trace(_bars(axis, reached, "moves", "planned move", MOVE_COLOUR), row=1, col=1)
    if short:
        fig.add_trace(_bars(axis, short, "moves", "move short of target", MOVE_COLOUR, "x"), row=1, col=1)
    for k, sc in enumerate(sorted(plan.scenes, key=lambda s: s.rank)):
        colour = SCENE_COLOURS[min(k // 3, len(SCENE_COLOURS) - 1)] if sc.masked_s > 0 else CLEAR_SCENE_COLOUR
        hover = f"scene {sc.scene_id}, rank {sc.rank}<br>{axis.span(sc.start_s, sc.end_s)}<br>{html.escape(sc.reason)}"
        bar = _bars(axis, [(sc.start_s, sc.end_s, hover)], "scenes", "scenes", colour)
        bar.update(showlegend=k == 0, text=[f"#{sc.rank}" if sc.masked_s > 0 else ""], textposition="inside", textangle=0,
                   insidetextanchor="middle", textfont={"color": "#ffffff"})  # fmt: skip
        fig.add_trace(bar, row=1, col=1)
    if verify_rows:
        timing = {t.index: t for t in a.timings}
        done = [r for r in verify_rows if r.measured_after is not None and r.cue_index in timing]
        fig.add_trace(go.Scatter(
            x=[axis.at((timing[r.cue_index].aligned_start_s + timing[r.cue_index].aligned_end_s) / 2) for r in done],
            y=[r.measured_after for r in done], mode="markers", name="measured after render",
            hovertext=[f"cue {r.cue_index} measured after render: {r.measured_after:.2f}" for r in done],
            hoverinfo="text", marker={"color": MOVE_COLOUR, "symbol": "star", "size": 9},
        ), row=2, col=1)  # fmt: skip
    target = float(plan.settings.get("target_sii" if kind == "sii" else "target_lu", 0.0))
    end_s = a.audio.duration_s
    fig.add_trace(go.Scatter(x=[axis.at(0.0), axis.at(end_s)], y=[target, target], mode="lines", name="target",
                             hoverinfo="skip", line={"color": "#333333", "dash": "dash", "width": 1}), row=2, col=1)  # fmt: skip
    fig.update_layout(
        barmode="overlay", height=600, margin={"l": 70, "r": 20, "t": 20, "b": 20}, plot_bgcolor="#ffffff",
        paper_bgcolor="#ffffff", font={"family": "system-ui, sans-serif", "size": 12, "color": "#222222"},
        legend={"orientation": "h", "y": 1.01, "yanchor": "bottom", "x": 0.0}, hovermode="closest", bargap=0.2,
    )  # fmt: skip
    fig.update_yaxes(categoryorder="array", categoryarray=list(LANES), fixedrange=True, row=1, col=1)
    fig.update_yaxes(title_text="SII" if kind == "sii" else "speech over background, LU", range=[0, 1.02] if kind == "sii" else None,
                     gridcolor="#e6e6e6", fixedrange=True, zeroline=False, row=2, col=1)  # fmt: skip
    fig.update_xaxes(type="date", tickformat="%H:%M:%S", gridcolor="#eeeeee", range=[axis.at(0.0), axis.at(end_s)])
    fig.update_xaxes(rangeslider={"visible": True, "thickness": 0.07, "range": [axis.at(0.0), axis.at(end_s)]}, row=2, col=1)
    return fig


def chart_html(fig: go.Figure) -> str:
    """The figure as an HTML fragment with plotly.js inline (no network), fixed div id."""
    config = {"displaylogo": False, "responsive": True, "modeBarButtonsToRemove": ["select2d", "lasso2d"]}
    return str(pio.to_html(fig, include_plotlyjs=True, full_html=False, div_id=CHART_ID, config=config))
