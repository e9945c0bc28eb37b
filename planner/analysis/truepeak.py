"""Streaming true-peak meter: ITU-R BS.1770-4 Annex 2 (4x oversampling, low-pass interpolation).

The interpolator is a 65-tap Kaiser-windowed sinc (beta 8) cut off at the input Nyquist
frequency, split into 4 phases. Its phase 0 is the input itself (a sinc has zeros at
every 4th tap), so the true peak is never below the sample peak; phases 1-3 give the
three points between input samples. Passband: within 0.01 dB up to 0.31 fs (15 kHz at
48 kHz), -0.6 dB at 0.42 fs; BS.1770 Annex 2 allows under-reading near Nyquist.

Speed: the 3 phases are matrix products over 32-sample frames (BLAS). A frame whose
largest input magnitude, times the interpolator's worst-case gain (the largest sum of
absolute taps of a phase, 1.95), cannot exceed the peak already found cannot raise the
result, so it is skipped; the result is exactly that of interpolating every frame. The
frames' largest magnitudes (and the sample peak) come from one compiled pass over each
channel (numba), which reads the block where it lies instead of copying it.
"""

from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import as_strided

from planner._typing import AudioArray
from planner.errors import InputError
from planner.jit import compiled

#: Oversampling factor (BS.1770 Annex 2: 4x for 48 kHz input).
OVERSAMPLING = 4
_TAPS_PER_PHASE = 16
_KAISER_BETA = 8.0
_FRAME = 32
_BATCH = 32  # frames per product: 32 x 47 x 96 multiply-adds, under OpenBLAS's threading threshold (4 x 65536, from memory)
_HISTORY = _TAPS_PER_PHASE - 1
_FLOOR_DB = -200.0


