"""Mean squares per 10 ms analysis frame, streaming, and the frame K-powers pass 1 measures for pass 2.

:class:`FrameMeanSquares` sums the squares of any number of signals frame by frame (frame
``j`` covers samples ``[floor(j h + 0.5), floor((j + 1) h + 0.5))``, ``h`` the hop in
samples) in a compiled loop without temporaries. :class:`SignalKPower` uses it on the
K-weighted channels of the loudness meter: every analysed signal of a mix (stereo mid and
side, 5.1 channels and the ITU-R BS.775 fold-down's mid and side; see
:mod:`planner.analysis.features`) is a fixed combination of the channels and filtering is
linear, so its K-weighted power per frame comes from the meter's filtering, and the scoring
pass filters nothing again.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import numpy.typing as npt

from planner._typing import FloatArray
from planner.analysis.channels import MINUS_3_DB
from planner.jit import compiled
from planner.model import AudioInfo, Layout
from planner.units import ANALYSIS_FRAME_S


# fastmath: the sums of each frame are added in a vectorised order (deterministic, not sequential)
@compiled(nogil=True, fastmath=True)
def _frame_mean_squares(signals, ends, acc, out):  # type: ignore[no-untyped-def]
    """Mean square of each row of ``signals`` over each frame ending (exclusive) at ``ends``
    within this block, into ``out`` ``(len(ends), n_signals)``; ``acc`` carries the
    unfinished frame's sums and, last, its sample count from block to block."""
    n_signals, n = signals.shape
    start = 0
    for k in range(ends.size + 1):
        stop = ends[k] if k < ends.size else n
        for s in range(n_signals):
            total = 0.0
            for i in range(start, stop):
                v = np.float64(signals[s, i])  # exact squares of float32 samples too
                total += v * v
            acc[s] += total
        acc[n_signals] += stop - start
        if k < ends.size:
            for s in range(n_signals):
                out[k, s] = acc[s] / acc[n_signals]
                acc[s] = 0.0
            acc[n_signals] = 0.0
        start = stop


