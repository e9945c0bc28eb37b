"""Channel arithmetic: detection signal, ITU-R BS.775 fold-down, mid/side, on constructed blocks."""

from __future__ import annotations

import numpy as np
import pytest

from planner.analysis.channels import DETECTION_SOURCE, detection_signal, fold_down_stereo, mid_side
from planner.errors import InputError


def test_detection_signal_per_layout(rng):
    block = rng.uniform(-1, 1, size=(500, 6)).astype(np.float32)
    # 5.1: the centre channel (column 2 in L R C LFE Ls Rs)
    np.testing.assert_array_equal(detection_signal(block, "5.1"), block[:, 2])
    # stereo: (L + R) / 2
    np.testing.assert_allclose(detection_signal(block[:, :2], "stereo"), (block[:, 0] + block[:, 1]) / 2, rtol=1e-6)
    np.testing.assert_array_equal(detection_signal(block[:, :1], "mono"), block[:, 0])
    for layout, ch in (("mono", 1), ("stereo", 2), ("5.1", 6)):
        out = detection_signal(block[:, :ch], layout)
        assert out.dtype == np.float32 and out.shape == (500,) and out.flags.c_contiguous


def test_detection_source_names():
    assert DETECTION_SOURCE == {"5.1": "centre channel", "stereo": "mid (L+R)/2", "mono": "mono"}


def test_fold_down_coefficients():
    # ITU-R BS.775 Table 2: Lo = L + 0.7071 C + 0.7071 Ls, Ro = R + 0.7071 C + 0.7071 Rs, LFE dropped.
    # One unit impulse per channel recovers the 6 x 2 downmix matrix.
    out = fold_down_stereo(np.eye(6, dtype=np.float32))
    expected = np.array([[1, 0], [0, 1], [0.7071, 0.7071], [0, 0], [0.7071, 0], [0, 0.7071]], np.float32)
    np.testing.assert_allclose(out, expected, rtol=1e-7)
    assert out.dtype == np.float32


def test_fold_down_is_linear(rng):
    a, b = (rng.uniform(-0.5, 0.5, size=(300, 6)).astype(np.float32) for _ in range(2))
    np.testing.assert_allclose(fold_down_stereo(a + b), fold_down_stereo(a) + fold_down_stereo(b), atol=1e-6)


def test_mid_side_reconstructs(rng):
    block = rng.uniform(-1, 1, size=(400, 2)).astype(np.float32)
    mid, side = mid_side(block)
    np.testing.assert_allclose(mid + side, block[:, 0], atol=1e-6)
    np.testing.assert_allclose(mid - side, block[:, 1], atol=1e-6)


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: detection_signal(np.zeros((4, 2), np.float32), "5.1"), r"needs a block of shape \(n, 6\), got \(4, 2\)"),
        (lambda: detection_signal(np.zeros((4, 2), np.float32), "quad"), r"layout='quad' must be one of"),
        (lambda: fold_down_stereo(np.zeros((4, 2), np.float32)), r"fold_down_stereo needs a block of shape \(n, 6\)"),
        (lambda: mid_side(np.zeros(4, np.float32)), r"mid_side needs a block of shape \(n, 2\)"),
    ],
    ids=["wrong-count", "unknown-layout", "fold-down", "mid-side-1d"],
)
def test_bad_blocks(call, match):
    with pytest.raises(InputError, match=match):
        call()
