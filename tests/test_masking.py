"""Per-cue masking scores from stems: levels, SII, short-time SII, STOI, verdicts, bad input.

Every expected value comes from outside the scoring code: loudness from pyloudnorm (BS.1770
with the standard's filter), SII from spectra the test builds itself (tones of known
amplitude, white noise of known density) through ``sii()``, STOI from ``pystoi`` called
directly, and levels the test set.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pyloudnorm
import pytest
from hypothesis import given
from hypothesis import strategies as st
from pystoi import stoi as pystoi_stoi
from scipy.signal import butter, sosfilt

from planner.analysis.cuepass import frame_runs
from planner.analysis.hearing import hearing_profile
from planner.analysis.masking import score_cues, score_spans, verdict
from planner.analysis.sii import SII_BANDS_HZ, one_third_octave_bandwidths_hz, sii
from planner.analysis.verdicts import SBLD_AMBIENCE_LU
from planner.errors import InputError
from planner.io.audio import ProgrammeBlock
from planner.model import AudioInfo, CueScore, CueTiming, SpeechActivity
from planner.settings import AnalysisSettings

FS = 48000
HOP = 480  # 10 ms at 48 kHz
N_CH = {"mono": 1, "stereo": 2, "5.1": 6}
SPEAKERS = {"mono": [0], "stereo": [0, 1], "5.1": [0, 1, 2, 4, 5]}  # LFE (3) is not a loudspeaker


def _activity(n_frames: int, speech: np.ndarray | None = None) -> SpeechActivity:
    mask = np.ones(n_frames, dtype=bool) if speech is None else speech
    return SpeechActivity(0.01, mask.astype(np.float32), mask, backend="test", source="test")


def _timing(index: int, start_s: float, end_s: float) -> CueTiming:
    return CueTiming(index, start_s, end_s, 0.0, 0.0, end_s - start_s, 10.0)


def _score(
    dialogue: np.ndarray,
    background: np.ndarray,
    timings: list[CueTiming],
    *,
    layout: str,
    kind: str = "stems",
    activity: SpeechActivity | None = None,
    settings: AnalysisSettings | None = None,
    block: int = 30011,
    stoi: bool = True,
) -> tuple[CueScore, ...]:
    n = dialogue.shape[0]
    info = AudioInfo(FS, dialogue.shape[1], n, layout, "WAV", "FLOAT", None)  # type: ignore[arg-type]
    d32, b32 = dialogue.astype(np.float32), background.astype(np.float32)
    blocks = [
        ProgrammeBlock(s, d32[s : s + block] + b32[s : s + block], d32[s : s + block] if kind == "stems" else None,
                       b32[s : s + block] if kind == "stems" else None)
        for s in range(0, n, block)
    ]  # fmt: skip
    return score_cues(
        blocks,
        info=info,
        kind=kind,  # type: ignore[arg-type]
        timings=timings,
        activity=activity or _activity(-(-n // HOP)),
        settings=settings or AnalysisSettings(),
        stoi=stoi,
    )


def _noise(rng: np.random.Generator, n: int, *, lowpass_hz: float | None = None, highpass_hz: float | None = None) -> np.ndarray:
    x = rng.standard_normal(n)
    if lowpass_hz:
        x = sosfilt(butter(2, lowpass_hz, "low", fs=FS, output="sos"), x)
    if highpass_hz:
        x = sosfilt(butter(2, highpass_hz, "high", fs=FS, output="sos"), x)
    return x


def _spread(mono: list[np.ndarray], layout: str) -> np.ndarray:
    """One signal per loudspeaker (LFE silent)."""
    out = np.zeros((mono[0].size, N_CH[layout]))
    for ch, x in zip(SPEAKERS[layout], mono):
        out[:, ch] = x
    return out


def _set_loudness(x: np.ndarray, layout: str, target_lufs: float) -> np.ndarray:
    # pyloudnorm with the BS.1770 filter ("DeMan"), channels in L R C Ls Rs order (CHECKS.md 1.6).
    meter = pyloudnorm.Meter(FS, filter_class="DeMan")
    measured = meter.integrated_loudness(x[:, SPEAKERS[layout]])
    return x * 10.0 ** ((target_lufs - measured) / 20.0)


@pytest.mark.parametrize("layout", ["mono", "stereo", "5.1"])
def test_stems_sbld_equals_the_constructed_loudness_difference(layout: str, rng: np.random.Generator) -> None:
    # Ground truth: speech-shaped and ambience-like stationary noises set by pyloudnorm to
    # -30 and -42 LUFS over the scored span, so speech - background = 12 LU.
    n = 3 * FS
    k = len(SPEAKERS[layout])
    speech = _set_loudness(_spread([_noise(rng, n, lowpass_hz=1000.0)] * k, layout), layout, -30.0)
    bg = _set_loudness(_spread([_noise(rng, n, highpass_hz=300.0) for _ in range(k)], layout), layout, -42.0)
    (score,) = _score(speech, bg, [_timing(1, 0.0, 3.0)], layout=layout)
    assert score.method == "stems" and score.confidence == 1.0
    assert score.speech_db == pytest.approx(-30.0, abs=0.1)
    assert score.background_db == pytest.approx(-42.0, abs=0.1)
    assert score.sbld_lu == pytest.approx(12.0, abs=0.1)


def test_six_db_on_both_stems_keeps_sbld_and_raises_every_level_six_db(rng: np.random.Generator) -> None:
    # Ground truth: a gain the test applies. The listening-level mapping is absolute, so the
    # spectra (dB SPL) rise by the same 6.02 dB while the difference stays.
    n = 3 * FS
    speech = _spread([_noise(rng, n, lowpass_hz=1500.0) * 0.05] * 2, "stereo")
    bg = _spread([_noise(rng, n) * 0.01, _noise(rng, n) * 0.01], "stereo")
    timings = [_timing(1, 0.2, 2.8)]
    (a,) = _score(speech, bg, timings, layout="stereo")
    (b,) = _score(2.0 * speech, 2.0 * bg, timings, layout="stereo")
    gain_db = 20.0 * math.log10(2.0)
    assert b.sbld_lu == pytest.approx(a.sbld_lu, abs=0.05)
    assert b.speech_db == pytest.approx(a.speech_db + gain_db, abs=0.05)
    np.testing.assert_allclose(np.subtract(b.speech_spectrum_db, a.speech_spectrum_db), gain_db, atol=0.05)
    np.testing.assert_allclose(np.subtract(b.background_spectrum_db, a.background_spectrum_db), gain_db, atol=0.05)


def _tones_and_white_noise(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """A tone at every SII band centre (amplitudes given) and white noise of std ``sigma``."""
    t = np.arange(n) / FS
    amplitudes = 0.02 * 10.0 ** (-np.linspace(0.0, 18.0, SII_BANDS_HZ.size) / 20.0)  # falls 18 dB over the bands
    tones = sum(a * np.sin(2 * np.pi * f * t + 0.3 * i) for i, (a, f) in enumerate(zip(amplitudes, SII_BANDS_HZ)))
    sigma = 0.03
    return np.asarray(tones), amplitudes, rng.standard_normal(n) * sigma, sigma


def _known_spectra(amplitudes: np.ndarray, sigma: float, n_speakers: int, offset_db: float) -> tuple[np.ndarray, np.ndarray]:
    """Spectrum levels (dB SPL/Hz) the test built: tone power A^2/2 per band, white noise sigma^2/(fs/2) per Hz."""
    bw = one_third_octave_bandwidths_hz()
    speech = 10 * np.log10(n_speakers * amplitudes**2 / 2) + offset_db - 10 * np.log10(bw)
    noise = np.full(bw.size, 10 * np.log10(n_speakers * sigma**2 / (FS / 2)) + offset_db)
    return speech, noise


@pytest.mark.parametrize("listening_level", [62.0, 70.0], ids=["62dB", "70dB"])
def test_stems_sii_equals_sii_of_the_known_spectra(listening_level: float, rng: np.random.Generator) -> None:
    # Ground truth: spectra computed by the test from the tone amplitudes and the noise
    # density, at SPL = dBFS power + listening level + 23 dB (docs/methods.md); SII from sii().
    n = 4 * FS
    tones, amplitudes, noise, sigma = _tones_and_white_noise(rng, n)
    speech = _spread([tones, tones], "stereo")
    bg = _spread([noise, rng.standard_normal(n) * sigma], "stereo")
    settings = AnalysisSettings(listening_level_db_spl=listening_level)
    (score,) = _score(speech, bg, [_timing(1, 0.3, 3.7)], layout="stereo", settings=settings)
    e, nz = _known_spectra(amplitudes, sigma, 2, listening_level + 23.0)
    np.testing.assert_allclose(score.speech_spectrum_db, e, atol=0.25)  # band analyser reads tones to 0.2 dB
    np.testing.assert_allclose(score.background_spectrum_db, nz, atol=0.7)  # sampling of 3.4 s of noise
    assert score.sii == pytest.approx(sii(e, nz), abs=0.01)
    age70 = np.asarray(hearing_profile("age-70").thresholds_db_hl)
    assert score.sii_by_profile["age-70"] == pytest.approx(sii(e, nz, age70), abs=0.01)
    assert set(score.sii_by_profile) == {"normal", "age-60", "age-70", "age-80"}
    # Stationary background: the short-time SII matches the classic one (Rhebergen and
    # Versfeld 2005: ESII equals SII for stationary noise) to within frame-to-frame scatter.
    assert score.sii_short == pytest.approx(score.sii, abs=0.03)


def test_5_1_scores_the_stereo_fold_down_with_bs775_coefficients(rng: np.random.Generator) -> None:
    # Ground truth: tones in C only; white noise in Ls and Rs only. On 5.1 the surrounds count
    # 1.41 (BS.1770 Table 3); folded down (BS.775: C and Ls/Rs at -3 dB) the speech keeps its
    # power (2 x 0.5) and the background drops to 0.5 per channel.
    n = 4 * FS
    tones, amplitudes, _, sigma = _tones_and_white_noise(rng, n)
    speech = np.zeros((n, 6))
    speech[:, 2] = tones
    bg = np.zeros((n, 6))
    bg[:, 4], bg[:, 5] = rng.standard_normal(n) * sigma, rng.standard_normal(n) * sigma
    (score,) = _score(speech, bg, [_timing(1, 0.3, 3.7)], layout="5.1")
    e, nz = _known_spectra(amplitudes, sigma, 1, 62.0 + 23.0)
    assert score.sii == pytest.approx(sii(e, nz + 10 * math.log10(2 * 1.41)), abs=0.01)
    assert score.sii_by_profile["normal@stereo-fold-down"] == pytest.approx(sii(e, nz + 10 * math.log10(2 * 0.5)), abs=0.01)
    assert score.sii_by_profile["normal@stereo-fold-down"] > score.sii


def test_stoi_equals_pystoi_called_directly(rng: np.random.Generator) -> None:
    # Reference: pystoi (Taal et al. 2011) on the same span of the mid (L+R)/2 of the clean
    # dialogue and of the mix. The span runs between 10 ms frame boundaries nearest the cue times.
    n = 3 * FS
    t = np.arange(n) / FS
    voice = np.sin(2 * np.pi * 220 * t) * (0.5 * (1 - np.cos(2 * np.pi * 3 * t))) ** 2 * 0.1
    speech = _spread([voice, voice], "stereo")
    bg = _spread([0.02 * rng.standard_normal(n), 0.02 * rng.standard_normal(n)], "stereo")
    start_s, end_s = 0.404, 2.596
    (score,) = _score(speech, bg, [_timing(1, start_s, end_s)], layout="stereo")
    s0, s1 = round(start_s / 0.01) * HOP, round(end_s / 0.01) * HOP
    clean = speech[s0:s1].astype(np.float32).astype(np.float64).mean(axis=1)
    mixed = (speech.astype(np.float32) + bg.astype(np.float32))[s0:s1].astype(np.float64).mean(axis=1)
    expected = pystoi_stoi(clean.astype(np.float32), mixed.astype(np.float32), FS)
    assert score.stoi == pytest.approx(expected, abs=1e-6)


def test_without_stoi_the_other_scores_are_the_same(rng: np.random.Generator) -> None:
    # Ground truth: the same stems scored with STOI; only the STOI and its note may differ.
    n = 3 * FS
    speech = _spread([0.05 * rng.standard_normal(n)] * 2, "stereo")
    bg = _spread([0.02 * rng.standard_normal(n)] * 2, "stereo")
    timings = [_timing(1, 0.3, 2.7)]
    (full,) = _score(speech, bg, timings, layout="stereo")
    (bare,) = _score(speech, bg, timings, layout="stereo", stoi=False)
    assert full.stoi is not None and bare.stoi is None
    assert bare.to_dict() == {**full.to_dict(), "stoi": None}


def test_stoi_is_none_with_a_reason_for_a_short_cue(rng: np.random.Generator) -> None:
    # Ground truth: pystoi needs 30 frames of 12.8 ms hop (0.4 s) after silence removal.
    n = FS
    speech = _spread([0.05 * rng.standard_normal(n)] * 2, "stereo")
    bg = _spread([0.01 * rng.standard_normal(n)] * 2, "stereo")
    (score,) = _score(speech, bg, [_timing(1, 0.2, 0.5)], layout="stereo")
    assert score.stoi is None
    assert "STOI" in score.reason
    assert score.sii is not None


def test_stoi_is_none_where_pystoi_finds_too_little_dialogue_above_silence(rng: np.random.Generator) -> None:
    # Reference: pystoi itself warns and gives up on this span (0.2 s of dialogue in 1.5 s,
    # under its 30 frames left after removing frames 40 dB below the loudest).
    n = 2 * FS
    voice = np.zeros(n)
    voice[int(0.3 * FS) : int(0.5 * FS)] = 0.05 * rng.standard_normal(int(0.2 * FS))
    speech = _spread([voice, voice], "stereo")
    bg = _spread([0.01 * rng.standard_normal(n)] * 2, "stereo")
    (score,) = _score(speech, bg, [_timing(1, 0.2, 1.7)], layout="stereo")
    s0, s1 = 20 * HOP, 170 * HOP
    clean = speech[s0:s1].astype(np.float32).astype(np.float64).mean(axis=1)
    mixed = (speech.astype(np.float32) + bg.astype(np.float32))[s0:s1].astype(np.float64).mean(axis=1)
    with pytest.warns(RuntimeWarning, match="Not enough STFT frames"):
        pystoi_stoi(clean.astype(np.float32), mixed.astype(np.float32), FS)
    assert score.stoi is None
    assert score.reason.startswith("no STOI: too little dialogue above silence in the span")
    assert score.sii is not None


def test_cue_without_speech_frames_gets_no_score_and_a_reason(rng: np.random.Generator) -> None:
    # Ground truth: the speech track the test gives marks nothing inside the second cue.
    n = 4 * FS
    speech = _spread([0.05 * rng.standard_normal(n)] * 2, "stereo")
    bg = _spread([0.01 * rng.standard_normal(n)] * 2, "stereo")
    mask = np.zeros(400, dtype=bool)
    mask[20:150] = True
    scores = _score(speech, bg, [_timing(1, 0.2, 1.5), _timing(2, 2.0, 3.5)], layout="stereo", activity=_activity(400, mask))
    assert scores[0].verdict != "no-score"
    empty = scores[1]
    assert (empty.verdict, empty.method, empty.sii, empty.sbld_lu, empty.stoi) == ("no-score", "none", None, None, None)
    assert "no speech" in empty.reason
    assert "NaN" not in json.dumps(empty.to_dict()) and "Infinity" not in json.dumps(scores[0].to_dict())


@pytest.mark.parametrize("kind", ["stems", "mix"])
def test_silent_programme_gives_no_score_with_a_reason_not_nan(kind: str) -> None:
    # Ground truth: digital silence, although the speech track claims speech.
    n = 2 * FS
    zeros = np.zeros((n, 2))
    (score,) = _score(zeros, zeros, [_timing(1, 0.2, 1.8)], layout="stereo", kind=kind)
    assert score.verdict == "no-score"
    assert "silent" in score.reason
    assert "NaN" not in json.dumps(score.to_dict())


def test_clipped_audio_is_reported_in_the_cue_reason(rng: np.random.Generator) -> None:
    # Ground truth: the test clips the background stem to full scale in the middle of the cue.
    n = 3 * FS
    speech = _spread([0.05 * rng.standard_normal(n)] * 2, "stereo")
    bg = _spread([0.01 * rng.standard_normal(n)] * 2, "stereo")
    bg[FS : FS + 100, 0] = 1.0
    clipped, clean = _score(speech, bg, [_timing(1, 0.5, 2.0), _timing(2, 2.2, 2.9)], layout="stereo")
    assert "clipped" in clipped.reason
    assert "clipped" not in clean.reason


def test_scores_do_not_depend_on_the_block_size(rng: np.random.Generator) -> None:
    # Relation: the streaming pass must give the same scores for any split of the audio, up
    # to the order of float32 sums (a block split changes how numpy's pairwise and SIMD sums
    # group the samples: measured 2e-10 in SII and 2e-9 LU on one machine), so 1e-6.
    n = 3 * FS
    speech = _spread([0.05 * _noise(rng, n, lowpass_hz=1200.0)] * 2, "stereo")
    bg = _spread([0.01 * rng.standard_normal(n), 0.01 * rng.standard_normal(n)], "stereo")
    timings = [_timing(1, 0.1, 1.4), _timing(2, 1.5, 2.9)]
    for kind in ("stems", "mix"):
        a = _score(speech, bg, timings, layout="stereo", kind=kind, block=4096)
        b = _score(speech, bg, timings, layout="stereo", kind=kind, block=FS)
        for x, y in zip(a, b):
            assert x.sii == pytest.approx(y.sii, abs=1e-6) and x.sbld_lu == pytest.approx(y.sbld_lu, abs=1e-6)


def test_blocks_must_start_at_zero_and_be_contiguous(rng: np.random.Generator) -> None:
    x = np.zeros((1000, 2), dtype=np.float32)
    info = AudioInfo(FS, 2, 2000, "stereo", "WAV", "FLOAT", None)
    blocks = [ProgrammeBlock(0, x, x, x), ProgrammeBlock(1500, x, x, x)]
    with pytest.raises(InputError, match="contiguous"):
        score_cues(blocks, info=info, kind="stems", timings=[_timing(1, 0.0, 0.04)], activity=_activity(5),
                   settings=AnalysisSettings())  # fmt: skip


@pytest.mark.parametrize(
    ("sii_value", "sbld", "expected"),
    [
        (0.80, 12.0, "clear"),  # good SII (>= 0.75, from memory: ANSI S3.5 informative text) and >= 10 LU (Torcoli 2019)
        (0.75, 10.0, "clear"),  # both thresholds are inclusive
        (0.80, 8.0, "at-risk"),  # intelligible but below the 10 LU listeners prefer over music
        (0.60, 20.0, "at-risk"),  # between poor (0.45) and good (0.75)
        (0.45, 20.0, "masked"),  # poor: <= 0.45, whatever the loudness difference
        (0.10, None, "masked"),
        (0.90, None, "clear"),  # silent background: nothing to prefer
        (None, 5.0, "no-score"),
        (float("nan"), 5.0, "no-score"),
    ],
    ids=["clear", "at-thresholds", "lu-short", "mid-sii", "poor", "poor-silent-bg", "silent-bg", "none", "nan"],
)
def test_verdict_rule(sii_value: float | None, sbld: float | None, expected: str) -> None:
    assert verdict(sii_value, sbld) == expected


def test_verdict_with_the_ambience_preference() -> None:
    # Torcoli et al. (JAES 2019): listeners prefer at least 15 LU of speech over ambience.
    assert verdict(0.9, 12.0, min_sbld_lu=SBLD_AMBIENCE_LU) == "at-risk"
    assert verdict(0.9, 15.0, min_sbld_lu=SBLD_AMBIENCE_LU) == "clear"


def test_frame_features_match_a_direct_computation(rng: np.random.Generator) -> None:
    # Slow oracle: K-filter the whole signal at once (BS.1770 stages from loudness.py) and take
    # the mean square of every 10 ms hop; the streaming features must agree for any split.
    from planner.analysis.features import FLAT, K, FrameFeatures
    from planner.analysis.loudness import k_weighting_sos

    x = 0.1 * rng.standard_normal(FS + 1234)
    kx = sosfilt(k_weighting_sos(FS), x)
    n_frames = -(-x.size // HOP)
    edges = np.minimum(np.arange(n_frames + 1) * HOP, x.size)
    direct_k = np.array([np.mean(kx[a:b] ** 2) for a, b in zip(edges[:-1], edges[1:])])
    direct_flat = np.array([np.mean(x[a:b] ** 2) for a, b in zip(edges[:-1], edges[1:])])
    ff = FrameFeatures(FS)
    bounds = [0, 100, 5000, 5001, 30000, x.size]
    got = np.vstack([*(ff.process(x[a:b]) for a, b in zip(bounds[:-1], bounds[1:])), ff.flush()])
    assert got.shape == (n_frames, 20)
    np.testing.assert_allclose(got[:, K], direct_k, rtol=1e-9)
    np.testing.assert_allclose(got[:, FLAT], direct_flat, rtol=1e-9)


def test_trailing_mean_equals_a_moving_average_for_any_split(rng: np.random.Generator) -> None:
    # Slow oracle: the mean of the last n_b frames (fewer at the start), band by band.
    from planner.analysis.scoring import TrailingMean, esii_frames

    lengths = esii_frames()
    assert lengths.min() == 1 and lengths.max() == 2  # see docs/methods.md, short-time SII windows
    x = rng.uniform(0, 1, (50, 18))
    expected = np.array([[x[max(0, i - n + 1) : i + 1, b].mean() for b, n in enumerate(lengths)] for i in range(50)])
    tm = TrailingMean(lengths)
    got = np.vstack([tm.process(x[:7]), tm.process(x[7:8]), tm.process(x[8:])])
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12)  # cumulative sums: rounding only


@given(
    low=st.floats(0.0, 1.0),
    high=st.floats(0.0, 1.0),
    sbld=st.one_of(st.none(), st.floats(-40.0, 40.0)),
)
def test_verdict_never_improves_when_the_sii_falls(low: float, high: float, sbld: float | None) -> None:
    # Relation of the rule: a lower SII can never give a better verdict at the same loudness difference.
    order = {"masked": 0, "at-risk": 1, "clear": 2}
    low, high = min(low, high), max(low, high)
    assert order[verdict(low, sbld)] <= order[verdict(high, sbld)]


@given(
    rate_hz=st.sampled_from([8000, 11025, 16000, 22050, 44100, 48000, 96000]),
    b0=st.integers(0, 200_000),
    n=st.integers(0, 3000),
)
def test_frame_runs_give_each_sample_the_frame_that_holds_it(rate_hz: int, b0: int, n: int) -> None:
    # Ground truth from the definition, sample by sample: the frame holding sample s is the
    # largest j whose first sample nearest_int(j * hop) (halves up) is at or before s.
    hop = 0.01 * rate_hz
    expected = []
    for s in range(b0, b0 + n):
        j = int(s // hop) + 1
        while math.floor(j * hop + 0.5) > s:
            j -= 1
        expected.append(j)
    first, counts = frame_runs(b0, n, hop)
    assert counts.sum() == n and (counts > 0).all()  # every frame listed holds a sample
    assert np.repeat(np.arange(first, first + counts.shape[0]), counts).tolist() == expected


# ----------------------------------------------------------------------------- skipping audio


def _stems_blocks(d32: np.ndarray, b32: np.ndarray, ranges: list[tuple[int, int]], block: int) -> list[ProgrammeBlock]:
    return [
        ProgrammeBlock(s, d32[s : min(s + block, stop)] + b32[s : min(s + block, stop)], d32[s : min(s + block, stop)],
                       b32[s : min(s + block, stop)])
        for start, stop in ranges for s in range(start, stop, block)
    ]  # fmt: skip


@pytest.mark.parametrize("layout", ["stereo", "5.1"])
def test_stems_scored_from_their_spans_alone_equal_a_pass_over_everything(layout: str, rng: np.random.Generator) -> None:
    # Speech-shaped noise bursts over a background that changes level, with speech gaps in the
    # activity; cues far apart, so that score_spans skips audio between them. The reference
    # is the same scoring over every sample from 0, which the tests above check against
    # pyloudnorm, sii() and pystoi.
    n = 40 * FS
    n_sp = len(SPEAKERS[layout])
    dialogue = _spread([_noise(rng, n, lowpass_hz=4000.0) * (0.1 + 0.1 * (np.arange(n) // FS % 3 == 0))], layout)
    background = _spread([_noise(rng, n, highpass_hz=300.0) * np.repeat(rng.uniform(0.01, 0.2, 40), FS)] * n_sp, layout)
    # cue 3's context (3 s) reaches back into the span of cues 1-2, its lead-in (0.5 s) does not
    timings = [_timing(1, 2.0, 4.5), _timing(2, 4.8, 6.0), _timing(3, 8.0, 10.0), _timing(4, 15.25, 18.0),
               _timing(5, 30.0, 33.3)]  # fmt: skip
    speech = rng.random(-(-n // HOP)) < 0.8
    activity = _activity(speech.size, speech)
    info = AudioInfo(FS, dialogue.shape[1], n, layout, "WAV", "FLOAT", None)  # type: ignore[arg-type]
    spans = score_spans(timings, info, 0.01)
    assert len(spans) == 4 and sum(b - a for a, b in spans) < n / 2  # cues 1-2 share a span; most audio is skipped
    d32, b32 = dialogue.astype(np.float32), background.astype(np.float32)
    common = dict(info=info, kind="stems", timings=timings, activity=activity, settings=AnalysisSettings(), stoi=False)
    whole = score_cues(_stems_blocks(d32, b32, [(0, n)], 30011), **common)  # type: ignore[arg-type]
    skipped = score_cues(_stems_blocks(d32, b32, list(spans), 30011), **common)  # type: ignore[arg-type]
    for a, b in zip(whole, skipped, strict=True):
        assert a.index == b.index and a.sii is not None
        for name in ("sii", "sii_short", "sbld_lu", "speech_db", "background_db"):
            assert getattr(b, name) == pytest.approx(getattr(a, name), abs=1e-9), name
        assert b.sii_by_profile == pytest.approx(a.sii_by_profile, abs=1e-9)


def test_skipping_into_a_cues_lead_in_or_span_is_refused(rng: np.random.Generator) -> None:
    n = 20 * FS
    d32 = (0.1 * rng.standard_normal((n, 2))).astype(np.float32)
    info = AudioInfo(FS, 2, n, "stereo", "WAV", "FLOAT", None)
    common = dict(info=info, kind="stems", activity=_activity(n // HOP), settings=AnalysisSettings(), stoi=False)
    # resuming 0.3 s before a cue: its first frames would come from unsettled band windows
    resume = [(0, FS), (970 * HOP, n)]
    with pytest.raises(InputError, match="starts within 0.5 s"):
        score_cues(_stems_blocks(d32, d32, resume, FS), timings=[_timing(1, 10.0, 12.0)], **common)  # type: ignore[arg-type]
    # leaving a cue before its end
    cut = [(0, 11 * FS), (15 * FS, n)]
    with pytest.raises(InputError, match="still being read"):
        score_cues(_stems_blocks(d32, d32, cut, FS), timings=[_timing(1, 10.0, 12.0)], **common)  # type: ignore[arg-type]
    # a mix cannot skip: its noise tracker follows the whole programme
    with pytest.raises(InputError, match="contiguous"):
        blocks = [ProgrammeBlock(s, d32[s : s + FS], None, None) for s in (0, 5 * FS)]
        score_cues(blocks, info=info, kind="mix", timings=[_timing(1, 10.0, 12.0)],  # type: ignore[arg-type]
                   activity=_activity(n // HOP), settings=AnalysisSettings(), stoi=False)  # fmt: skip
