"""Streaming one-third-octave band analysis: band power per 10 ms frame from a short-time FFT.

Each analysis frame ``j`` covers the hop ``[j * frame_s, (j + 1) * frame_s)`` and is measured
with Hann windows centred on the middle of that hop. Band power is the mean square (re
digital full scale) of the signal within the band, summed from the one-sided power spectrum
over FFT bins inside the band edges ``fc * 2**(+-1/6)``, a bin that straddles an edge
counted by the fraction of its width inside the band.

Two window lengths share one frame. A Hann window's main lobe is 4 bins wide, so a band
narrower than that loses part of a tone at its own centre: at 160 Hz (37 Hz wide) a 64 ms
window would read a centred tone 0.2 dB low, an 80 ms window within 0.1 dB. Bands below
:data:`SPLIT_HZ` therefore use an 80 ms window, on the input decimated to about
:data:`LOW_RATE_HZ` (Kaiser FIR designed for 80 dB stop band, 75-80 dB measured; pass-band
ripple under 0.01 dB) so that the long window stays cheap; bands from 630 Hz up use a 20 ms
window at the input's own rate, which meets the same bound there and follows level changes
four times faster. Windows that
shorten with band frequency follow the Extended SII of Rhebergen and Versfeld (2005) (from
memory: about 35 ms at the lowest band down to 9.4 ms at the highest).

Bands wholly above the Nyquist frequency read zero power; a band cut by it keeps the part
below.

The frames are transformed unwindowed and the periodic Hann window is applied to the
spectrum as the three-tap convolution it is in frequency (``0.5 X[k] - 0.25 (X[k-1] +
X[k+1])``, exact), with the band sums, in one compiled loop: the same values as windowing
first to float32 rounding of the transform (about 1e-6 of a band's power), at a fraction
of the cost.

References
----------
IEC 61260-1:2014, one-third-octave band edges ``fm * G**(+-1/6)`` with G = 2 here, about the
nominal centres (the standard's exact base-10 mid-band frequencies differ by under 1 %).
Rhebergen, K. S. and Versfeld, N. J. (2005), "A Speech Intelligibility Index-based approach to
predict the speech reception threshold for sentences in fluctuating noise for normal-hearing
listeners", J. Acoust. Soc. Am. 117(4), 2181-2192.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from numpy.lib.stride_tricks import sliding_window_view

from planner._typing import AudioArray, FloatArray
from planner.analysis.firdesign import kaiser_lowpass, kaiser_order, periodic_hann
from planner.analysis.sii import SII_BANDS_HZ, one_third_octave_bandwidths_hz
from planner.errors import SettingsError
from planner.jit import compiled
from planner.units import ANALYSIS_FRAME_S

#: Bands with centre below this use the long window, the others the short one, Hz.
SPLIT_HZ = 630.0
#: Window length for the low bands, seconds (see module docstring).
LONG_WINDOW_S = 0.08
#: Window length for bands from :data:`SPLIT_HZ` up, seconds.
SHORT_WINDOW_S = 0.02
#: The low bands are measured on the input decimated to about this rate (at least), Hz.
LOW_RATE_HZ = 4000.0
#: Stop-band attenuation of the decimation filter, dB (Kaiser-window FIR).
DECIMATION_STOP_DB = 80.0

# Frames transformed together: bounds the work arrays to a few MB.
_FRAMES_PER_BATCH = 1024
# Multiply-adds per matrix product, at most: OpenBLAS runs a product of m*n*k <= 4 * 65536
# single-threaded (GEMM_MULTITHREAD_THRESHOLD, from memory). Its threads spin-wait for each
# other, which cost up to 100 times the arithmetic on a busy 2-core machine (measured).
_PRODUCT_MACS = 1 << 16


def _bin_weights(edges_hz: FloatArray, n_fft: int, sample_rate_hz: float) -> FloatArray:
    """Fraction of each rfft bin (width fs / n_fft, centred on its frequency) inside each band.

    Returns shape ``(n_bins, n_bands)``; the DC and Nyquist bins are half-width.
    """
    df = sample_rate_hz / n_fft
    f = np.arange(n_fft // 2 + 1) * df
    lo_bin = np.maximum(f - df / 2, 0.0)
    hi_bin = np.minimum(f + df / 2, sample_rate_hz / 2)
    overlap = np.minimum(hi_bin[:, None], edges_hz[None, :, 1]) - np.maximum(lo_bin[:, None], edges_hz[None, :, 0])
    return np.clip(overlap / df, 0.0, 1.0)


def _stacked_product(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``a @ b`` for a tall ``a``, as a stack of products small enough to stay single-threaded."""
    rows = max(_PRODUCT_MACS // (a.shape[1] * b.shape[1]), 1)
    n_whole = a.shape[0] // rows * rows
    out = np.empty((a.shape[0], b.shape[1]), dtype=np.result_type(a, b))
    if n_whole:
        np.matmul(a[:n_whole].reshape(-1, rows, a.shape[1]), b, out=out[:n_whole].reshape(-1, rows, b.shape[1]))
    if n_whole < a.shape[0]:
        np.matmul(a[n_whole:], b, out=out[n_whole:])
    return out


@compiled(nogil=True)
def _band_sums(spec, first_bin, bins_bands, bins_weights, out):  # type: ignore[no-untyped-def]
    """Band powers from unwindowed spectra (compiled, numba).

    ``spec``: one-sided DFTs ``(n_frames, n_fft / 2 + 1)`` of unwindowed frames. The periodic
    Hann window is applied here as its exact equivalent in frequency, ``0.5 X[k] - 0.25
    (X[k - 1] + X[k + 1])`` (conjugate symmetry past either end), in float64. ``out[f, b]``
    is the sum over bins ``k = first_bin, first_bin + 1, ...`` of that bin's windowed power
    times the weight of band ``b`` in it, each bin's bands and weights listed in
    ``bins_bands`` (-1: none) and ``bins_weights``.
    """
    nyquist = spec.shape[1] - 1
    for f in range(spec.shape[0]):
        for b in range(out.shape[1]):
            out[f, b] = 0.0
        for j in range(bins_bands.shape[0]):
            k = first_bin + j
            below = spec[f, k - 1] if k >= 1 else np.conj(spec[f, 1])
            above = spec[f, k + 1] if k < nyquist else np.conj(spec[f, nyquist - 1])
            re = 0.5 * np.float64(spec[f, k].real) - 0.25 * (np.float64(below.real) + np.float64(above.real))
            im = 0.5 * np.float64(spec[f, k].imag) - 0.25 * (np.float64(below.imag) + np.float64(above.imag))
            power = re * re + im * im
            for i in range(bins_bands.shape[1]):
                b = bins_bands[j, i]
                if b >= 0:
                    out[f, b] += bins_weights[j, i] * power


class _Decimator:
    """Streaming FIR decimation by an integer factor (polyphase, one matrix product per call).

    Output ``y[m] = sum_k h[k] x[m * factor + k]``, with zeros before input sample 0 and the
    first output at ``m = first_output < 0``; ``y[m]`` is centred on input sample
    ``m * factor + (n_taps - 1) / 2``.
    """

    def __init__(self, sample_rate_hz: float, factor: int, passband_hz: float) -> None:
        stop_hz = sample_rate_hz / factor - passband_hz  # lowest frequency aliasing into the pass band
        n_taps, beta = kaiser_order(DECIMATION_STOP_DB, (stop_hz - passband_hz) / (sample_rate_hz / 2))
        n_phases = -(-n_taps // factor)
        taps = kaiser_lowpass(n_phases * factor, (passband_hz + stop_hz) / 2, beta, sample_rate_hz)
        self.factor = factor
        self.n_taps = n_phases * factor
        self.first_output = -n_phases
        self._n_phases = n_phases
        # Column p holds the taps h[p * factor : (p + 1) * factor].
        self._taps = taps.reshape(n_phases, factor).T.astype(np.float32)
        self._hist = np.zeros(n_phases * factor, dtype=np.float32)

    def process(self, x: npt.NDArray[np.float32]) -> npt.NDArray[np.float32]:
        """Decimated output for every filter span completed by ``x``."""
        data = np.concatenate([self._hist, x])
        n_rows = data.size // self.factor
        n_out = n_rows - self._n_phases + 1
        if n_out <= 0:
            self._hist = data
            return np.empty(0, dtype=np.float32)
        # partial[r, p]: input row r (factor samples) against tap phase p; y[m] sums the
        # diagonal partial[m + p, p].
        partial = _stacked_product(data[: n_rows * self.factor].reshape(n_rows, self.factor), self._taps)
        y = partial[:n_out, 0].copy()
        for p in range(1, self._n_phases):
            y += partial[p : p + n_out, p]
        self._hist = data[n_out * self.factor :]
        return y


class _Path:
    """One window length at one (possibly decimated) rate, and the bands it measures."""

    def __init__(self, sample_rate_hz: float, window_s: float, edges_hz: FloatArray, factor: int) -> None:
        # scipy.fft is imported on first use: planning needs nothing from this module but its
        # constants
        import scipy.fft

        self._rfft = scipy.fft.rfft
        self.sample_rate_hz = sample_rate_hz
        self.factor = factor
        self.passband_hz = float(edges_hz[-1, 1]) if edges_hz.size else 0.0
        rate = sample_rate_hz / factor
        n = int(np.floor(window_s * rate + 0.5))
        self.n_window = n + (n % 2)
        self.window = periodic_hann(self.n_window).astype(np.float32)
        weights = _bin_weights(edges_hz, self.n_window, rate)
        # One-sided spectrum: every bin but DC and Nyquist stands for two (Parseval), and the
        # window's energy is divided out so that a stationary signal reads its mean square.
        weights[1:-1] *= 2.0
        weights /= self.n_window * float(np.sum(self.window.astype(np.float64) ** 2))
        used = np.flatnonzero(weights.any(axis=1))
        self.first_bin = int(used[0]) if used.size else 0
        self.stop_bin = int(used[-1]) + 1 if used.size else 0
        # Rows first_bin..stop_bin-1: the bins any band uses, each with the bands it reaches
        # (one, or two where it straddles an edge) and their weights.
        self.band_weights = np.ascontiguousarray(weights[self.first_bin : self.stop_bin])
        reach = max(int(np.count_nonzero(self.band_weights, axis=1).max(initial=0)), 1)
        self.bins_bands = np.full((self.band_weights.shape[0], reach), -1, dtype=np.int64)
        self.bins_weights = np.zeros((self.band_weights.shape[0], reach))
        for k, row in enumerate(self.band_weights):
            used = np.flatnonzero(row)
            self.bins_bands[k, : used.size] = used
            self.bins_weights[k, : used.size] = row[used]
        self.reset()

    def reset(self) -> None:
        self.decimator = None
        first = 0
        self.delay = 0.0
        if self.factor > 1:
            self.decimator = _Decimator(self.sample_rate_hz, self.factor, self.passband_hz)
            first = self.decimator.first_output
            self.delay = (self.decimator.n_taps - 1) / 2
        # Zeros stand in for the stream before its first sample, so that the first windows
        # are centred like every other.
        self.buf = np.zeros(self.n_window, dtype=np.float32)
        self.buf_start = first - self.n_window

    def window_start(self, centre_in: FloatArray) -> npt.NDArray[np.int64]:
        """Stream index of the first window sample, for frame centres in input samples."""
        centre = np.floor((centre_in - self.delay) / self.factor + 0.5).astype(np.int64)
        return centre - self.n_window // 2

    def lookahead_in(self) -> int:
        """Input samples past a frame centre that always complete its window (with margin)."""
        return int(self.n_window * self.factor // 2 + 2 * self.delay + 2 * self.factor + 1)

    def feed(self, x: npt.NDArray[np.float32]) -> None:
        stream = x if self.decimator is None else self.decimator.process(x)
        self.buf = np.concatenate([self.buf, stream])

    def n_ready(self, centres_in: FloatArray) -> int:
        """How many of these frame centres (increasing) have their whole window buffered."""
        ends = self.window_start(centres_in) + self.n_window
        return int(np.count_nonzero(ends <= self.buf_start + self.buf.size))

    def band_power(self, centres_in: FloatArray) -> FloatArray:
        """Band power of the frames centred at ``centres_in``, shape ``(n_frames, n_bands)``."""
        starts = self.window_start(centres_in) - self.buf_start
        step = int(starts[1] - starts[0]) if starts.size > 1 else 1
        if step > 0 and np.all(np.diff(starts) == step):
            # Equal hops (an integer number of samples): a strided view, copied once when windowed.
            frames = sliding_window_view(self.buf, self.n_window)[starts[0] : starts[-1] + 1 : step]
        else:
            frames = self.buf[starts[:, None] + np.arange(self.n_window)]
        # unwindowed frames straight from the buffer; the window is applied to the spectrum
        out = np.empty((frames.shape[0], self.band_weights.shape[1]))
        _band_sums(self._rfft(frames, axis=1), self.first_bin, self.bins_bands, self.bins_weights, out)
        return out

    def discard_before(self, centre_in: float) -> None:
        """Drop the samples no window from this frame centre on needs."""
        keep_from = int(self.window_start(np.array([centre_in]))[0]) - self.buf_start
        keep_from = min(max(keep_from, 0), self.buf.size)
        self.buf = self.buf[keep_from:].copy()
        self.buf_start += keep_from


class BandAnalyzer:
    """Streaming band power per analysis frame on one-third-octave bands.

    Parameters
    ----------
    sample_rate_hz : float
        Sample rate of the input, Hz.
    frame_s : float, keyword-only
        Analysis hop, seconds (default 10 ms, :data:`planner.units.ANALYSIS_FRAME_S`).
    centres_hz : array_like, keyword-only
        Band centres, Hz (default the 18 SII bands); edges are ``fc * 2**(+-1/6)``.

    Notes
    -----
    Feed any split of a signal to :meth:`process` and finish with :meth:`flush`: the frames
    are those of the whole signal at once (window overlap and filter state are carried
    between calls; the signal is taken as zero before its start and after its end). A signal
    of ``n`` samples gives ``ceil(n / (frame_s * sample_rate_hz))`` frames in all. Memory is
    the overlap plus one call's input, whatever the programme length.
    """

    def __init__(
        self,
        sample_rate_hz: float,
        *,
        frame_s: float = ANALYSIS_FRAME_S,
        centres_hz: npt.ArrayLike = SII_BANDS_HZ,
    ) -> None:
        if not sample_rate_hz > 0:
            raise SettingsError(f"sample_rate_hz={sample_rate_hz!r} must be positive; pass the audio's sample rate")
        if not 0 < frame_s <= 1.0:
            raise SettingsError(f"frame_s={frame_s!r} must be in (0, 1] seconds; pass e.g. 0.01")
        centres = np.asarray(centres_hz, dtype=np.float64)
        if centres.ndim != 1 or centres.size == 0 or centres[0] <= 0 or not np.all(np.diff(centres) > 0):
            raise SettingsError("centres_hz must be positive band centres in increasing order; pass e.g. SII_BANDS_HZ")
        self.sample_rate_hz = float(sample_rate_hz)
        self.frame_s = float(frame_s)
        self.centres_hz = centres
        self.bandwidths_hz = one_third_octave_bandwidths_hz(centres)
        edges = np.stack([centres * 2.0 ** (-1.0 / 6.0), centres * 2.0 ** (1.0 / 6.0)], axis=1)
        self._low = centres < SPLIT_HZ
        factor = max(int(self.sample_rate_hz // LOW_RATE_HZ), 1)
        self._paths = [
            (self._low, _Path(self.sample_rate_hz, LONG_WINDOW_S, edges[self._low], factor)),
            (~self._low, _Path(self.sample_rate_hz, SHORT_WINDOW_S, edges[~self._low], 1)),
        ]
        self._paths = [(sel, path) for sel, path in self._paths if sel.any()]
        self._reset()

    def _reset(self) -> None:
        for _, path in self._paths:
            path.reset()
        self._n_seen = 0
        self._next_frame = 0

    @property
    def n_bands(self) -> int:
        """Number of bands."""
        return int(self.centres_hz.size)

    def _centres_in(self, first: int, stop: int) -> FloatArray:
        # Centre of frame j: the middle of its hop, in input samples.
        return (np.arange(first, stop) + 0.5) * (self.frame_s * self.sample_rate_hz)

    def _emit(self, limit: int | None = None) -> FloatArray:
        # Frames are ready when every path holds their whole window; window ends grow with the
        # frame index, and no frame centred past the newest sample can be ready.
        hop = self.frame_s * self.sample_rate_hz
        upper = int(self._n_seen / hop) + 2 if limit is None else limit
        candidates = self._centres_in(self._next_frame, max(upper, self._next_frame))
        n_frames = min(path.n_ready(candidates) for _, path in self._paths)
        out = np.empty((n_frames, self.n_bands))
        for lo in range(0, n_frames, _FRAMES_PER_BATCH):
            centres = candidates[lo : min(lo + _FRAMES_PER_BATCH, n_frames)]
            for sel, path in self._paths:
                out[lo : lo + centres.size, sel] = path.band_power(centres)
        self._next_frame += n_frames
        next_centre = float(self._centres_in(self._next_frame, self._next_frame + 1)[0])
        for _, path in self._paths:
            path.discard_before(next_centre)
        return out

    def process(self, x: npt.ArrayLike) -> FloatArray:
        """Band power of every frame whose windows are complete after this input.

        Parameters
        ----------
        x : array_like, shape (n,)
            Next samples of a mono signal, float, full scale 1.0.

        Returns
        -------
        ndarray, shape (n_frames, n_bands)
            Band power, mean square re full scale, float64; ``n_frames`` may be 0.

        Raises
        ------
        SettingsError
            If ``x`` is not one-dimensional.
        """
        block: AudioArray = np.asarray(x, dtype=np.float32)
        if block.ndim != 1:
            raise SettingsError(
                f"BandAnalyzer.process takes one channel, shape (n,), not {block.shape}; pass a mono signal"
            )
        for _, path in self._paths:
            path.feed(block)
        self._n_seen += block.size
        return self._emit()

    def flush(self) -> FloatArray:
        """Band power of the remaining frames (signal taken as zero after its end); then reset.

        Returns
        -------
        ndarray, shape (n_frames, n_bands)
            The last frames, so that the total is ``ceil(n / hop)`` for ``n`` samples fed.
        """
        total = int(np.ceil(self._n_seen / (self.frame_s * self.sample_rate_hz) - 1e-9))
        out: FloatArray = np.empty((0, self.n_bands))
        if total > self._next_frame:
            # Enough zeros to complete the last frame's windows and the decimator's span.
            last_centre = float(self._centres_in(total - 1, total)[0])
            pad = int(last_centre - self._n_seen) + max(path.lookahead_in() for _, path in self._paths)
            zeros = np.zeros(max(pad, 0), dtype=np.float32)
            for _, path in self._paths:
                path.feed(zeros)
            out = self._emit(limit=total)
        self._reset()
        return out


def band_spectrum_level_db(
    band_power: npt.ArrayLike,
    spl_offset_db: float,
    *,
    centres_hz: npt.ArrayLike = SII_BANDS_HZ,
) -> FloatArray:
    """Spectrum level, dB SPL per Hz, from band power re full scale.

    ``10 log10(power) + spl_offset_db - 10 log10(bandwidth_hz)``, the per-Hz level the SII
    takes (ANSI S3.5 clause 3.6): band level spread evenly over the band's width.

    Parameters
    ----------
    band_power : array_like, shape (..., n_bands)
        Mean square re digital full scale per band (from :class:`BandAnalyzer`).
    spl_offset_db : float
        dB SPL of a full-scale mean square of 1 at the listener (the listening level).
    centres_hz : array_like, keyword-only
        Band centres the power was measured on, Hz (default the SII bands).

    Returns
    -------
    ndarray, shape (..., n_bands)
        dB SPL/Hz; zero power gives ``-inf``.
    """
    power = np.asarray(band_power, dtype=np.float64)
    with np.errstate(divide="ignore"):
        level = 10.0 * np.log10(power)
    return level + spl_offset_db - 10.0 * np.log10(one_third_octave_bandwidths_hz(centres_hz))
