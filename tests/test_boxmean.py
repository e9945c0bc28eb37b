"""Box means against scipy.ndimage (the reference library the render used before): bit for bit."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.ndimage import uniform_filter, uniform_filter1d

from planner.render.boxmean import box_mean, box_mean_frames

SHAPES = [(136, 1025), (7, 5), (1, 3), (2, 1), (3, 1025)]


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("size", [1, 2, 3, 4, 5, 7, 9])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_frames_equal_scipy_uniform_filter1d(shape: tuple[int, int], size: int, dtype: type) -> None:
    rng = np.random.default_rng(size * 100 + shape[0])
    x = (rng.standard_normal(shape) ** 2 * 10.0 ** rng.uniform(-8, 2, shape)).astype(dtype)
    got = box_mean_frames(x, size)
    assert got.dtype == x.dtype
    assert np.array_equal(got, uniform_filter1d(x, size, axis=0, mode="nearest"))


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("size", [(1, 1), (3, 1), (5, 3), (7, 3), (3, 9), (1, 3)])
def test_box_equals_scipy_uniform_filter(shape: tuple[int, int], size: tuple[int, int]) -> None:
    rng = np.random.default_rng(shape[0] + 7 * size[0] + size[1])
    x = (rng.standard_normal(shape) ** 2).astype(np.float32)
    got = box_mean(x, size)
    assert got is not x and got.dtype == np.float32
    assert np.array_equal(got, uniform_filter(x, size, mode="nearest"))


def test_strided_and_broadcast_inputs() -> None:
    # what the render hands over: the real and imaginary parts of a complex spectrogram (strided
    # views) and a per-bin mean broadcast over the frames (stride 0)
    rng = np.random.default_rng(3)
    z = (rng.standard_normal((40, 513)) + 1j * rng.standard_normal((40, 513))).astype(np.complex64)
    for part in (z.real, z.imag):
        assert np.array_equal(box_mean_frames(part, 5), uniform_filter1d(part, 5, axis=0, mode="nearest"))
    row = (rng.standard_normal(513) ** 2).astype(np.float32)
    wide = np.broadcast_to(row, (40, 513))
    assert np.array_equal(box_mean(wide, (5, 9)), uniform_filter(wide, (5, 9), mode="nearest"))
