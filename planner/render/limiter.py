"""Streaming true-peak limiter: 4x oversampled peak detection, look-ahead, smooth attack, release.

Chain per input sample (all channels share one gain, so the stereo/5.1 image does not move):

1. Detection: every channel is interpolated 4x with polyphase low-pass FIRs (ITU-R
   BS.1770-4 Annex 2 recommends 4x oversampling at 48 kHz for true-peak measurement; two
   interpolators, see :func:`interpolator_phases`); the largest interpolated magnitude of
   all channels and phases gives the required gain
   ``r = min(1, threshold / peak)``. Where a triangle-inequality bound (sample peak times the
   interpolator's largest phase L1 norm) shows that no interpolated value can reach the
   threshold, ``r = 1`` is known without interpolating, which keeps ordinary programme fast.
2. Look-ahead: a running minimum of ``r`` over ``W + 2`` samples, then a boxcar average over
   ``W`` samples (the attack: a linear gain glide across ``W`` samples). With the audio delayed
   by ``W`` samples, every gain value that touches a peak is an average of minima that
   include that peak's ``r`` (and its neighbours'), so the applied gain never exceeds ``r``.
3. Release: the gain reduction in dB falls back at a constant rate (dB/s) and reaches
   exactly 0 dB, so samples far from any limiting are passed through bit for bit.

``threshold = ceiling - margin_db``: the margin absorbs the difference between
interpolators (another 4x meter may read a few hundredths of a dB higher) and the small
spread a moving gain adds to inter-sample peaks.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.ndimage import minimum_filter1d

from planner.analysis.firdesign import kaiser_lowpass
from planner.analysis.truepeak import TRUE_PEAK_FIR

#: Oversampling factor of the detector (BS.1770-4 Annex 2: 4x at 48 kHz).
OVERSAMPLING = 4
#: Interpolator half-length in input samples: 10 zero crossings each side, Kaiser beta 5
#: (the default design of scipy.signal.resample_poly, from its documentation).
_HALF_TAPS = 10
_KAISER_BETA = 5.0


def interpolator_phases() -> np.ndarray:
    """Polyphase 4x interpolators as columns, ``(2 * _HALF_TAPS + 1, 8)``, all aligned to time ``m - 10 + p/4``.

    Columns 0-3 are phases 0-3 of a Kaiser-windowed (beta 5) low-pass with 10 zero
    crossings each side, the design :func:`scipy.signal.resample_poly` uses; columns 4-7
    the phases of the project's true-peak meter (:data:`planner.analysis.truepeak.TRUE_PEAK_FIR`,
    65 taps, delayed by 2 input samples to share the time base). Interpolators disagree by
    tenths of a dB near Nyquist; limiting on the larger keeps the output under the ceiling
    on either. Row ``j`` multiplies input sample ``m - j``.
    """
    n_taps = 2 * _HALF_TAPS * OVERSAMPLING + 1
    # scipy.signal.firwin(n_taps, 1 / OVERSAMPLING, window=("kaiser", beta)), written out (firdesign.py)
    h = kaiser_lowpass(n_taps, 1.0 / OVERSAMPLING, _KAISER_BETA, 2.0) * OVERSAMPLING
    h = np.concatenate([h, np.zeros(OVERSAMPLING * (2 * _HALF_TAPS + 1) - n_taps)])
    rows = 2 * _HALF_TAPS + 1
    meter = np.zeros(OVERSAMPLING * rows)
    shift = _HALF_TAPS - (TRUE_PEAK_FIR.size // 2) // OVERSAMPLING  # 10 - 8 input samples
    meter[OVERSAMPLING * shift : OVERSAMPLING * shift + TRUE_PEAK_FIR.size] = TRUE_PEAK_FIR
    columns = [h[p::OVERSAMPLING] for p in range(OVERSAMPLING)] + [meter[p::OVERSAMPLING] for p in range(OVERSAMPLING)]
    return np.stack(columns, axis=1)


class TruePeakLimiter:
    """Look-ahead true-peak limiter over float32 blocks ``(n, n_channels)``.

    Parameters
    ----------
    sample_rate_hz : int
        Audio rate, Hz.
    n_channels : int
        Channels per block (all share one gain).
    ceiling_dbtp : float
        No 4x-oversampled peak of the output exceeds this, dBTP.
    lookahead_ms : float
        Look-ahead and attack time, ms (common practice: 1-10 ms for true-peak limiters).
    release_db_per_s : float
        Recovery rate of the gain reduction, dB per second (common practice).
    margin_db : float
        Safety margin below the ceiling at which the detector acts, dB.

    Notes
    -----
    :meth:`process` returns the output aligned with the input: the first call returns
    ``latency_frames`` fewer samples than it was given; :meth:`flush` returns the rest, so
    the total output length equals the total input length.
    """

    def __init__(
        self,
        sample_rate_hz: int,
        n_channels: int,
        *,
        ceiling_dbtp: float,
        lookahead_ms: float = 5.0,
        release_db_per_s: float = 20.0,
        margin_db: float = 0.1,
    ) -> None:
        if not (lookahead_ms > 0 and release_db_per_s > 0 and margin_db >= 0):
            raise ValueError("lookahead_ms and release_db_per_s must be > 0 and margin_db >= 0; pass such values")
        self.ceiling_dbtp = float(ceiling_dbtp)
        self._threshold = 10.0 ** ((ceiling_dbtp - margin_db) / 20.0)
        self._phases = interpolator_phases().astype(np.float32)
        self._bound = float(np.max(np.sum(np.abs(self._phases), axis=0)))
        self._n_taps = self._phases.shape[0]
        self._w = max(1, int(round(lookahead_ms * 1e-3 * sample_rate_hz)))
        self.latency_frames = self._w + _HALF_TAPS
        self._release_db = release_db_per_s / sample_rate_hz
        self._n_channels = n_channels
        # Streaming state: input history for the interpolator, r history for the minimum,
        # last release value, reduction history for the boxcar, delay line for the audio.
        self._x_hist = np.zeros((self._n_taps - 1, n_channels), dtype=np.float32)
        self._r_hist = np.ones(self._w + 1, dtype=np.float64)
        self._v_prev = 0.0
        self._d_hist = np.zeros(self._w - 1, dtype=np.float64)
        self._delay = np.zeros((self.latency_frames, n_channels), dtype=np.float32)
        self._skip = self.latency_frames
        self.max_reduction_db = 0.0
        self.reduced_frames = 0

    def process(self, block: np.ndarray) -> np.ndarray:
        """Limit one block; returns the aligned output produced so far (float32, ``(m, n_channels)``)."""
        x = np.asarray(block, dtype=np.float32)
        if x.ndim != 2 or x.shape[1] != self._n_channels:
            raise ValueError(f"block shape {x.shape} must be (n, {self._n_channels}); pass 2-D float32 audio")
        if x.shape[0] == 0:
            return x
        gain = self._gain(x)
        delayed = np.concatenate([self._delay, x])
        self._delay = delayed[-self.latency_frames :].copy()
        delayed = delayed[: x.shape[0]]
        moved = gain < 1.0
        if moved.any():
            out = delayed.copy()
            out[moved] = (delayed[moved].astype(np.float64) * gain[moved, None]).astype(np.float32)
            self.reduced_frames += int(np.count_nonzero(moved[max(0, self._skip) :]))
            self.max_reduction_db = max(self.max_reduction_db, -20.0 * math.log10(float(gain.min())))
        else:
            out = delayed
        if self._skip:
            cut = min(self._skip, out.shape[0])
            self._skip -= cut
            out = out[cut:]
        return out

    def flush(self) -> np.ndarray:
        """Push out the last ``latency_frames`` samples (call once, after the last block)."""
        return self.process(np.zeros((self.latency_frames, self._n_channels), dtype=np.float32))

    # ------------------------------------------------------------------ internals

    def _required(self, x: np.ndarray) -> np.ndarray:
        """Required gain ``r`` per incoming sample (detection index), float64 ``(n,)``."""
        n, taps = x.shape[0], self._n_taps
        xh = np.concatenate([self._x_hist, x])
        self._x_hist = xh[-(taps - 1) :].copy()
        r = np.ones(n, dtype=np.float64)
        mag = np.abs(xh[:, 0])
        for c in range(1, xh.shape[1]):
            np.maximum(mag, np.abs(xh[:, c]), out=mag)
        # A detection index's window x[m - taps + 1 .. m] (xh indices m .. m + taps - 1) can
        # reach the threshold through the interpolator's gain only if one of its samples can
        # (scaling by the bound keeps the order of float32 values, so this is the window's
        # sample peak tested); only there is the interpolation computed.
        hot = mag * self._bound > self._threshold
        if not hot.any():
            return r
        counts = np.concatenate([[0], np.cumsum(hot, dtype=np.int64)])
        need = np.flatnonzero(counts[taps : taps + n] > counts[:n])  # not empty: every hot sample is in a window
        # Row j of a window holds x[m - j] (xh index m + taps - 1 - j), matching the phase rows.
        windows = xh[need[:, None] + (taps - 1) - np.arange(taps)[None, :]]  # (k, taps, ch)
        out = np.abs(windows.transpose(0, 2, 1) @ self._phases).reshape(need.size, -1)
        peak = out[:, 0].copy()
        for col in range(1, out.shape[1]):
            np.maximum(peak, out[:, col], out=peak)
        r[need] = np.minimum(1.0, self._threshold / np.maximum(peak.astype(np.float64), 1e-30))
        return r

    def _gain(self, x: np.ndarray) -> np.ndarray:
        r = self._required(x)
        n = r.shape[0]
        if (r == 1.0).all() and self._v_prev == 0.0 and not self._d_hist.any() and (self._r_hist == 1.0).all():
            return np.ones(n, dtype=np.float64)
        # Look-ahead minimum over W + 2 samples (origin puts the window's end at each sample).
        rr = np.concatenate([self._r_hist, r])
        self._r_hist = rr[-(self._w + 1) :].copy()
        span = self._w + 2
        m = minimum_filter1d(rr, span, origin=(span - 1) // 2, mode="nearest")[self._w + 1 :]
        # Release: v[n] = max(u[n], v[n-1] - delta), clamped at 0, via a running maximum.
        u = -20.0 * np.log10(m)
        k = np.arange(n, dtype=np.float64) * self._release_db
        v = np.maximum(np.maximum.accumulate(u + k) - k, self._v_prev - k - self._release_db)
        v = np.maximum(v, 0.0)
        v[v < 1e-9] = 0.0
        self._v_prev = float(v[-1])
        # Attack: boxcar over W samples of the reduction 1 - gain (exact zeros stay exact).
        d = np.concatenate([self._d_hist, 1.0 - 10.0 ** (-v / 20.0)])
        if self._w > 1:
            self._d_hist = d[-(self._w - 1) :].copy()
        c = np.concatenate([[0.0], np.cumsum(d)])
        avg = (c[self._w :] - c[: -self._w]) / self._w
        return 1.0 - avg
