"""The HTML report and its listening clips, against constructed plans and synthesized audio.

Outside references: the construction (tests/report_plans.py: which cues are worst, which
text carries markup, tones of known amplitude), the PyPI ``timecode`` package for labels,
ITU-R BS.775 for the 5.1 fold-down (centre into each front channel at -3 dB, 1/sqrt(2)),
and Python's own html.escape for the escaped form of the markup.
"""

from __future__ import annotations

import base64
import html
import io
import json
import re
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from report_plans import MARKUP_TEXT, MASKED, ref_tc, report_plan, write_tone

from planner.errors import OutputError
from planner.io.audio import open_programme
from planner.render.verify import VerifyRow
from planner.report.chart import CHART_ID
from planner.report.clips import CLIP_RATE_HZ, Clip, extract_clips
from planner.report.html import CAUTIONS, render_html, write_html

CUE_SPAN_S = 2.0  # every constructed cue lasts 2 s


@pytest.fixture(scope="module")
def plan():  # type: ignore[no-untyped-def]
    return report_plan()


@pytest.fixture(scope="module")
def page(plan) -> str:  # type: ignore[no-untyped-def]
    clip = Clip(cue_index=3, label="cue 3", original_wav=_wav(np.zeros(1600)), rendered_wav=_wav(np.zeros(1600)))
    return render_html(plan, clips=(clip,))


def _wav(x: np.ndarray) -> bytes:
    buf = io.BytesIO()
    sf.write(buf, x, CLIP_RATE_HZ, format="WAV", subtype="PCM_16")
    return buf.getvalue()


def _figure_data(page: str) -> list[dict]:
    """The trace list plotly embeds: the JSON array after ``Plotly.newPlot("timeline",``."""
    m = re.search(r'Plotly\.newPlot\(\s*"' + CHART_ID + r'",\s*', page)
    assert m is not None
    data, _ = json.JSONDecoder().raw_decode(page, m.end())
    return data


def test_markup_in_a_cue_is_escaped_in_the_tables(page: str) -> None:
    assert html.escape(MARKUP_TEXT) in page
    assert "<script>alert(" not in page
    assert "<b>now</b>" not in page


def test_markup_in_a_cue_is_escaped_in_the_chart_json(page: str) -> None:
    hovers = [h for trace in _figure_data(page) for h in trace.get("hovertext") or () if "alert(" in h]
    assert hovers, "the markup cue has a hover text"
    assert all(html.escape(MARKUP_TEXT) in h and "<script>" not in h for h in hovers)


def test_the_page_is_self_contained(page: str) -> None:
    # No element loads anything from the network: no src/href to http(s), no link tags.
    assert not re.search(r"<(?:script|img|audio|source|iframe|link)\b[^>]*\b(?:src|href)\s*=\s*[\"']?(?:https?:)?//", page, re.I)
    assert "<link" not in page
    assert page.count("<script") >= 1  # plotly.js itself, inline
    assert all(c in html.unescape(page) for c in CAUTIONS)


def test_chart_has_every_lane(page: str) -> None:
    names = {t.get("name") for t in _figure_data(page)}
    assert {"detected speech", "speech with no cue", "cue masked", "cue at-risk", "cue clear", "planned move",
            "move short of target", "scenes", "target"} <= names  # fmt: skip


def test_scene_table_lists_the_worst_scene_first(plan, page: str) -> None:  # type: ignore[no-untyped-def]
    table = page[page.index('<table id="scenes">') :]
    first = re.search(r"<tbody><tr>(.*?)</tr>", table)
    assert first is not None
    cells = re.findall(r"<td[^>]*>(.*?)</td>", first.group(1))
    # Constructed: the masked cues 3-5 (20-27 s) form the worst scene.
    assert cells[0] == "1" and cells[2:4] == [ref_tc(20.0), ref_tc(27.0)]


def test_the_page_is_deterministic(plan, page: str) -> None:  # type: ignore[no-untyped-def]
    clip = Clip(cue_index=3, label="cue 3", original_wav=_wav(np.zeros(1600)), rendered_wav=_wav(np.zeros(1600)))
    assert render_html(plan, clips=(clip,)) == page


def test_audio_elements_carry_the_clip_bytes(page: str) -> None:
    uris = re.findall(r'<audio controls preload="metadata" data-version="(\w+)" src="data:audio/wav;base64,([^"]+)"', page)
    assert [v for v, _ in uris] == ["original", "rendered"]
    assert base64.b64decode(uris[0][1]) == _wav(np.zeros(1600))