class FrameMeanSquares:
    """Mean square of each of several signals per analysis frame, streaming.

    Frames as in the module docstring: frame ``j`` covers samples ``[floor(j h + 0.5),
    floor((j + 1) h + 0.5))`` (``h`` the hop in samples, float); :meth:`feed` gives the
    frames its samples complete, :meth:`flush` the rest (the last one partial, the mean over
    the samples it has), so that ``n`` samples give ``ceil(n / h)`` frames. The squares are
    summed by a compiled loop, without temporaries.
    """

    def __init__(self, hop: float, n_signals: int) -> None:
        self._hop = hop
        self._n_seen = 0
        self._next_frame = 0  # next frame to complete
        self._acc = np.zeros((n_signals, 2))  # per signal: sum of squares of the unfinished frame, its sample count

    def _boundary(self, j: npt.NDArray[np.int64]) -> npt.NDArray[np.int64]:
        return np.floor(j * self._hop + 0.5).astype(np.int64)

    def _complete_frames(self) -> int:
        """Number of frames whose last sample has arrived: largest m with boundary(m) <= n_seen."""
        m = int((self._n_seen + 0.5) // self._hop)
        while int(self._boundary(np.array([m + 1]))[0]) <= self._n_seen:
            m += 1
        while m > 0 and int(self._boundary(np.array([m]))[0]) > self._n_seen:
            m -= 1
        return m

    def feed(self, signals: Sequence[FloatArray]) -> FloatArray:
        """Mean squares ``(n_frames, n_signals)`` of the frames completed by the next samples of
        every signal (1-D, equal lengths, any float dtype; squared and summed in float64)."""
        first = self._n_seen
        self._n_seen += len(signals[0])
        stop = max(self._complete_frames(), self._next_frame)
        ends = self._boundary(np.arange(self._next_frame + 1, stop + 1)) - first
        self._next_frame = stop
        out = np.empty((ends.size, self._acc.shape[0]))
        for row, x in enumerate(signals):
            _frame_mean_squares(x[None, :], ends, self._acc[row], out[:, row : row + 1])
        return out

    def flush(self) -> FloatArray:
        """Mean squares of the remaining frames: the unfinished one (0 where it has no sample)."""
        total = int(np.ceil(self._n_seen / self._hop - 1e-9))
        out = np.zeros((max(total - self._next_frame, 0), self._acc.shape[0]))
        if out.shape[0]:
            counted = self._acc[:, 1] > 0
            out[0, counted] = self._acc[counted, 0] / self._acc[counted, 1]
        self._acc[:] = 0.0
        self._next_frame = max(total, self._next_frame)
        return out


def mix_signal_matrix(layout: Layout) -> FloatArray:
    """How the analysed signals of a mix (:meth:`ProgrammeFeatures._signals_of` order) combine
    the channels a loudness meter K-weights (LFE left out), shape ``(n_signals, n_metered)``.

    Filtering is linear, so the K-weighted signals are these combinations of the K-weighted
    channels (to rounding): stereo mid and side ``(L +- R) / 2``; 5.1 L, R, C, Ls, Rs and the
    mid and side of the ITU-R BS.775 fold-down ``Lo = L + g C + g Ls``, ``Ro = R + g C + g Rs``.
    """
    if layout == "mono":
        return np.ones((1, 1))
    if layout == "stereo":
        return np.array([[0.5, 0.5], [0.5, -0.5]])
    g = float(MINUS_3_DB)
    return np.vstack([np.eye(5), [[0.5, 0.5, g, 0.5 * g, 0.5 * g], [0.5, -0.5, 0.0, 0.5 * g, -0.5 * g]]])


class SignalKPower:
    """K-weighted power per analysis frame of every analysed signal of a mix, from the
    K-weighted channels of the loudness meter (its ``on_weighted``), so that the scoring pass
    need not K-weight them again. Frames as :class:`FrameMeanSquares` gives them.

    Memory: one float32 per signal per 10 ms frame (about 3 MB per hour of stereo, 10 MB of
    5.1), which the scoring pass needs from its start to its end.
    """

    def __init__(self, info: AudioInfo, *, frame_s: float = ANALYSIS_FRAME_S) -> None:
        matrix = mix_signal_matrix(info.layout)
        hop = frame_s * info.sample_rate_hz
        # the leading signals that are metered channels themselves (5.1 L R C Ls Rs, mono) are
        # read as they are; only the others (stereo mid and side, the fold-down's) are combined
        n_direct = 0
        while n_direct < min(matrix.shape) and np.array_equal(matrix[n_direct], np.eye(matrix.shape[1])[n_direct]):
            n_direct += 1
        self._n_direct = n_direct
        self._combinations = matrix[n_direct:]
        self._direct = FrameMeanSquares(hop, n_direct) if n_direct else None
        self._combined = FrameMeanSquares(hop, self._combinations.shape[0]) if n_direct < matrix.shape[0] else None
        self._signals = np.zeros((self._combinations.shape[0], 0))  # reused: fresh megabyte arrays cost page faults
        self._parts: list[npt.NDArray[np.float32]] = []

    def feed(self, weighted: FloatArray) -> None:
        """Add the next K-weighted samples of the metered channels, ``(n_metered, n)`` float64."""
        parts = []
        if self._direct is not None:
            parts.append(self._direct.feed(list(weighted[: self._n_direct])))
        if self._combined is not None:
            if self._signals.shape[1] != weighted.shape[1]:
                self._signals = np.zeros((self._combinations.shape[0], weighted.shape[1]))
            np.matmul(self._combinations, weighted, out=self._signals)
            parts.append(self._combined.feed(list(self._signals)))
        self._parts.append(np.hstack(parts).astype(np.float32))

    def result(self) -> npt.NDArray[np.float32]:
        """K-weighted power ``(n_frames, n_signals)`` of every frame, after the last block."""
        last = np.hstack([m.flush() for m in (self._direct, self._combined) if m is not None]).astype(np.float32)
        parts = [*self._parts, last]
        self._parts = []
        return np.concatenate(parts)