def _interpolator() -> np.ndarray:
    n_taps = OVERSAMPLING * _TAPS_PER_PHASE + 1
    offset = np.arange(n_taps) - n_taps // 2
    taps = np.sinc(offset / OVERSAMPLING) * np.kaiser(n_taps, _KAISER_BETA)
    taps[offset % OVERSAMPLING == 0] = 0.0  # exact zeros of the sinc: phase 0 is the input
    taps[n_taps // 2] = 1.0
    return taps


#: The 4x interpolation filter: 65 taps, centre tap 1.0 (each phase has about unity DC gain). Read-only.
TRUE_PEAK_FIR: np.ndarray = _interpolator()
TRUE_PEAK_FIR.flags.writeable = False


def _phase_matrix() -> tuple[np.ndarray, float]:
    """Frame-to-output matrix of phases 1..3 and the worst-case gain of a phase.

    Output ``3 i + (p - 1)`` of a frame is phase ``p`` after input ``i + _HISTORY`` of the
    frame: sum over ``k`` of ``TRUE_PEAK_FIR[4 k + p] * x[i + _HISTORY - k]``.
    """
    padded = np.zeros(OVERSAMPLING * (_TAPS_PER_PHASE + 1))
    padded[: TRUE_PEAK_FIR.size] = TRUE_PEAK_FIR
    phases = padded.reshape(-1, OVERSAMPLING)[:_TAPS_PER_PHASE, 1:]  # (k, p - 1)
    matrix = np.zeros((_FRAME + _HISTORY, 3 * _FRAME))
    for i in range(_FRAME):
        for k in range(_TAPS_PER_PHASE):
            matrix[i + _HISTORY - k, 3 * i : 3 * i + 3] = phases[k]
    # float32 products can exceed the exact bound by a few ulps: keep the bound safe.
    bound = float(np.abs(phases).sum(axis=0).max()) * (1.0 + 1e-5)
    return matrix.astype(np.float32), bound


_MATRIX, _BOUND = _phase_matrix()


# fastmath lets the loops vectorise; magnitudes and maxima are exact either way (no rounding)
@compiled(nogil=True, fastmath=True)
def _frame_peaks(tail, block, channel, n_frames, own):  # type: ignore[no-untyped-def]
    """Largest magnitude of each whole frame of ``tail[:, channel]`` then ``block[:, channel]``
    (frames from sample ``_HISTORY`` on) into ``own``; returns the largest magnitude of the
    frames and the block's column (at least the block's sample peak) and of the history."""
    n_tail = tail.shape[0]
    history = np.float32(0.0)
    for i in range(_HISTORY):
        history = max(history, abs(tail[i, channel]))
    peak = np.float32(0.0)
    for f in range(n_frames):
        m = np.float32(0.0)
        lo = _HISTORY + f * _FRAME
        hi = lo + _FRAME
        if lo < n_tail:  # only the first frame reaches into the pending samples
            for i in range(lo, min(hi, n_tail)):
                m = max(m, abs(tail[i, channel]))
            lo = n_tail
        for i in range(lo - n_tail, hi - n_tail):
            m = max(m, abs(block[i, channel]))
        own[f] = m
        peak = max(peak, m)
    for i in range(max(_HISTORY + n_frames * _FRAME - n_tail, 0), block.shape[0]):
        peak = max(peak, abs(block[i, channel]))
    return peak, history


class _Workspace:
    """Buffers reused from block to block.

    Fresh megabyte-sized temporaries for every block made the process spend as much time
    in page faults as in arithmetic (glibc hands large blocks back to the system).
    """

    def __init__(self) -> None:
        self._col = np.zeros(0, np.float32)
        self._chosen = np.zeros((0, _FRAME + _HISTORY), np.float32)
        self._out = np.zeros((0, _BATCH, 3 * _FRAME), np.float32)

    def column(self, n: int) -> np.ndarray:
        """A float32 work column of ``n`` samples (contents undefined)."""
        if self._col.size < n:
            self._col = np.zeros(n, np.float32)
        return self._col[:n]

    def scan(self, tail: np.ndarray, block: np.ndarray, channel: int) -> tuple[np.ndarray, float, float]:
        """The frames of one channel, ``tail[:, channel]`` (``_HISTORY`` samples of history, then
        pending samples) followed by ``block[:, channel]``: the largest magnitude of each whole
        frame, of the block's column (its sample peak) and of the history."""
        n_frames = (tail.shape[0] + block.shape[0] - _HISTORY) // _FRAME
        own = np.empty(n_frames, np.float32)
        sample_peak, history = _frame_peaks(tail, block, channel, n_frames, own)
        return own, float(sample_peak), float(history)

    def peak(
        self, tail: np.ndarray, block: np.ndarray, channel: int, scanned: tuple[np.ndarray, float, float], threshold: float
    ) -> float:
        """Largest magnitude of phases 1-3 over the whole frames of the channel :meth:`scan` read.

        Frames that provably stay at or below ``threshold`` are skipped; 0.0 when all of them are.
        """
        own, _, history = scanned
        n_frames = own.size
        if n_frames == 0:
            return 0.0
        # frame i reads its own F new samples and the H before them (H < F)
        reach = own.copy()
        reach[1:] = np.maximum(own[1:], own[:-1])
        reach[0] = max(reach[0], history)
        keep = np.flatnonzero(reach * _BOUND > threshold)
        if keep.size == 0:
            return 0.0
        col = self.column(_HISTORY + n_frames * _FRAME)
        n_tail = min(tail.shape[0], col.size)
        col[:n_tail] = tail[:n_tail, channel]
        col[n_tail:] = block[: col.size - n_tail, channel]
        return self._interpolated_peak(col, n_frames, keep)

    def _interpolated_peak(self, col: np.ndarray, n_frames: int, keep: np.ndarray) -> float:
        """Largest magnitude of phases 1-3 over the frames ``keep`` of ``col``."""
        n_rows = -(-keep.size // _BATCH) * _BATCH
        if self._chosen.shape[0] < n_rows:
            self._chosen = np.zeros((n_rows, _FRAME + _HISTORY), np.float32)
            self._out = np.zeros((n_rows // _BATCH, _BATCH, 3 * _FRAME), np.float32)
        step = col.strides[0]
        frames = as_strided(col, shape=(n_frames, _FRAME + _HISTORY), strides=(_FRAME * step, step), writeable=False)
        chosen = self._chosen[:n_rows]
        np.take(frames, keep, axis=0, out=chosen[: keep.size], mode="clip")
        chosen[keep.size :] = 0.0
        # stacked small products run single-threaded in BLAS: threads made it 30x slower on a busy machine
        out = np.matmul(chosen.reshape(-1, _BATCH, chosen.shape[1]), _MATRIX, out=self._out[: n_rows // _BATCH])
        return max(float(out.max()), -float(out.min()))


class TruePeakMeter:
    """True peak of a stream of blocks, by BS.1770-4 Annex 2 (4x oversampled).

    Parameters
    ----------
    sample_rate_hz : int
        Input rate; the interpolator is defined relative to it, so any rate works.
    n_channels : int
        Channels of each block; the peak is the largest over all channels.

    Notes
    -----
    State across blocks: the last 15 input samples (filter history) and up to 31 samples
    that do not yet fill a frame. :attr:`dbtp` evaluates the pending samples as if
    followed by silence, without changing the state, so feeding may continue afterwards.
    """

    def __init__(self, sample_rate_hz: int, n_channels: int) -> None:
        if sample_rate_hz < 1 or n_channels < 1:
            raise InputError(
                f"sample_rate_hz={sample_rate_hz}, n_channels={n_channels} must be positive; pass the audio's values"
            )
        self.sample_rate_hz = sample_rate_hz
        self.n_channels = n_channels
        self._tail = np.zeros((_HISTORY, n_channels), dtype=np.float32)
        self._peak = 0.0
        self._sample_peak = 0.0
        self._work = _Workspace()

    def feed(self, block: AudioArray) -> None:
        """Add float32 samples of shape ``(n, n_channels)``."""
        if block.ndim != 2 or block.shape[1] != self.n_channels:
            raise InputError(f"block shape {block.shape} does not match n_channels={self.n_channels}; pass (n, {self.n_channels})")
        if block.shape[0] == 0:
            return
        n_tail = self._tail.shape[0]
        total = n_tail + block.shape[0]
        used = (total - _HISTORY) // _FRAME * _FRAME
        scanned = [self._work.scan(self._tail, block, c) for c in range(self.n_channels)]
        self._sample_peak = max([self._sample_peak] + [sample_peak for _, sample_peak, _ in scanned])
        threshold = max(self._peak, self._sample_peak)
        for c, channel in enumerate(scanned):
            self._peak = max(self._peak, self._work.peak(self._tail, block, c, channel, threshold))
        keep = total - used
        if keep <= block.shape[0]:
            self._tail = block[block.shape[0] - keep :].astype(np.float32)
        else:
            self._tail = np.concatenate([self._tail[n_tail - (keep - block.shape[0]) :], block.astype(np.float32)])

    @property
    def sample_peak(self) -> float:
        """Largest input magnitude so far (linear, full scale 1.0)."""
        return self._sample_peak

    @property
    def true_peak(self) -> float:
        """Largest interpolated magnitude so far (linear), the pending samples followed by silence."""
        pending = self._tail.shape[0] - _HISTORY
        # enough zeros for every output that the pending samples reach, rounded up to whole frames
        n_zeros = -(-(pending + _HISTORY) // _FRAME) * _FRAME - pending
        flush = np.concatenate([self._tail, np.zeros((n_zeros, self.n_channels), dtype=np.float32)])
        threshold = max(self._peak, self._sample_peak)
        work, empty = _Workspace(), flush[:0]
        tail_peak = max(work.peak(flush, empty, c, work.scan(flush, empty, c), threshold) for c in range(self.n_channels))
        return max(self._peak, self._sample_peak, tail_peak)

    @property
    def dbtp(self) -> float:
        """True peak in dBTP (dB re full scale); -200 for digital silence."""
        return _to_db(self.true_peak)

    @property
    def sample_peak_dbfs(self) -> float:
        """Sample peak in dBFS; -200 for digital silence."""
        return _to_db(self._sample_peak)


def _to_db(amplitude: float) -> float:
    return 20.0 * float(np.log10(amplitude)) if amplitude > 0.0 else _FLOOR_DB