def test_verify_figures_show_in_the_table_and_the_chart(plan) -> None:  # type: ignore[no-untyped-def]
    # A verify row as planner.render.verify writes it; the measured figure is constructed.
    row = VerifyRow(cue_index=6, event_id="E002", score_kind="sii", target=0.75, score_before=0.67, predicted_after=0.75,
                    measured_after=0.77, reached=True, planned_reachable=True, method="stems", confidence=1.0)  # fmt: skip
    page = render_html(plan, verify_rows=[row])
    events = page[page.index('<table id="events">') :]
    assert "measured SII 0.77 on cue 6, target reached" in events
    (trace,) = [t for t in _figure_data(page) if t.get("name") == "measured after render"]
    assert trace["y"] == [0.77]


def test_write_html_never_writes_over_an_input(tmp_path: Path) -> None:
    src = tmp_path / "mix.wav"
    src.write_bytes(b"RIFF")
    with pytest.raises(OutputError, match="refusing to write over the input file"):
        write_html(src, "<html></html>", inputs=[src])
    write_html(tmp_path / "report.html", "<p>x</p>", inputs=[src])
    assert (tmp_path / "report.html").read_text(encoding="utf-8") == "<p>x</p>"


# ----------------------------------------------------------------------------- clips
def _decode(wav: bytes) -> tuple[np.ndarray, int, str]:
    x, rate = sf.read(io.BytesIO(wav), dtype="float64")
    return x, rate, sf.info(io.BytesIO(wav)).subtype


def _amplitude(x: np.ndarray) -> float:
    """Peak amplitude of a steady sine from its RMS (sqrt 2 x RMS), skipping 10 ms at each end."""
    core = x[160:-160]
    return float(np.sqrt(2.0 * np.mean(core**2)))


def test_clips_are_the_worst_cues_as_mono_16k_wav(plan, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    # Constructed: L at 0.5 and R at 0.3 give a mono (L+R)/2 tone of 0.4; the render at
    # half the amplitude gives 0.2. The worst cues are the masked 3, 4 (equal SII, index order).
    original = write_tone(tmp_path / "mix.wav", (0.5, 0.3))
    rendered = write_tone(tmp_path / "rendered.wav", (0.25, 0.15))
    clips = extract_clips(plan, original, rendered_path=rendered, top=2, pad_s=0.5)
    assert [c.cue_index for c in clips] == list(MASKED[:2])
    assert clips[0].label == f"cue 3 at {ref_tc(20.0)}"
    for c in clips:
        x, rate, subtype = _decode(c.original_wav)
        assert (rate, subtype, x.ndim) == (CLIP_RATE_HZ, "PCM_16", 1)
        assert x.size == pytest.approx((CUE_SPAN_S + 2 * 0.5) * CLIP_RATE_HZ, abs=1)
        spectrum = np.abs(np.fft.rfft(x * np.hanning(x.size)))
        assert np.argmax(spectrum) * CLIP_RATE_HZ / x.size == pytest.approx(1000.0, abs=1.0)
        assert _amplitude(x) == pytest.approx(0.4, rel=0.01)
        assert c.rendered_wav is not None
        assert _amplitude(_decode(c.rendered_wav)[0]) == pytest.approx(0.2, rel=0.01)


def test_clip_of_a_5_1_mix_uses_the_bs775_fold_down(plan, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    # Centre only at 0.5: ITU-R BS.775 puts it in L and R at 1/sqrt(2), so (L+R)/2 = 0.354.
    path = write_tone(tmp_path / "mix51.wav", (0.0, 0.0, 0.5, 0.0, 0.0, 0.0), rate_hz=16000)
    (clip,) = extract_clips(plan, path, top=1, pad_s=0.0)
    x = _decode(clip.original_wav)[0]
    assert x.size == int(CUE_SPAN_S * CLIP_RATE_HZ)
    assert _amplitude(x) == pytest.approx(0.5 / np.sqrt(2.0), rel=0.01)


def test_clip_of_stems_is_their_sum(plan, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    # Dialogue 0.2 and background 0.1 of the same tone in phase sum to 0.3.
    d = write_tone(tmp_path / "dialogue.wav", (0.2, 0.2))
    b = write_tone(tmp_path / "background.wav", (0.1, 0.1))
    (clip,) = extract_clips(plan, open_programme(dialogue=d, background=b), top=1)
    assert _amplitude(_decode(clip.original_wav)[0]) == pytest.approx(0.3, rel=0.01)
    assert clip.rendered_wav is None
