"""BS.1770-4 / EBU Tech 3341 / Tech 3342 meter against published cases and a reference library.

Every test signal is synthesized here from its published definition (EBU Tech 3341 Table 1,
Tech 3342 Table 1, as summarised in the project's CHECKS sheet sections 1.1-1.4). pyloudnorm
0.2 with ``filter_class="DeMan"`` (coefficients equal to BS.1770 Tables 1-2) is the
independent reference on random signals.
"""

from __future__ import annotations

import numpy as np
import pyloudnorm as pyln
import pytest
from scipy.signal import butter, resample_poly, sosfilt, sosfreqz, upfirdn

from planner.analysis.loudness import (
    LoudnessMeter,
    TruePeakMeter,
    _prototype_sos,
    channel_weights,
    k_weighting_sos,
    measure_loudness,
)
from planner.analysis.truepeak import TRUE_PEAK_FIR
from planner.errors import AudioInputError, InputError

FS = 48000


def tone(level_dbfs: float, seconds: float, n_channels: int = 2, freq_hz: float = 1000.0, fs: int = FS) -> np.ndarray:
    """A sine of the given per-channel peak level, identical (in phase) on every channel."""
    t = np.arange(int(round(seconds * fs))) / fs
    x = (10.0 ** (level_dbfs / 20.0) * np.sin(2 * np.pi * freq_hz * t)).astype(np.float32)
    return np.repeat(x[:, None], n_channels, axis=1)


def assert_same(a, b) -> None:
    """Two summaries agree to rounding (None where the other is None)."""
    da, db = a.to_dict(), b.to_dict()
    assert da.keys() == db.keys()
    for key, value in db.items():
        assert da[key] == (None if value is None else pytest.approx(value, rel=1e-12, abs=1e-9)), key


def meter(x: np.ndarray, layout: str = "stereo", block: int = 65536, fs: int = FS, **kw):
    m = LoudnessMeter(fs, layout)
    for i in range(0, x.shape[0], block):
        m.feed(x[i : i + block])
    return m.summary(**kw)


# --------------------------------------------------------------------------- K-weighting filter

# BS.1770-4 Annex 1 Table 1 (shelf) and Table 2 (high-pass), 48 kHz: b0 b1 b2 a0 a1 a2.
TABLE_1 = [1.53512485958697, -2.69169618940638, 1.19839281085285, 1.0, -1.69065929318241, 0.73248077421585]
TABLE_2 = [1.0, -2.0, 1.0, 1.0, -1.99004745483398, 0.99007225036621]


def test_k_weighting_48k_is_the_table():
    # BS.1770-4 Tables 1-2, to 1e-10 (CHECKS 1.1)
    np.testing.assert_allclose(k_weighting_sos(48000), [TABLE_1, TABLE_2], rtol=0, atol=1e-10)


def test_prototype_design_reproduces_the_table_at_48k():
    # The bilinear design that serves the other rates gives BS.1770-4 Tables 1-2 at 48 kHz (CHECKS 1.1: 5e-13).
    np.testing.assert_allclose(_prototype_sos(48000), [TABLE_1, TABLE_2], rtol=0, atol=1e-10)


# K-weighting magnitude of the Table 1-2 filter at 48 kHz, dB (CHECKS 1.1, [calc] freqz, ±0.001 dB)
K_RESPONSE_DB = {20: -13.275, 50: -3.934, 100: -1.133, 500: 0.042, 997: 0.691, 1000: 0.698, 2000: 3.071, 4000: 3.968, 10000: 4.042}


@pytest.mark.parametrize(
    ("fs", "tol_db"),
    [(48000, 0.001), (44100, 0.005), (88200, 0.006), (96000, 0.006), (32000, 0.01)],
    ids=["48k", "44k1", "88k2", "96k", "32k"],
)
def test_k_weighting_response_matches_48k_at_every_rate(fs, tol_db):
    # BS.1770-4 Annex 1: other rates must have "the same frequency response as the 48 kHz filter";
    # the tolerance is what the bilinear warping of the shelf leaves (chosen here, not published).
    freqs = np.array(sorted(K_RESPONSE_DB), dtype=float)
    _, h = sosfreqz(k_weighting_sos(fs), worN=freqs, fs=fs)
    np.testing.assert_allclose(20 * np.log10(np.abs(h)), [K_RESPONSE_DB[f] for f in sorted(K_RESPONSE_DB)], atol=tol_db)


