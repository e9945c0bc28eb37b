"""The HTML report: one self-contained file that opens offline.

Sections: the episode verdict and cautions, the timeline (:mod:`planner.report.chart`,
plotly.js inline), the worst scenes, the worst lines with listening clips (``<audio>``
elements with WAV ``data:`` URIs, :mod:`planner.report.clips`), the summary, the subtitle
problems and the gain moves. Rows come from :mod:`planner.report.views`.
Every piece of text taken from the inputs is escaped with :func:`html.escape` (cue text is
untrusted: ``<script>`` shows as text). Nothing varies between runs (no clock, no random
ids), so equal plans give byte-identical pages.
"""

from __future__ import annotations

import base64
from collections.abc import Iterable, Sequence
from html import escape
from pathlib import Path

from planner.io.files import atomic_write_text
from planner.model import Plan
from planner.report.chart import chart_html, timeline_figure
from planner.report.clips import Clip
from planner.report.figures import VerifiedCue, cue_texts, one_line, score_kind, score_words
from planner.report.palette import ACTION_COLOURS, MOVE_COLOUR, UNCOVERED_COLOUR, VERDICT_COLOURS
from planner.report.views import Report, build_report

#: Rows per table in the page (the page has room for more than a terminal).
PAGE_ROWS = 25

#: The cautions every report carries (docs/methods.md, "Reports").
CAUTIONS = (
    "Rendered outputs are loudness-normalised and peak-limited: a person must listen to them before delivery.",
    "Scores are model predictions from the audio, not a hearing test and not an accessibility certification. "
    "The broadcaster's delivery specification and the local regulator's access-services code decide what is acceptable.",
)

_CSS = f"""
:root {{ --ink: #1f2328; --muted: #5c6370; --rule: #d8dbe0; --band: #f4f5f7; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0; font: 15px/1.45 system-ui, -apple-system, "Segoe UI", sans-serif; color: var(--ink); background: #fff; }}
main {{ max-width: 1180px; margin: 0 auto; padding: 20px 28px 48px; }}
h1 {{ font-size: 22px; margin: 0 0 2px; font-weight: 650; }}
h2 {{ font-size: 17px; margin: 34px 0 8px; padding-bottom: 4px; border-bottom: 2px solid var(--ink); }}
.sub {{ color: var(--muted); margin: 0 0 14px; }}
.verdict {{ display: flex; gap: 14px; align-items: baseline; padding: 12px 16px; background: var(--band);
  border-left: 6px solid var(--accent); margin: 10px 0; }}
.verdict b {{ font-size: 19px; letter-spacing: .02em; }}
.cautions {{ font-size: 13px; color: var(--muted); margin: 6px 0 0; padding-left: 18px; }}
dl.summary {{ display: grid; grid-template-columns: max-content 1fr; gap: 2px 18px; margin: 0; }}
dl.summary dt {{ font-weight: 600; }} dl.summary dd {{ margin: 0; }}
table {{ border-collapse: collapse; width: 100%; font-size: 14px; }}
th {{ text-align: left; font-weight: 600; border-bottom: 1px solid var(--ink); padding: 4px 8px; white-space: nowrap; }}
td {{ border-bottom: 1px solid var(--rule); padding: 5px 8px; vertical-align: top; }}
td.tc, td.num {{ font-family: ui-monospace, "DejaVu Sans Mono", monospace; white-space: nowrap; }}
td.num {{ text-align: right; }}
.line {{ font-style: italic; }}
.tag {{ display: inline-block; padding: 0 6px; border-radius: 3px; color: #fff; font-size: 12px; font-weight: 600; }}
{"".join(f".v-{v} {{ background: {c}; }} " for v, c in VERDICT_COLOURS.items())}
.clips {{ display: grid; grid-template-columns: repeat(auto-fill, minmax(340px, 1fr)); gap: 12px; }}
.clip {{ border: 1px solid var(--rule); padding: 10px 12px; }}
.clip p {{ margin: 0 0 6px; }} .clip audio {{ width: 100%; height: 34px; }}
.clip .label {{ font-size: 12px; color: var(--muted); margin: 4px 0 2px; }}
.more {{ color: var(--muted); font-size: 13px; }}
.legend-key {{ color: var(--muted); font-size: 13px; }}
"""

