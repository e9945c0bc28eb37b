"""report.html in a real headless browser (Debian's chromium driven by Playwright), offline.

Two pages: a constructed plan with synthesized clips (tests/report_plans.py, fast), and the
demo scenario through the real pipeline, planner and renderer (slow). Each is opened from a
file:// URL with every other request refused; the checks: plotly drew the chart (its
``main-svg`` with traces), the scene table's first row is the plan's rank-1 scene, every
``<audio>`` element loads (``readyState >= 1``, ``duration > 0``), and a cue whose text
carries markup shows that markup as text (no element injected). A screenshot goes to the
test's temporary folder.

Without /usr/bin/chromium the tests skip, unless CUEPLAN_REQUIRE_BROWSER=1 (CI), where
they fail.
"""

from __future__ import annotations

import dataclasses
import json
import os
from pathlib import Path
from typing import Any

import pytest
from report_plans import MARKUP_TEXT, ref_tc, report_plan, write_tone

from planner.model import Plan
from planner.report.clips import extract_clips
from planner.report.html import render_html, write_html

pytestmark = pytest.mark.browser

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]  # fmt: skip


#: Shows the chart's hover box for the first point whose hover text holds the markup cue,
#: through plotly's own hover call, and returns what the box says.
_HOVER_JS = """() => {
  const gd = document.getElementById('timeline');
  for (let i = 0; i < gd.data.length; i++) {
    const h = gd.data[i].hovertext || [];
    for (let j = 0; j < h.length; j++) {
      if (h[j].includes('alert(')) {
        Plotly.Fx.hover(gd, [{curveNumber: i, pointNumber: j}], gd.data[i].xaxis === 'x2' ? 'x2y2' : 'xy');
        return [...gd.querySelectorAll('.hovertext')].map(e => e.textContent);
      }
    }
  }
  return null;
}"""


def _require_browser() -> None:
    if not CHROMIUM.exists():
        if os.environ.get("CUEPLAN_REQUIRE_BROWSER") == "1":
            pytest.fail(f"{CHROMIUM} is missing but CUEPLAN_REQUIRE_BROWSER=1: install Debian's chromium package")
        pytest.skip(f"{CHROMIUM} is not installed (set CUEPLAN_REQUIRE_BROWSER=1 to make this a failure)")


def _hand_built(tmp: Path) -> tuple[Plan, Path]:
    plan = report_plan()
    original = write_tone(tmp / "mix.wav", (0.5, 0.3))
    rendered = write_tone(tmp / "rendered.wav", (0.25, 0.15))
    clips = extract_clips(plan, original, rendered_path=rendered, top=3)
    path = tmp / "report.html"
    write_html(path, render_html(plan, clips=clips), inputs=[original, rendered])
    return plan, path


def _demo(tmp: Path) -> tuple[Plan, Path]:
    from planner import folder, pipeline
    from planner.demo.scenario import build_demo
    from planner.io.audio import open_programme
    from planner.io.subtitles import read_subtitles, write_subtitles
    from planner.planning.scenes import make_plan
    from planner.render.renderer import render
    from planner.settings import AnalysisSettings, PlanSettings, RenderSettings

    files = build_demo(tmp / "demo")
    # The demo's lines carry no markup: give some, as an untrusted file might, to the cue of
    # the most masked line of "the jukebox" (truth.json: lowest SNR of scene 2), a line the
    # report must list.
    truth = json.loads(files.truth.read_text(encoding="utf-8"))
    line = min((x for x in truth["lines"] if x["scene"] == 2 and x["subtitle_cue"]), key=lambda x: (x["snr_db"], x["line"]))
    track = read_subtitles(files.subtitles)
    cues = tuple(dataclasses.replace(c, text=MARKUP_TEXT) if c.index == line["subtitle_cue"] else c for c in track.cues)
    write_subtitles(files.subtitles, dataclasses.replace(track, cues=cues))
    inputs = folder.Inputs(subtitles=files.subtitles, dialogue=files.dialogue, background=files.background)
    out = tmp / "analysis"
    out.mkdir()
    analysis = pipeline.analyse(inputs, out, AnalysisSettings(vad="fast"))
    plan = make_plan(analysis, PlanSettings())
    programme = open_programme(dialogue=files.dialogue, background=files.background)
    rendered = tmp / "rendered.wav"
    render(plan, programme, rendered, RenderSettings())
    clips = extract_clips(plan, programme, rendered_path=rendered, top=5)
    path = out / "report.html"
    write_html(path, render_html(plan, clips=clips), inputs=inputs.all_paths())
    return plan, path