def test_channel_weights_table_3():
    # BS.1770-4 Table 3: L, R, C 1.0; Ls, Rs 1.41; LFE excluded (Tech 3341 §2.10)
    assert channel_weights("5.1") == (1.0, 1.0, 1.0, 0.0, 1.41, 1.41)
    assert channel_weights("stereo") == (1.0, 1.0)


# --------------------------------------------------------------------------- EBU Tech 3341 / 3342 cases


def _case(parts: list[tuple[float, float]]) -> np.ndarray:
    return np.concatenate([tone(level, seconds) for level, seconds in parts])


TECH_3341 = {
    # EBU Tech 3341 (2023) §2.9 Table 1, stereo 1 kHz in phase, per-channel peak levels; all I = -23.0 ±0.1
    "case1": [(-23.0, 20.0)],
    "case2": [(-33.0, 20.0)],
    "case3": [(-36.0, 10.0), (-23.0, 60.0), (-36.0, 10.0)],
    "case4": [(-72.0, 10.0), (-36.0, 10.0), (-23.0, 60.0), (-36.0, 10.0), (-72.0, 10.0)],
    "case5": [(-26.0, 20.0), (-20.0, 20.1), (-26.0, 20.0)],
}
EXPECTED_I = {"case1": -23.0, "case2": -33.0, "case3": -23.0, "case4": -23.0, "case5": -23.0}


@pytest.mark.parametrize("case", sorted(TECH_3341), ids=sorted(TECH_3341))
def test_tech_3341_integrated(case):
    # EBU Tech 3341 Table 1 tests 1-5: integrated loudness within ±0.1 LU
    s = meter(_case(TECH_3341[case]))
    assert s.integrated_lufs == pytest.approx(EXPECTED_I[case], abs=0.1)


@pytest.mark.parametrize("case", ["case1", "case2"], ids=["case1", "case2"])
def test_tech_3341_momentary_and_short_term(case):
    # EBU Tech 3341 Table 1 tests 1-2: M and S also read -23.0 / -33.0 (±0.1)
    s = meter(_case(TECH_3341[case]))
    assert s.max_momentary_lufs == pytest.approx(EXPECTED_I[case], abs=0.1)
    assert s.max_short_term_lufs == pytest.approx(EXPECTED_I[case], abs=0.1)


def test_tech_3341_case6_five_channels():
    # EBU Tech 3341 Table 1 test 6: L, R -28; C -24; Ls, Rs -30 dBFS, 20 s -> I = -23.0 ±0.1.
    # Laid out as 5.1 with a silent LFE (the LFE is excluded anyway).
    x = np.concatenate([tone(-28, 20, 2), tone(-24, 20, 1), np.zeros((20 * FS, 1), np.float32), tone(-30, 20, 2)], axis=1)
    assert meter(x, "5.1").integrated_lufs == pytest.approx(-23.0, abs=0.1)


def test_lfe_is_excluded():
    # BS.1770-4 Annex 1 / Tech 3341 §2.10: the LFE channel does not count
    x = np.concatenate([tone(-28, 10, 2), tone(-24, 10, 1), np.zeros((10 * FS, 3), np.float32)], axis=1)
    loud_lfe = x.copy()
    loud_lfe[:, 3] = tone(-3, 10, 1, freq_hz=60)[:, 0]
    assert meter(loud_lfe, "5.1").integrated_lufs == pytest.approx(meter(x, "5.1").integrated_lufs, abs=1e-9)


