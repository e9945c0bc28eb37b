"""The demo scenario: files, durations, the planted subtitle defects, per-line SNR, determinism."""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pysrt
import pytest
import soundfile as sf

from planner.demo.scenario import SCENES, DemoFiles, build_demo


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> tuple[DemoFiles, dict, list[tuple[str, float, float]]]:
    calls: list[tuple[str, float, float]] = []
    files = build_demo(tmp_path_factory.mktemp("demo"), progress=lambda s, d, t: calls.append((s, d, t)))
    return files, json.loads(files.truth.read_text(encoding="utf-8")), calls


def _ms(t: float) -> float:
    return math.floor(t * 1000 + 0.5) / 1000


def _cps(item: pysrt.SubRipItem) -> float:
    return len(item.text.replace("\n", "")) / ((item.end.ordinal - item.start.ordinal) / 1000)


def test_files_and_durations(built) -> None:
    files, truth, calls = built
    assert [p.name for p in (files.mix, files.dialogue, files.background, files.subtitles, files.truth)] == [
        "mix.wav",
        "dialogue.wav",
        "background.wav",
        "subtitles.srt",
        "truth.json",
    ]
    for path in (files.mix, files.dialogue, files.background):
        info = sf.info(path)
        assert (info.samplerate, info.channels, info.subtype) == (48000, 2, "PCM_24")
        assert info.frames == truth["n_samples"]
    assert truth["duration_s"] == pytest.approx(truth["n_samples"] / 48000)
    # The scenario's programme length in samples at 48 kHz: the demo is specified as about
    # three minutes of programme (170-200 s of audio).
    assert 170 * 48000 <= truth["n_samples"] <= 200 * 48000
    assert calls[-1][1] == calls[-1][2] and [c[1] for c in calls] == sorted(c[1] for c in calls)


def test_scenes_tile_the_programme(built) -> None:
    _, truth, _ = built
    scenes = truth["scenes"]
    assert scenes[0]["start_s"] == 0.0 and scenes[-1]["end_s"] == truth["duration_s"]
    assert all(a["end_s"] == b["start_s"] for a, b in zip(scenes, scenes[1:]))
    for scene in scenes:
        for line in truth["lines"][scene["lines"][0] - 1 : scene["lines"][1]]:
            assert line["scene"] == scene["scene"]
            assert scene["start_s"] < line["speech_start_s"] < line["speech_end_s"] < scene["end_s"]


def test_mix_is_dialogue_plus_background(built) -> None:
    # Ground truth: the mix is the sum of the stems; each file is quantised to 24 bits
    # separately, so they may differ by up to 1.5 steps of 2**-23.
    files, _, _ = built
    mix, _ = sf.read(files.mix, dtype="float32")
    dia, _ = sf.read(files.dialogue, dtype="float32")
    bg, _ = sf.read(files.background, dtype="float32")
    assert np.max(np.abs(mix - (dia + bg))) <= 1.5 * 2.0**-23
    assert np.array_equal(dia[:, 0], dia[:, 1])  # dialogue centred


def test_per_line_snr_in_the_audio_matches_truth(built) -> None:
    # Ground truth: the SNR the builder designed for each line (SCENES), measured here from
    # the written stems as the truth file defines it: (L+R)/2 over the line's speech samples.
    files, truth, _ = built
    dia, rate = sf.read(files.dialogue, dtype="float32")
    bg, _ = sf.read(files.background, dtype="float32")
    designed = {n: snr for scene in SCENES for n, snr in zip(scene.line_numbers, scene.snr_db)}
    for line in truth["lines"]:
        i0 = math.floor(line["speech_start_s"] * rate + 0.5)
        i1 = math.floor(line["speech_end_s"] * rate + 0.5)
        d = (dia[i0:i1, 0].astype(np.float64) + dia[i0:i1, 1]) / 2
        b = (bg[i0:i1, 0].astype(np.float64) + bg[i0:i1, 1]) / 2
        measured = 10 * math.log10(np.mean(d * d) / np.mean(b * b))
        assert measured == pytest.approx(designed[line["line"]], abs=0.1), line["line"]
        assert line["snr_db"] == pytest.approx(measured, abs=0.01)
    masked = [line for line in truth["lines"] if 15 <= line["line"] <= 20]
    assert all(0.0 - 0.1 <= line["snr_db"] <= 5.0 + 0.1 for line in masked)  # music 0..5 dB below speech


def test_subtitles_are_out_of_step_as_truth_says(built) -> None:
    # Ground truth: the builder's mapping t_subs = (t_audio - offset) / ratio, applied here to
    # its true cue times; the subtitle file is read back with pysrt, an independent reader.
    files, truth, _ = built
    m = truth["distortions"]["mapping"]
    assert m["rate_ratio"] == pytest.approx(24 / 25) and m["offset_s"] == pytest.approx(1.8)
    items = pysrt.open(str(files.subtitles), encoding="utf-8")
    by_index = {item.index: item for item in items}
    assert len(items) == len(truth["lines"])  # one missing, one added
    for line in truth["lines"]:
        assert line["true_cue_start_s"] == _ms(line["speech_start_s"])
        if line["subtitle_cue"] is None:
            continue
        item = by_index[line["subtitle_cue"]]
        assert item.text == line["text"]
        for got_ms, true_s in ((item.start.ordinal, line["true_cue_start_s"]), (item.end.ordinal, line["true_cue_end_s"])):
            assert got_ms / 1000 == pytest.approx(_ms((true_s - m["offset_s"]) / m["rate_ratio"]), abs=1e-9)
    # The drift is large enough to see: early at the start, several seconds late at the end.
    first, last = truth["lines"][0], truth["lines"][-1]
    assert first["subtitle_start_s"] < first["speech_start_s"] - 1.0
    assert last["subtitle_start_s"] > last["speech_start_s"] + 2.5


def test_planted_defects(built) -> None:
    files, truth, _ = built
    d = truth["distortions"]
    items = pysrt.open(str(files.subtitles), encoding="utf-8")
    texts = [item.text for item in items]
    missing = truth["lines"][d["missing_cue"]["line"] - 1]
    assert missing["subtitle_cue"] is None and missing["text"] not in texts
    assert missing["speech_end_s"] - missing["speech_start_s"] >= 1.0  # long enough to count as uncovered speech

    fake = d["no_speech_cue"]
    assert texts[fake["subtitle_cue"] - 1] == fake["text"]
    for line in truth["lines"]:  # at least 0.5 s clear of every spoken line
        assert fake["audio_end_s"] + 0.5 <= line["speech_start_s"] or line["speech_end_s"] + 0.5 <= fake["audio_start_s"]
    m = d["mapping"]
    assert fake["subtitle_start_s"] == _ms((fake["audio_start_s"] - m["offset_s"]) / m["rate_ratio"])

    # Reading speed: common practice caps adult subtitles near 17 characters per second
    # (public streaming style guides, CHECKS.md §6); the planted cue is far over, the rest under.
    fast = items[d["too_fast_cue"]["subtitle_cue"] - 1]
    assert _cps(fast) > 20.0 and _cps(fast) == pytest.approx(d["too_fast_cue"]["cps"], abs=0.01)
    assert max(_cps(item) for item in items if item is not fast) < 17.0


def test_two_builds_are_byte_identical(built, tmp_path: Path) -> None:
    files, _, _ = built
    again = build_demo(tmp_path)
    for a, b in ((files.mix, again.mix), (files.subtitles, again.subtitles), (files.truth, again.truth)):
        assert hashlib.sha256(a.read_bytes()).hexdigest() == hashlib.sha256(b.read_bytes()).hexdigest(), a.name