def _tag(verdict: str) -> str:
    return f'<span class="tag v-{escape(verdict)}">{escape(verdict)}</span>' if verdict else ""


def _table(head: Sequence[str], rows: Iterable[Sequence[str]], *, table_id: str) -> str:
    """A table; ``head`` is escaped here, ``rows`` hold cells already rendered as safe HTML."""
    th = "".join(f"<th>{escape(h)}</th>" for h in head)
    body = "".join("<tr>" + "".join(row) + "</tr>" for row in rows)
    return f'<table id="{table_id}"><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>'


def _td(text: str, cls: str = "") -> str:
    return f'<td class="{cls}">{escape(text)}</td>' if cls else f"<td>{escape(text)}</td>"


def _more(shown: int, total: int, where: str) -> str:
    return f'<p class="more">{shown} of {total} shown; all of them are in {escape(where)}.</p>' if total > shown else ""


def _header(report: Report) -> str:
    v = report.verdict
    inputs = ", ".join(f"{role} {path}" for role, path in report.summary.inputs)
    cautions = "".join(f"<li>{escape(c)}</li>" for c in CAUTIONS)
    return (f"<h1>Dialogue report</h1><p class='sub'>{escape(inputs)}</p>"
            f'<div class="verdict" id="verdict" style="--accent: {ACTION_COLOURS[v.action]}"><b>{escape(v.action)}</b>'
            f"<span>{escape(v.why)} (confidence {v.confidence:.2f})</span></div>"
            f'<ul class="cautions">{cautions}</ul>')  # fmt: skip


def _summary(report: Report) -> str:
    items = "".join(f"<dt>{escape(k)}</dt><dd>{escape(v)}</dd>" for k, v in report.summary.lines())
    return f'<h2>Summary</h2><dl class="summary">{items}</dl>'


def _chart(plan: Plan, verify_rows: Sequence[VerifiedCue] | None) -> str:
    key = (f"Lanes: detected speech (<span style='color:{UNCOVERED_COLOUR}'>crossed: no cue</span>), cues by verdict "
           "(crossed masked, striped at risk), planned moves "
           f"(<span style='color:{MOVE_COLOUR}'>blue</span>, crossed when short of target), scenes (#rank, darker worse). "
           "Below: each cue's score against the dashed target. "
           "Drag the slider or the chart to zoom; double-click to reset.")  # fmt: skip
    return f'<h2>Timeline</h2><p class="legend-key">{key}</p>{chart_html(timeline_figure(plan, verify_rows=verify_rows))}'


def _scenes(report: Report) -> str:
    rows = [[_td(str(r.rank), "num"), _td(r.scene_id), _td(r.tc_in, "tc"), _td(r.tc_out, "tc"), _td(r.reason),
             f'<td><span class="line">{escape(r.worst_text)}</span></td>' if r.worst_cue is not None else "<td></td>",
             f"<td>{_tag(r.worst_verdict)} {escape(r.worst_score)}</td>", _td(r.move + (f"; {r.measured}" if r.measured else ""))]
            for r in report.scenes]  # fmt: skip
    if not rows:
        return "<h2>Worst scenes</h2><p>No scene has an at-risk or masked line.</p>"
    head = ("rank", "scene", "TC in", "TC out", "why", "worst line", "score", "planned move")
    return f"<h2>Worst scenes</h2>{_table(head, rows, table_id='scenes')}{_more(len(rows), report.n_scenes, 'plan.json')}"