def _tp_signal(freq_hz: float, amplitude: float, phase_deg: float) -> np.ndarray:
    # Tech 3341 Table 1 tests 15-19: sine of the given amplitude (FFS) and start phase, 10 ms fades;
    # 1 s long and stereo here (the length is our choice).
    t = np.arange(FS)
    x = amplitude * np.sin(2 * np.pi * freq_hz * t / FS + np.deg2rad(phase_deg))
    ramp = np.linspace(0.0, 1.0, FS // 100)
    x[: ramp.size] *= ramp
    x[-ramp.size :] *= ramp[::-1]
    return np.repeat(x.astype(np.float32)[:, None], 2, axis=1)


TECH_3341_TP = {
    # EBU Tech 3341 Table 1 tests 15-19: expected max true peak, tolerance +0.2 / -0.4 dB
    "case15": (FS / 4, 0.50, 0.0, -6.0),
    "case16": (FS / 4, 0.50, 45.0, -6.0),
    "case17": (FS / 6, 0.50, 60.0, -6.0),
    "case18": (FS / 8, 0.50, 67.5, -6.0),
    "case19": (FS / 4, 1.41, 45.0, 3.0),
}


@pytest.mark.parametrize("case", sorted(TECH_3341_TP), ids=sorted(TECH_3341_TP))
def test_tech_3341_true_peak(case):
    freq, amp, phase, expected = TECH_3341_TP[case]
    s = meter(_tp_signal(freq, amp, phase))
    assert expected - 0.4 <= s.true_peak_dbtp <= expected + 0.2


TECH_3342 = {
    # EBU Tech 3342 (2023) Table 1 tests 1-4, stereo 1 kHz, 20 s per level; LRA ±1 LU
    "case1": ([-20.0, -30.0], 10.0),
    "case2": ([-20.0, -15.0], 5.0),
    "case3": ([-40.0, -20.0], 20.0),
    "case4": ([-50.0, -35.0, -20.0, -35.0, -50.0], 15.0),
}


@pytest.mark.parametrize("case", sorted(TECH_3342), ids=sorted(TECH_3342))
def test_tech_3342_loudness_range(case):
    levels, expected = TECH_3342[case]
    s = meter(_case([(level, 20.0) for level in levels]))
    assert s.loudness_range_lu == pytest.approx(expected, abs=1.0)


def test_mono_trap():
    # CHECKS 1.1 [calc]: a one-channel 1 kHz sine at -23 dBFS reads -26.0 LUFS as mono, -23.0 as a stereo pair
    assert meter(tone(-23, 10, 1), "mono").integrated_lufs == pytest.approx(-26.0, abs=0.1)
    assert meter(tone(-23, 10, 2), "stereo").integrated_lufs == pytest.approx(-23.0, abs=0.1)


def test_calibration_tone():
    # EBU Tech 3341 §2.9: stereo 1 kHz at -18 dBFS peak per channel reads -18.0 LUFS (±0.1)
    assert meter(tone(-18, 10)).integrated_lufs == pytest.approx(-18.0, abs=0.1)


# --------------------------------------------------------------------------- against pyloudnorm


def _programme(rng: np.random.Generator, seconds: float, n_channels: int, fs: int) -> np.ndarray:
    """Random noise in 1 s scenes at random levels (some quiet enough for the relative gate)."""
    n = int(seconds * fs)
    gains_db = rng.uniform(-45.0, 0.0, size=(int(np.ceil(seconds)), n_channels))
    gains = np.repeat(10.0 ** (gains_db / 20.0), fs, axis=0)[:n]
    return (0.2 * rng.standard_normal((n, n_channels)) * gains).astype(np.float32)


@pytest.mark.parametrize(
    ("layout", "fs"),
    [("mono", 48000), ("stereo", 48000), ("stereo", 44100), ("5.1", 48000), ("5.1", 96000)],
    ids=["mono-48k", "stereo-48k", "stereo-44k1", "5.1-48k", "5.1-96k"],
)
def test_integrated_matches_pyloudnorm_deman(rng, layout, fs):
    # pyloudnorm 0.2, filter_class="DeMan" (BS.1770 Tables 1-2): agree within 0.01 LU (CHECKS 1.6).
    # Away from 48 kHz pyloudnorm's high-pass has passband gain g(fs) = 1 + K/Q + K^2 (K = tan(pi fc/fs)),
    # ours keeps the 48 kHz table's g(48k) (see k_weighting_sos): the reference is shifted by 20 log10 of
    # their ratio (0 at 48 kHz, +0.004 dB at 44.1 kHz, +0.022 dB at 96 kHz).
    n_channels = {"mono": 1, "stereo": 2, "5.1": 6}[layout]
    x = _programme(rng, 20.0 if fs <= 48000 else 8.0, n_channels, fs)
    ref_input = np.delete(x, 3, axis=1) if layout == "5.1" else x  # pyloudnorm: L R C Ls Rs, no LFE
    reference = pyln.Meter(fs, filter_class="DeMan").integrated_loudness(ref_input.astype(np.float64))

    def gain(rate: float) -> float:
        k = np.tan(np.pi * 38.13547087613982 / rate)
        return 1.0 + k / 0.5003270373253953 + k * k

    shift = 20 * np.log10(gain(48000) / gain(fs))
    assert meter(x, layout, fs=fs).integrated_lufs == pytest.approx(reference + shift, abs=0.01)


# --------------------------------------------------------------------------- streaming and gating


@pytest.mark.parametrize("block", [7, 777, 4800, 65536, 10**7], ids=["7", "777", "4800", "65536", "whole"])
def test_block_size_does_not_change_the_result(rng, block):
    x = _programme(rng, 8.0 if block > 7 else 0.45, 2, FS)
    mask = rng.random(800) < 0.5
    assert_same(meter(x, block=block, speech_mask=mask), meter(x, block=65536, speech_mask=mask))


def test_random_splits_equal_one_block(rng):
    x = _programme(rng, 6.0, 6, FS)
    cuts = np.sort(rng.choice(x.shape[0], size=40, replace=False))
    m = LoudnessMeter(FS, "5.1")
    for part in np.split(x, cuts):
        m.feed(part)
        m.feed(part[:0])  # empty blocks are allowed and change nothing
    one = meter(x, "5.1", block=x.shape[0])
    assert_same(m.summary(), one)


def test_gain_shifts_loudness_by_the_gain(rng):
    # Relation: +6.02 dB of gain (x2) measures 6.02 LU louder, LRA unchanged (BS.1770 is a power measure)
    x = _programme(rng, 20.0, 2, FS)
    a, b = meter(x), meter(2.0 * x)
    assert b.integrated_lufs - a.integrated_lufs == pytest.approx(20 * np.log10(2.0), abs=1e-6)
    assert b.loudness_range_lu == pytest.approx(a.loudness_range_lu, abs=1e-6)
    assert b.true_peak_dbtp - a.true_peak_dbtp == pytest.approx(20 * np.log10(2.0), abs=1e-4)


def test_silence_reads_none():
    s = meter(np.zeros((5 * FS, 2), np.float32), speech_mask=np.ones(500, bool))
    assert (s.integrated_lufs, s.loudness_range_lu, s.max_momentary_lufs, s.max_short_term_lufs, s.speech_lufs) == (
        None,
        None,
        None,
        None,
        None,
    )
    assert s.true_peak_dbtp == -200.0 and s.sample_peak_dbfs == -200.0


def test_too_short_for_a_block():
    # BS.1770-4 Annex 1: an incomplete 400 ms block is discarded, so 0.39 s has no integrated loudness
    s = meter(tone(-20, 0.39))
    assert s.integrated_lufs is None and s.max_short_term_lufs is None
    assert s.sample_peak_dbfs == pytest.approx(-20.0, abs=0.01)


def test_absolute_gate_below_minus_70():
    # BS.1770-4 eq. (6): a programme entirely below -70 LUFS is gated out
    assert meter(tone(-75, 5)).integrated_lufs is None


# --------------------------------------------------------------------------- speech-gated loudness


def test_speech_lufs_over_the_marked_blocks():
    # Ground truth constructed here: 10 s of -26 dBFS, 10 s of -20 dBFS marked as speech, 10 s of -26.
    # Blocks start every 100 ms; those starting at 9.8 s and 9.9 s hold 50 % / 75 % speech frames, as do
    # 19.8 s / 19.7 s at the end, so 97 whole + 4 partial blocks count (>= half). Power of a partial block:
    # f*E20 + (1-f)*E26 with E26 = E20 * 10**-0.6. The -20 dBFS level itself is measured by pyloudnorm-DeMan.
    x = _case([(-26.0, 10.0), (-20.0, 10.0), (-26.0, 10.0)])
    mask = np.zeros(3000, bool)
    mask[1000:2000] = True
    e26 = 10 ** -0.6
    share = (97 + 2 * (0.75 + 0.25 * e26) + 2 * (0.5 + 0.5 * e26)) / 101
    level_20 = pyln.Meter(FS, filter_class="DeMan").integrated_loudness(tone(-20, 10).astype(np.float64))
    s = meter(x, speech_mask=mask)
    assert s.speech_lufs == pytest.approx(level_20 + 10 * np.log10(share), abs=0.01)
    assert s.integrated_lufs < s.speech_lufs - 2.0


def test_speech_mask_everywhere_equals_integrated(rng):
    x = _programme(rng, 12.0, 2, FS)
    s = meter(x, speech_mask=np.ones(1200, bool))
    assert s.speech_lufs == pytest.approx(s.integrated_lufs, abs=1e-12)


def test_speech_mask_frame_length_is_honoured():
    # The same speech span given as 10 ms or 20 ms frames selects the same blocks
    x = _case([(-26.0, 10.0), (-20.0, 10.0), (-26.0, 10.0)])
    fine, coarse = np.zeros(3000, bool), np.zeros(1500, bool)
    fine[1000:2000], coarse[500:1000] = True, True
    assert meter(x, speech_mask=fine).speech_lufs == pytest.approx(
        meter(x, speech_mask=coarse, frame_s=0.02).speech_lufs, abs=1e-12
    )


def test_no_speech_gives_none():
    assert meter(tone(-20, 5), speech_mask=np.zeros(500, bool)).speech_lufs is None
    assert meter(tone(-20, 5)).speech_lufs is None


# --------------------------------------------------------------------------- true peak


def _reference_true_peak(x: np.ndarray) -> float:
    """Slow oracle: scipy's polyphase upfirdn with the same interpolator, every output computed."""
    return max(float(np.abs(upfirdn(TRUE_PEAK_FIR, x[:, c].astype(np.float64), up=4)).max()) for c in range(x.shape[1]))


@pytest.mark.parametrize("block", [1, 31, 32, 1000, 65536], ids=["1", "31", "32", "1000", "65536"])
def test_true_peak_equals_full_oversampling(rng, block):
    x = _programme(rng, 3.0 if block > 1 else 0.5, 2, FS)
    m = TruePeakMeter(FS, 2)
    for i in range(0, x.shape[0], block):
        m.feed(x[i : i + block])
    assert m.true_peak == pytest.approx(_reference_true_peak(x), rel=1e-6)


def test_true_peak_close_to_resample_poly(rng):
    # scipy.signal.resample_poly (own Kaiser design) on noise band-limited to 15 kHz: within 0.05 dB
    sos = butter(8, 15000, fs=FS, output="sos")  # both interpolators are flat to 15 kHz
    x = np.stack([sosfilt(sos, rng.standard_normal(FS * 2)) for _ in range(2)], axis=1)
    x = (0.5 * x / np.abs(x).max()).astype(np.float32)
    m = TruePeakMeter(FS, 2)
    m.feed(x)
    reference = max(np.abs(resample_poly(x[:, c].astype(np.float64), 4, 1)).max() for c in range(2))
    assert m.dbtp == pytest.approx(20 * np.log10(reference), abs=0.05)


def test_true_peak_is_never_below_sample_peak(rng):
    x = rng.uniform(-1, 1, size=(4800, 1)).astype(np.float32)
    m = TruePeakMeter(FS, 1)
    m.feed(x)
    assert m.true_peak >= m.sample_peak == pytest.approx(float(np.abs(x).max()))


def test_reading_dbtp_does_not_disturb_the_stream(rng):
    x = _programme(rng, 2.0, 2, FS)
    m = TruePeakMeter(FS, 2)
    m.feed(x[:50001])
    _ = m.dbtp
    m.feed(x[50001:])
    assert m.true_peak == pytest.approx(_reference_true_peak(x), rel=1e-6)


# --------------------------------------------------------------------------- entry point and errors


def test_measure_loudness_is_the_meter(rng):
    x = _programme(rng, 6.0, 2, FS)
    blocks = (x[i : i + 4096] for i in range(0, x.shape[0], 4096))
    assert_same(measure_loudness(blocks, FS, "stereo"), meter(x))


def test_peaks_metered_elsewhere_read_the_same(rng):
    # Ground truth: the one-meter reading of the same samples (the split must change nothing).
    x = _programme(rng, 6.0, 2, FS)
    loudness, peaks = LoudnessMeter(FS, "stereo", true_peak=False), TruePeakMeter(FS, 2)
    for i in range(0, x.shape[0], 4096):
        loudness.feed(x[i : i + 4096])
        peaks.feed(x[i : i + 4096])
    assert_same(loudness.summary(peaks=peaks), meter(x))


@pytest.mark.parametrize(
    ("make", "match"),
    [
        (lambda: LoudnessMeter(FS, "stereo").feed(np.zeros((10, 6), np.float32)), r"does not match layout 'stereo'"),
        (lambda: LoudnessMeter(FS, "7.1"), r"layout='7.1' must be one of mono, stereo, 5.1"),
        (lambda: TruePeakMeter(FS, 2).feed(np.zeros((10, 1), np.float32)), r"does not match n_channels=2"),
        (lambda: meter(tone(-20, 1), speech_mask=np.ones(100, bool), frame_s=0.0), r"frame_s=0.0 must be in"),
        (lambda: LoudnessMeter(FS, "stereo", true_peak=False).summary(), r"made with true_peak=False; pass peaks="),
    ],
    ids=["channels", "layout", "tp-channels", "frame-s", "no-peaks"],
)
def test_bad_arguments(make, match):
    with pytest.raises(InputError, match=match):
        make()


def test_too_low_rate():
    with pytest.raises(AudioInputError, match=r"sample_rate_hz=4000 is too low .*resample to at least 8000 Hz"):
        k_weighting_sos(4000)
