"""Channel arithmetic on audio blocks: the signal speech detection listens to, fold-down, mid/side.

Blocks are float32 ``(n, n_channels)`` in the reader's order (5.1: L R C LFE Ls Rs). Every
function here works on whole columns (no ``mean(axis=1)``, which is several times slower
on interleaved frames) and returns new arrays.
"""

from __future__ import annotations

import numpy as np

from planner._typing import AudioArray
from planner.errors import InputError
from planner.model import Layout

#: What :func:`detection_signal` takes from each layout, in words for reports.
DETECTION_SOURCE: dict[Layout, str] = {"mono": "mono", "stereo": "mid (L+R)/2", "5.1": "centre channel"}

_CHANNELS: dict[Layout, int] = {"mono": 1, "stereo": 2, "5.1": 6}
#: -3 dB as written in ITU-R BS.775 Table 2 (the downmix coefficient for C and the surrounds).
MINUS_3_DB = np.float32(0.7071)
_L, _R, _C, _LS, _RS = 0, 1, 2, 4, 5  # column 3 is the LFE


def _check(block: AudioArray, n_channels: int, what: str) -> None:
    if block.ndim != 2 or block.shape[1] != n_channels:
        raise InputError(f"{what} needs a block of shape (n, {n_channels}), got {block.shape}; pass the reader's blocks")


def detection_signal(block: AudioArray, layout: Layout) -> AudioArray:
    """The mono signal that speech detection analyses.

    Dialogue sits in the centre channel of a 5.1 mix and in the mid signal of a stereo
    mix (common practice), so: 5.1 -> C, stereo -> (L + R) / 2, mono -> the channel.

    Parameters
    ----------
    block : ndarray
        float32 ``(n, n_channels)`` with the channel count of ``layout``.
    layout : {"mono", "stereo", "5.1"}

    Returns
    -------
    ndarray
        float32 ``(n,)``, contiguous.
    """
    if layout not in _CHANNELS:
        raise InputError(f"layout={layout!r} must be one of {', '.join(_CHANNELS)}; pass one of those")
    _check(block, _CHANNELS[layout], f"layout {layout!r}")
    if layout == "stereo":
        out = block[:, _L] + block[:, _R]
        out *= np.float32(0.5)
        return out.astype(np.float32, copy=False)
    column = _C if layout == "5.1" else 0
    return np.ascontiguousarray(block[:, column], dtype=np.float32)


def fold_down_stereo(block: AudioArray) -> AudioArray:
    """Stereo fold-down of a 5.1 block by ITU-R BS.775 Table 2.

    Lo = L + 0.7071 C + 0.7071 Ls, Ro = R + 0.7071 C + 0.7071 Rs; the LFE is dropped
    (BS.775 leaves it out of the downmix). No normalisation: the result can exceed full scale.

    Returns
    -------
    ndarray
        float32 ``(n, 2)``.
    """
    _check(block, 6, "fold_down_stereo")
    centre = block[:, _C] * MINUS_3_DB
    out = np.empty((block.shape[0], 2), dtype=np.float32)
    out[:, 0] = block[:, _L] + centre + MINUS_3_DB * block[:, _LS]
    out[:, 1] = block[:, _R] + centre + MINUS_3_DB * block[:, _RS]
    return out


def mid_side(block: AudioArray) -> tuple[AudioArray, AudioArray]:
    """Mid ``(L + R) / 2`` and side ``(L - R) / 2`` of a stereo block, each float32 ``(n,)``."""
    _check(block, 2, "mid_side")
    left, right = block[:, _L], block[:, _R]
    half = np.float32(0.5)
    return ((left + right) * half).astype(np.float32, copy=False), ((left - right) * half).astype(np.float32, copy=False)