@pytest.fixture(
    scope="module",
    params=[pytest.param("hand-built", id="hand-built"), pytest.param("demo", id="demo", marks=pytest.mark.slow)],
)
def opened(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Any:
    """(plan, page, blocked requests, page errors, screenshot folder) with the page loaded offline."""
    _require_browser()
    from playwright.sync_api import sync_playwright

    tmp = tmp_path_factory.mktemp(request.param)
    plan, path = (_hand_built if request.param == "hand-built" else _demo)(tmp)
    blocked: list[str] = []
    errors: list[str] = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        context = browser.new_context(offline=True, viewport={"width": 1280, "height": 900})

        def route(r: Any) -> None:
            if r.request.url.startswith(("file://", "data:")):
                r.continue_()
            else:
                blocked.append(r.request.url)
                r.abort()

        context.route("**/*", route)
        page = context.new_page()
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.goto(path.as_uri())
        page.wait_for_selector("#timeline .main-svg", timeout=30_000)
        yield plan, page, blocked, errors, tmp
        browser.close()


def test_chart_renders(opened: Any) -> None:
    plan, page, blocked, errors, tmp = opened
    assert page.locator("#timeline svg.main-svg").count() >= 1
    # Bars (lanes) and scatter points (scores) are drawn as plotly trace groups.
    assert page.locator("#timeline .barlayer .trace").count() >= 4
    assert page.locator("#timeline .scatterlayer .trace").count() >= 2
    assert page.locator("#timeline .rangeslider-container").count() == 1
    assert errors == [] and blocked == []
    page.screenshot(path=str(tmp / "report.png"), full_page=True)
    page.locator("#timeline").screenshot(path=str(tmp / "timeline.png"))
    assert (tmp / "report.png").stat().st_size > 10_000


def test_scene_table_lists_the_worst_scene_first(opened: Any) -> None:
    plan, page, *_ = opened
    worst = min(plan.scenes, key=lambda s: s.rank)
    cells = page.locator("#scenes tbody tr").first.locator("td").all_inner_texts()
    fps, start = str(plan.analysis.settings["fps"]), str(plan.analysis.settings["programme_start"])
    assert cells[:4] == ["1", worst.scene_id, ref_tc(worst.start_s, fps, start), ref_tc(worst.end_s, fps, start)]


def test_audio_elements_load(opened: Any) -> None:
    _, page, *_ = opened
    page.wait_for_function("() => [...document.querySelectorAll('audio')].every(a => a.readyState >= 1)", timeout=15_000)
    states = page.eval_on_selector_all("audio", "els => els.map(a => [a.readyState, a.duration, a.dataset.version])")
    assert len(states) >= 2
    assert all(ready >= 1 and duration > 0 for ready, duration, _ in states)
    assert {v for *_, v in states} == {"original", "rendered"}


def test_markup_in_cue_text_shows_as_text(opened: Any) -> None:
    _, page, *_ = opened
    # The only <script> elements are the page's own (plotly.js and the chart call), none from a cue.
    scripts = page.eval_on_selector_all("script", "els => els.map(s => s.textContent.includes(\"alert('cue')\"))")
    assert not any(scripts)
    assert page.locator("main b", has_text="now").count() == 0
    assert MARKUP_TEXT in page.locator("#subtitles").inner_text()
    hover = page.evaluate(_HOVER_JS)
    assert hover and any(MARKUP_TEXT in h for h in hover)
