"""Cascaded biquads (planner.analysis.iir) against scipy.signal.sosfilt, the reference library."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from planner.analysis.iir import FLUSH, sosfilt
from planner.analysis.loudness import k_weighting_sos
from planner.errors import InputError

SOS = k_weighting_sos(48000)


def test_the_same_values_as_scipy_over_noise_in_any_split() -> None:
    # Reference: scipy.signal.sosfilt (the same transposed direct form II, same operation order).
    x = np.random.default_rng(5).standard_normal((2, 20000)) * 0.1
    expected, expected_zf = signal.sosfilt(SOS, x, axis=-1, zi=np.zeros((2, 2, 2)))
    first, zf = sosfilt(SOS, x[:, :7001], np.zeros((2, 2, 2)))
    second, zf = sosfilt(SOS, x[:, 7001:], zf)
    np.testing.assert_array_equal(np.hstack([first, second]), expected)
    np.testing.assert_array_equal(zf, expected_zf)


@pytest.mark.parametrize(
    ("n_rows", "sos"),
    [(3, SOS), (5, SOS), (3, signal.butter(6, 0.1, output="sos")), (2, signal.butter(2, 0.3, output="sos"))],
    ids=["3-rows", "5-rows", "three-sections", "one-section"],
)
def test_any_number_of_rows_and_sections_gives_scipys_values(n_rows: int, sos: np.ndarray) -> None:
    # Reference: scipy.signal.sosfilt; rows go through the kernel in pairs, an odd one alone.
    x = np.random.default_rng(8).standard_normal((n_rows, 5000))
    zi = np.random.default_rng(9).standard_normal((sos.shape[0], n_rows, 2)) * 0.01
    expected, expected_zf = signal.sosfilt(sos, x, axis=-1, zi=zi)
    y, zf = sosfilt(sos, x, zi)
    np.testing.assert_array_equal(y, expected)
    np.testing.assert_array_equal(zf, expected_zf)


def test_one_signal_takes_a_one_dimensional_state() -> None:
    x = np.random.default_rng(6).standard_normal(3000)
    expected, expected_zf = signal.sosfilt(SOS, x, zi=np.zeros((2, 2)))
    y, zf = sosfilt(SOS, x, np.zeros((2, 2)))
    np.testing.assert_array_equal(y, expected)
    assert zf.shape == (2, 2)
    np.testing.assert_array_equal(zf, expected_zf)


def test_silence_after_a_sound_filters_to_exact_zeros() -> None:
    # Ground truth: the exact response decays below 1e-30 and stays there (scipy's values),
    # so the flushed output differs from it by less than FLUSH and ends in exact zeros; the
    # resonant RLB high-pass (poles 0.995) must not ring on at the flush level.
    x = np.zeros(96000)
    x[:1000] = np.random.default_rng(7).standard_normal(1000)
    expected = signal.sosfilt(SOS, x)
    y, zf = sosfilt(SOS, x, np.zeros((2, 2)))
    assert np.max(np.abs(y - expected)) < FLUSH
    assert np.all(y[40000:] == 0.0)
    assert np.all(zf == 0.0)


def test_unnormalised_sections_are_refused() -> None:
    with pytest.raises(InputError, match=r"rows b0 b1 b2 1 a1 a2"):
        sosfilt(SOS * 2.0, np.zeros(10), np.zeros((2, 2)))
