"""Synthesized test programmes: exact SNR, speech truth, cue distortion, determinism, files."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pysrt
import pytest
import soundfile as sf
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.signal import welch

from planner.demo.synth import (
    BACKGROUND_KINDS,
    distort_cues,
    load_lines,
    make_background,
    synth_programme,
    write_programme,
)
from planner.errors import InputError
from planner.model import Cue

LAYOUTS = ("mono", "stereo", "5.1")


def detection(x: np.ndarray, layout: str) -> np.ndarray:
    """What the detector hears, written out here independently: C for 5.1, (L+R)/2 for stereo."""
    x = x.astype(np.float64)
    return {"mono": lambda: x[:, 0], "stereo": lambda: (x[:, 0] + x[:, 1]) / 2.0, "5.1": lambda: x[:, 2]}[layout]()


def active(spans: tuple[tuple[float, float], ...], n: int, rate: int) -> np.ndarray:
    """Speech-active samples: floor(t*rate + 0.5) for both ends of each span, half-open."""
    mask = np.zeros(n, dtype=bool)
    for a, b in spans:
        mask[math.floor(a * rate + 0.5) : math.floor(b * rate + 0.5)] = True
    return mask


@pytest.mark.parametrize("layout", LAYOUTS, ids=LAYOUTS)
@pytest.mark.parametrize("background", ["pink", "music", "babble", "rain"], ids=str)
@pytest.mark.parametrize("snr_db", [-5.0, 0.0, 10.0, 20.0], ids=lambda v: f"{v:+g}dB")
def test_snr_measured_independently_matches_request(background: str, layout: str, snr_db: float) -> None:
    # Ground truth: the requested SNR, measured here from the float32 stems over the
    # speech-active samples of the detection signal (definition in planner/demo/synth.py).
    prog = synth_programme(background=background, snr_db=snr_db, n_lines=3, seed=7, sample_rate_hz=16000, layout=layout)
    mask = active(prog.speech_truth, prog.n_samples, prog.sample_rate_hz)
    d = detection(prog.dialogue, layout)[mask]
    b = detection(prog.background, layout)[mask]
    measured = 10.0 * math.log10(np.mean(d * d) / np.mean(b * b))
    assert measured == pytest.approx(snr_db, abs=0.1)
    assert prog.snr_db == snr_db


def test_dialogue_is_centred_and_background_spread() -> None:
    # Ground truth: the placement rules (dialogue equal in L and R / only in C; background
    # decorrelated between L and R, a little in C).
    st_prog = synth_programme(background="pink", n_lines=2, seed=1, sample_rate_hz=16000, layout="stereo")
    assert np.array_equal(st_prog.dialogue[:, 0], st_prog.dialogue[:, 1])
    assert abs(np.corrcoef(st_prog.background[:, 0], st_prog.background[:, 1])[0, 1]) < 0.1
    sur = synth_programme(background="rain", n_lines=2, seed=1, sample_rate_hz=16000, layout="5.1")
    assert not np.any(sur.dialogue[:, [0, 1, 3, 4, 5]])
    power = np.mean(sur.background.astype(np.float64) ** 2, axis=0)
    for ch in (0, 1, 4, 5):
        assert 10 * math.log10(power[2] / power[ch]) == pytest.approx(-9.0, abs=0.5)


@pytest.mark.parametrize("layout", LAYOUTS, ids=LAYOUTS)
def test_speech_truth_lies_where_dialogue_is_non_silent(layout: str) -> None:
    # Ground truth: the dialogue signal itself. Every sample louder than -45 dBFS lies in a
    # span (2 ms tolerance for resampling ringing); each span starts and ends on sound.
    rate = 48000
    prog = synth_programme(background="none", n_lines=6, seed=11, sample_rate_hz=rate, layout=layout)
    d = np.abs(detection(prog.dialogue, layout))
    tol = int(0.002 * rate)
    widened = np.zeros(prog.n_samples, dtype=bool)
    for a, b in prog.speech_truth:
        widened[max(int(a * rate) - tol, 0) : int(b * rate) + tol] = True
    assert not np.any(d[~widened] > 10 ** (-45 / 20))
    edge = int(0.005 * rate)
    for a, b in prog.speech_truth:
        i, j = int(a * rate), int(b * rate)
        assert d[i : i + edge].max() > 10 ** (-65 / 20)
        assert d[j - edge : j].max() > 10 ** (-65 / 20)
    starts = [a for a, _ in prog.speech_truth]
    assert starts == sorted(starts)
    assert all(b0 < a1 for (_, b0), (a1, _) in zip(prog.speech_truth, prog.speech_truth[1:]))


def test_cues_follow_the_speech() -> None:
    # Ground truth: the cue rule (in at onset, out 0.3 s after the end, to the millisecond)
    # applied here to speech_truth, and the texts of the fixture lines (line-broken).
    prog = synth_programme(background="pink", n_lines=5, seed=2, sample_rate_hz=16000)
    texts = {line.number: line.text for line in load_lines()}
    assert len(prog.cues) == len(prog.speech_truth) == len(prog.line_numbers) == 5
    for cue, (a, b), number in zip(prog.cues, prog.speech_truth, prog.line_numbers):
        assert cue.start_s == pytest.approx(a, abs=0.0005)
        assert cue.end_s == pytest.approx(b + 0.3, abs=0.0005)
        # Broken into lines of at most 38 characters, words kept whole.
        assert cue.text.replace("\n", " ") == texts[number]
        assert all(len(line) <= 38 for line in cue.text.split("\n"))


def test_same_seed_gives_identical_arrays_and_other_seed_differs() -> None:
    kwargs = {"background": "babble", "n_lines": 3, "sample_rate_hz": 16000, "layout": "stereo"}
    a, b = synth_programme(seed=5, **kwargs), synth_programme(seed=5, **kwargs)
    assert np.array_equal(a.dialogue, b.dialogue) and np.array_equal(a.background, b.background)
    assert a.speech_truth == b.speech_truth and a.cues == b.cues
    c = synth_programme(seed=6, **kwargs)
    assert c.n_samples != a.n_samples or not np.array_equal(c.background, a.background)


@pytest.mark.parametrize("kind", [k for k in BACKGROUND_KINDS if k != "none"], ids=str)
def test_background_level_and_determinism(kind: str) -> None:
    n = 12 * 16000  # one whole loop of the music bed
    x = make_background(kind, n, 16000, seed=3)
    assert x.dtype == np.float32 and x.shape == (n,)
    assert 20 * math.log10(np.sqrt(np.mean(x.astype(np.float64) ** 2))) == pytest.approx(-26.0, abs=0.01)
    assert np.array_equal(x, make_background(kind, n, 16000, seed=3))
    assert abs(np.corrcoef(x, make_background(kind, n, 16000, seed=4))[0, 1]) < 0.2


def test_none_background_is_silent() -> None:
    assert not np.any(make_background("none", 1000, 48000, seed=0))


def test_pink_noise_falls_3_db_per_octave() -> None:
    # Source: definition of pink noise, power spectral density proportional to 1/f, so
    # 10*log10(2) = 3.01 dB less power per octave; three octaves 250 Hz -> 2 kHz: 9.03 dB.
    rate = 16000
    x = make_background("pink", 20 * rate, rate, seed=0)
    f, p = welch(x, fs=rate, nperseg=4096)

    def band_db(lo: float) -> float:
        sel = (f >= lo) & (f < 2 * lo)
        return 10 * math.log10(np.mean(p[sel] * f[sel]))  # f*P(f) is flat for pink noise

    assert band_db(250) - band_db(2000) == pytest.approx(0.0, abs=0.5)
    low = np.mean(p[(f > 240) & (f < 260)])
    high = np.mean(p[(f > 1920) & (f < 2080)])
    assert 10 * math.log10(low / high) == pytest.approx(9.03, abs=1.0)


def test_music_bed_is_tonal_on_the_equal_tempered_scale() -> None:
    # Source: equal temperament with A4 = 440 Hz (ISO 16:1975), f = 440 * 2**((m - 69)/12).
    # The bed is built from A minor chords; the bass A2 (110 Hz) and its octave A3 (220 Hz)
    # must stand far above B-flat 2 (116.5 Hz), a note in none of the chords.
    rate = 16000
    x = make_background("music", 24 * rate, rate, seed=0)
    f, p = welch(x, fs=rate, nperseg=16000)

    def at(hz: float) -> float:
        return float(p[np.argmin(np.abs(f - hz))])

    assert 10 * math.log10(at(110.0) / at(116.54)) > 20
    assert 10 * math.log10(at(220.0) / at(233.08)) > 20


def test_make_background_rejects_unknown_kind() -> None:
    with pytest.raises(InputError, match="kind='hum' must be one of pink, music"):
        make_background("hum", 100, 48000, seed=0)  # type: ignore[arg-type]


TRADE_RATIOS = [Fraction(25, 24), Fraction(24, 25), Fraction(24000, 24 * 1001), Fraction(1001, 1000), Fraction(1)]


def _ms(t: float) -> float:
    return math.floor(t * 1000 + 0.5) / 1000


@settings(max_examples=200, deadline=None)
@given(
    starts=st.lists(st.floats(10.0, 500.0, allow_nan=False), min_size=1, max_size=12, unique=True),
    offset_s=st.floats(-5.0, 5.0, allow_nan=False),
    ratio=st.sampled_from(TRADE_RATIOS),
)
def test_distort_cues_follows_the_mapping(starts: list[float], offset_s: float, ratio: Fraction) -> None:
    # Ground truth: t_subs = (t_audio - offset) / ratio, rounded to the millisecond.
    cues = [Cue(index=i, cue_id=str(i), start_s=a, end_s=a + 1.5, text=f"c{i}") for i, a in enumerate(sorted(starts), 1)]
    out = distort_cues(cues, offset_s=offset_s, rate_ratio=float(ratio))
    assert [c.text for c in out] == [c.text for c in cues]
    for got, cue in zip(out, cues):
        assert got.start_s == pytest.approx(_ms((cue.start_s - offset_s) / float(ratio)), abs=1e-9)
        assert got.end_s == pytest.approx(_ms((cue.end_s - offset_s) / float(ratio)), abs=1e-9)
    assert [c.index for c in out] == list(range(1, len(cues) + 1))


def test_distort_cues_edit_drop_and_fake() -> None:
    # Ground truth: hand-worked values. 4 s inserted at audio 20 s; offset 1 s; ratio 1.
    starts = (5.0, 15.0, 25.0, 35.0)
    cues = [Cue(index=i, cue_id=str(i), start_s=t, end_s=t + 2.0, text=f"line {i}") for i, t in enumerate(starts, 1)]
    out = distort_cues(
        cues, offset_s=1.0, edit_at_s=20.0, edit_len_s=4.0, drop=(2,), add_fake=((30.0, 31.5),), fake_text="ghost"
    )
    assert [(c.start_s, c.end_s, c.text) for c in out] == [
        (4.0, 6.0, "line 1"),
        (20.0, 22.0, "line 3"),
        (25.0, 26.5, "ghost"),
        (30.0, 32.0, "line 4"),
    ]
    assert [c.cue_id for c in out] == ["1", "2", "3", "4"]


def test_distort_cues_rejects_negative_times() -> None:
    cues = [Cue(index=1, cue_id="1", start_s=0.5, end_s=1.0, text="x")]
    with pytest.raises(InputError, match="would start at -1.500 s"):
        distort_cues(cues, offset_s=2.0)
    with pytest.raises(InputError, match="rate_ratio=0 must be positive"):
        distort_cues(cues, rate_ratio=0)


def test_write_programme_round_trips(tmp_path) -> None:
    # References: soundfile reads the WAV back (24-bit quantisation step 2**-23);
    # pysrt (an independent SRT reader) reads the subtitles back to the millisecond.
    prog = synth_programme(background="rain", n_lines=3, seed=4, sample_rate_hz=48000, layout="stereo")
    subs = distort_cues(prog.cues, offset_s=-0.5, rate_ratio=24 / 25)
    paths = write_programme(prog, tmp_path, subtitles=subs)
    assert sorted(paths) == ["background", "dialogue", "mix", "subtitles"]
    for role, ref in (("mix", prog.mix), ("dialogue", prog.dialogue), ("background", prog.background)):
        info = sf.info(paths[role])
        assert (info.subtype, info.samplerate, info.channels, info.frames) == ("PCM_24", 48000, 2, prog.n_samples)
        back, _ = sf.read(paths[role], dtype="float64")
        assert np.max(np.abs(back - ref)) <= 2.0**-23
    items = pysrt.open(str(paths["subtitles"]), encoding="utf-8")
    back = [(i.start.ordinal / 1000, i.end.ordinal / 1000, i.text) for i in items]
    assert back == [(c.start_s, c.end_s, c.text) for c in subs]


def test_write_programme_refuses_to_clip(tmp_path) -> None:
    prog = synth_programme(background="pink", snr_db=-30.0, n_lines=1, seed=0, sample_rate_hz=16000)
    with pytest.raises(InputError, match="would clip in 24-bit PCM"):
        write_programme(prog, tmp_path)
    assert not list(tmp_path.iterdir())
