"""Box (moving) means of a spectrogram along time and frequency, edges extended by their nearest value.

The same numbers as ``scipy.ndimage.uniform_filter(x, size, mode="nearest")`` and
``uniform_filter1d(x, size, axis=0, mode="nearest")``, bit for bit (tests/test_boxmean.py):
each line is extended by ``size // 2`` copies of its first value before it and the rest
after, a running sum is kept in float64 (the first window added in order, then the entering
value added and the leaving one subtracted) and divided by ``size`` for each output, which
takes the input's type; a 2-D mean is the time axis first, then frequency. Compiled, with
the time pass running across all bins of a frame at once (contiguous memory), which the
strided line-by-line pass of ``scipy.ndimage`` does not: about 7 times faster on the
render's (frames, 1025) spectrograms.
"""

from __future__ import annotations

from typing import Any, TypeVar

import numpy as np
import numpy.typing as npt

from planner.jit import compiled

Array = TypeVar("Array", bound=npt.NDArray[Any])


@compiled()
def _along_frames(x, size, out):  # type: ignore[no-untyped-def]
    n, m = x.shape
    before = size // 2
    total = np.zeros(m)
    for i in range(size):
        row = min(max(i - before, 0), n - 1)
        for j in range(m):
            total[j] += x[row, j]
    for j in range(m):
        out[0, j] = total[j] / size
    for k in range(1, n):
        enter = min(max(k + size - 1 - before, 0), n - 1)
        leave = min(max(k - 1 - before, 0), n - 1)
        for j in range(m):
            total[j] += np.float64(x[enter, j]) - np.float64(x[leave, j])
            out[k, j] = total[j] / size


@compiled()
def _along_bins(x, size, out):  # type: ignore[no-untyped-def]
    n, m = x.shape
    before = size // 2
    for r in range(n):
        total = 0.0
        for i in range(size):
            total += x[r, min(max(i - before, 0), m - 1)]
        out[r, 0] = total / size
        for k in range(1, m):
            enter = min(max(k + size - 1 - before, 0), m - 1)
            leave = min(max(k - 1 - before, 0), m - 1)
            total += np.float64(x[r, enter]) - np.float64(x[r, leave])
            out[r, k] = total / size


def box_mean_frames(x: Array, size: int) -> Array:
    """Mean over ``size`` frames centred on each frame of a 2-D ``(frames, bins)`` array, same dtype."""
    out: Array = np.empty_like(x)
    _along_frames(x, int(size), out)
    return out


def box_mean(x: Array, size: tuple[int, int]) -> Array:
    """Mean over a ``(frames, bins)`` box centred on each cell of a 2-D array, same dtype (a size of 1 leaves that axis)."""
    n_frames, n_bins = size
    out = x if n_frames == 1 else box_mean_frames(x, n_frames)
    if n_bins > 1:
        smoothed: Array = np.empty_like(out)
        _along_bins(out, int(n_bins), smoothed)
        out = smoothed
    return out if out is not x else x.copy()
