"""Streaming band analysis against exact cases and a slow filter-bank oracle."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from planner.analysis.bands import BandAnalyzer, band_spectrum_level_db
from planner.analysis.sii import SII_BANDS_HZ
from planner.errors import SettingsError


def _analyse(x: np.ndarray, fs: float, splits: list[int] | None = None, **kwargs: object) -> np.ndarray:
    analyzer = BandAnalyzer(fs, **kwargs)  # type: ignore[arg-type]
    bounds = [0, *(splits or []), x.size]
    parts = [analyzer.process(x[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
    return np.concatenate([*parts, analyzer.flush()])


def _db(x: np.ndarray | float) -> np.ndarray:
    return 10.0 * np.log10(x)


@pytest.mark.parametrize("fs", [48000, 44100, 32000], ids=["48k", "44k1", "32k"])
@pytest.mark.parametrize("band", range(18), ids=[f"{int(f)}Hz" for f in SII_BANDS_HZ])
def test_sine_at_band_centre_reads_its_mean_square(fs: int, band: int) -> None:
    # Ground truth: a sine of amplitude A has mean square A**2 / 2 (within 0.2 dB, all frames).
    amplitude = 0.3
    t = np.arange(int(1.0 * fs)) / fs
    x = (amplitude * np.sin(2 * np.pi * SII_BANDS_HZ[band] * t + 0.7)).astype(np.float32)
    power = _analyse(x, fs)[15:-15, band]  # frames whose windows lie inside the tone
    np.testing.assert_allclose(_db(power), _db(amplitude**2 / 2), atol=0.2)


def test_frame_count_and_any_split_gives_the_same_frames(rng: np.random.Generator) -> None:
    # Ground truth: ceil(n / hop) frames, and the streaming contract (split invariance), to
    # float32 precision: the transforms run in float32 and a split changes how many frames
    # go through one batched FFT call, whose SIMD lanes and scalar tail round differently
    # (measured: relative 1.9e-7 on one machine, 0 on another), so rtol 1e-6.
    fs = 48000
    x = (0.1 * rng.standard_normal(fs * 2 + 123)).astype(np.float32)
    whole = _analyse(x, fs)
    assert whole.shape == (int(np.ceil(x.size / 480)), 18)
    splits = sorted(int(s) for s in rng.integers(0, x.size, 25))
    np.testing.assert_allclose(_analyse(x, fs, splits), whole, rtol=1e-6, atol=1e-20)
    tiny = list(range(0, 3000, 7))  # many calls shorter than one hop
    np.testing.assert_allclose(_analyse(x, fs, tiny), whole, rtol=1e-6, atol=1e-20)


def test_non_integer_hop_rate_keeps_frames_on_time(rng: np.random.Generator) -> None:
    # Ground truth: at 22.05 kHz a 10 ms hop is 220.5 samples; frames must not drift, so
    # 1000 s of signal still gives exactly 100000 frames (checked on a 10 s signal: 1000).
    fs = 22050
    x = (0.1 * rng.standard_normal(fs * 10)).astype(np.float32)
    assert _analyse(x, fs, [5000, 77777]).shape == (1000, 18)


@pytest.mark.parametrize("band", [1, 11], ids=["200Hz-long-window", "2000Hz-short-window"])
def test_click_lands_in_the_frame_of_its_hop(band: int) -> None:
    # Ground truth: an impulse at t0 peaks in the frame whose hop holds t0 (windows are centred
    # on the hop, and the decimation delay of the low bands is compensated).
    fs = 48000
    x = np.zeros(fs * 2, dtype=np.float32)
    x[int(1.2345 * fs)] = 1.0
    assert int(np.argmax(_analyse(x, fs)[:, band])) == 123


def test_white_noise_power_is_proportional_to_bandwidth(rng: np.random.Generator) -> None:
    # Ground truth: white noise of variance s2 has one-sided PSD 2 * s2 / fs per Hz, so each
    # band reads PSD x bandwidth; 20 s of noise gives about +-0.3 dB scatter in the lowest band.
    fs = 48000
    s2 = 0.01
    x = (np.sqrt(s2) * rng.standard_normal(fs * 20)).astype(np.float32)
    analyzer = BandAnalyzer(fs)
    power = np.concatenate([analyzer.process(x), analyzer.flush()])[10:-10].mean(axis=0)
    np.testing.assert_allclose(_db(power / analyzer.bandwidths_hz), _db(2 * s2 / fs), atol=0.5)


def _oracle_band_power(x: np.ndarray, fs: float, centre_hz: float) -> float:
    # Slow, obviously correct reference: a 6th-order Butterworth one-third-octave band-pass
    # (the classic IEC 61260 filter-bank realisation), mean square of the output.
    sos = signal.butter(3, [centre_hz * 2 ** (-1 / 6), centre_hz * 2 ** (1 / 6)], "bandpass", fs=fs, output="sos")
    y = signal.sosfilt(sos, x.astype(np.float64))
    return float(np.mean(y[int(0.5 * fs) :] ** 2))


def test_coloured_noise_agrees_with_a_butterworth_filter_bank(rng: np.random.Generator) -> None:
    # Reference: scipy.signal.butter filter bank on the same noise, within 1 dB per band; the
    # noise falls 6 dB/octave above 500 Hz so that band edges and leakage matter.
    fs = 48000
    white = rng.standard_normal(fs * 8)
    x = signal.lfilter(*signal.butter(1, 500, fs=fs), white).astype(np.float32)
    ours = _analyse(x, fs)[50:-5].mean(axis=0)
    oracle = np.array([_oracle_band_power(x, fs, fc) for fc in SII_BANDS_HZ])
    np.testing.assert_allclose(_db(ours), _db(oracle), atol=1.0)


def test_silence_reads_zero_and_level_scales_with_gain(rng: np.random.Generator) -> None:
    # Ground truth: zero in gives zero out; +6.02 dB of gain (x2) gives 4x the power.
    fs = 48000
    assert not _analyse(np.zeros(fs, dtype=np.float32), fs).any()
    x = (0.05 * rng.standard_normal(fs)).astype(np.float32)
    np.testing.assert_allclose(_analyse(2 * x, fs), 4 * _analyse(x, fs), rtol=1e-5, atol=1e-18)


def test_other_band_sets() -> None:
    # Ground truth: a 1 kHz tone on a three-band set reads its mean square in the 1 kHz band.
    fs = 48000
    x = (0.5 * np.sin(2 * np.pi * 1000 * np.arange(fs) / fs)).astype(np.float32)
    power = _analyse(x, fs, centres_hz=[250.0, 1000.0, 4000.0])
    assert power.shape[1] == 3
    np.testing.assert_allclose(_db(power[15:-15, 1]), _db(0.125), atol=0.2)


def test_band_spectrum_level_divides_by_bandwidth() -> None:
    # Ground truth: band power equal to the bandwidth in Hz is 1 per Hz, i.e. 0 dB + offset.
    analyzer = BandAnalyzer(48000)
    level = band_spectrum_level_db(analyzer.bandwidths_hz * 10.0, 90.0)
    np.testing.assert_allclose(level, 100.0, atol=1e-9)
    assert band_spectrum_level_db(np.zeros(18), 90.0)[0] == -np.inf


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"sample_rate_hz": 0}, "sample_rate_hz=0 must be positive"),
        ({"sample_rate_hz": 48000, "frame_s": 0.0}, "frame_s=0.0 must be in"),
        ({"sample_rate_hz": 48000, "centres_hz": [1000.0, 500.0]}, "increasing order"),
    ],
    ids=["rate", "frame", "centres"],
)
def test_bad_settings_raise(kwargs: dict[str, object], match: str) -> None:
    with pytest.raises(SettingsError, match=match):
        BandAnalyzer(**kwargs)  # type: ignore[arg-type]


def test_stereo_block_is_refused() -> None:
    with pytest.raises(SettingsError, match="takes one channel"):
        BandAnalyzer(48000).process(np.zeros((10, 2), dtype=np.float32))


@pytest.mark.parametrize(("stop_db", "width"), [(80.0, 0.12), (60.0, 0.05), (40.0, 0.2), (15.0, 0.3)], ids=str)
def test_filter_designs_equal_scipy_signals(stop_db: float, width: float) -> None:
    # Reference: scipy.signal (kaiserord, firwin with a Kaiser window, windows.hann), the
    # designs these replace so that an analysis does not import it.
    from scipy import signal

    from planner.analysis.firdesign import kaiser_lowpass, kaiser_order, periodic_hann

    n_taps, beta = kaiser_order(stop_db, width)
    assert (n_taps, beta) == pytest.approx(signal.kaiserord(stop_db, width), rel=1e-12)
    expected = signal.firwin(n_taps, 1234.5, window=("kaiser", beta), fs=48000.0)
    np.testing.assert_allclose(kaiser_lowpass(n_taps, 1234.5, beta, 48000.0), expected, rtol=1e-9, atol=1e-15)
    for n in (320, 960, 7):
        np.testing.assert_allclose(periodic_hann(n), signal.windows.hann(n, sym=False), rtol=1e-12, atol=1e-15)