def _clips(plan: Plan, clips: Sequence[Clip]) -> str:
    if not clips:
        return ""
    kind, texts, scores = score_kind(plan), cue_texts(plan.analysis), {s.index: s for s in plan.analysis.scores}
    cards = []
    for c in clips:
        s = scores.get(c.cue_index)
        players = f'<p class="label">original</p>{_audio(c.original_wav, "original")}'
        if c.rendered_wav is not None:
            players += f'<p class="label">rendered</p>{_audio(c.rendered_wav, "rendered")}'
        cards.append(f'<div class="clip" data-cue="{c.cue_index}"><p><b>{escape(c.label)}</b> '
                     f"{_tag(s.verdict if s else '')} {escape(score_words(s, kind))}</p>"
                     f'<p class="line">{escape(one_line(texts.get(c.cue_index, "")))}</p>{players}</div>')  # fmt: skip
    return f'<h2>Worst lines: listen</h2><div class="clips" id="clips">{"".join(cards)}</div>'


def _audio(wav: bytes, what: str) -> str:
    data = base64.b64encode(wav).decode("ascii")
    return f'<audio controls preload="metadata" data-version="{what}" src="data:audio/wav;base64,{data}"></audio>'


def _subtitles(report: Report) -> str:
    rows = [[_td(r.tc_in, "tc"), _td("-" if r.cue is None else str(r.cue), "num"), _td(r.problem),
             f"<td>{_tag(r.verdict)} {escape(r.score)}</td>", f'<td class="line">{escape(r.text)}</td>']
            for r in report.subtitles]  # fmt: skip
    if not rows:
        return "<h2>Subtitle problems</h2><p>No subtitle problem and no masked line.</p>"
    table = _table(("TC in", "cue", "problem", "score", "text"), rows, table_id="subtitles")
    return f"<h2>Subtitle problems and lines viewers must read</h2>{table}{_more(len(rows), report.n_subtitle_rows, 'cues.csv')}"


def _events(report: Report) -> str:
    rows = [[_td(r.event_id), _td(r.tc_in, "tc"), _td(r.tc_out, "tc"), _td(f"{r.background_gain_db:+.1f}", "num"),
             _td(f"{r.dialogue_gain_db:+.1f}", "num"), _td(f"{r.ramp_in_ms:.0f} / {r.ramp_out_ms:.0f}", "num"), _td(r.cues),
             _td(f"{r.before} -> {r.after}" + ("" if r.reachable else " (short of target)")
                 + (f"; {r.measured}" if r.measured else ""))]
            for r in report.events]  # fmt: skip
    if not rows:
        return "<h2>Gain moves</h2><p>No gain move planned.</p>"
    head = ("event", "TC in", "TC out", "background dB", "dialogue dB", "ramps in / out ms", "cues", "worst cue before -> after")
    return f"<h2>Gain moves</h2>{_table(head, rows, table_id='events')}{_more(len(rows), report.n_events, 'events.csv')}"


def render_html(plan: Plan, *, clips: Sequence[Clip] = (), verify_rows: Sequence[VerifiedCue] | None = None) -> str:
    """The whole report page for a plan, as one self-contained HTML document.

    Parameters
    ----------
    plan : Plan
        The plan (with its analysis).
    clips : sequence of Clip
        Listening clips of the worst lines (:func:`planner.report.clips.extract_clips`).
    verify_rows : sequence of VerifiedCue, optional
        Measured scores of a render, shown beside the predictions.
    """
    report = build_report(plan, view="editor", top=PAGE_ROWS, verify_rows=verify_rows)
    body = "".join((_header(report), _chart(plan, verify_rows), _scenes(report), _clips(plan, clips), _summary(report),
                    _subtitles(report), _events(report)))  # fmt: skip
    foot = f'<p class="more">cueplan plan schema {plan.schema}. {escape(" ".join(CAUTIONS))}</p>'
    return (f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
            f'<meta name="viewport" content="width=device-width, initial-scale=1">'
            f"<title>Dialogue report</title><style>{_CSS}</style></head><body><main>{body}{foot}</main></body></html>\n")  # fmt: skip


def write_html(path: str | Path, html: str, *, inputs: Iterable[str | Path] = ()) -> None:
    """Write the page atomically (never over an input)."""
    atomic_write_text(path, html, inputs=inputs)
