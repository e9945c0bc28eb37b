"""Noise power tracked through speech: minimum statistics with optimal smoothing (Martin 2001).

The noisy power of each feature (a band power, or a broadband weighted power) is smoothed
recursively with a time- and feature-varying factor chosen to minimise the error of the
smoothed power as a noise estimate (Martin 2001, Eq. 7, with the correction factor alpha_c of
Eq. 11 and a floor). The minimum of the smoothed power over a window of ``D`` frames, searched
in ``U`` sub-windows of ``V`` frames, lies below the mean noise power; it is scaled up by the
bias factor ``B_min(D, Q_eq)`` derived from the estimated variance of the smoothed power
(Eqs. 16-18, the equivalent degrees of freedom ``Q_eq``; ``M(D)`` from Table III) and by the
extra factor ``B_c`` for the variance of that variance estimate (Eq. 22). Between sub-window
ends, a rising noise floor is followed by the sub-window minimum if it stays within the
"noise slope" limit (Section IV).

Frames are the tool's 10 ms analysis frames. Defaults: ``D`` spans 1.52 s (8 sub-windows of
0.19 s), close to the 1.5 s of the paper's examples; ``alpha_max`` 0.96, ``alpha_min`` 0.3,
``beta_max`` 0.8, ``a_v`` 2.12 and the noise-slope steps are the paper's values.

References
----------
Martin, R. (2001), "Noise power spectral density estimation based on optimal smoothing and
minimum statistics", IEEE Trans. Speech Audio Process. 9(5), 504-512.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

from planner._typing import FloatArray
from planner.errors import SettingsError
from planner.units import ANALYSIS_FRAME_S

#: Table III of Martin (2001): window length D (frames) and the factor M(D) of Eq. 17.
M_TABLE_D = np.array([1, 2, 5, 8, 10, 15, 20, 30, 40, 60, 80, 120, 140, 160], dtype=np.float64)
M_TABLE_M = np.array(
    [0.0, 0.26, 0.48, 0.58, 0.61, 0.668, 0.705, 0.762, 0.8, 0.841, 0.865, 0.89, 0.9, 0.91]
)

ALPHA_MAX = 0.96  # upper bound of the smoothing factor (Martin 2001, Section III)
ALPHA_MIN = 0.3  # lower bound, so the smoothed power can fall back to the noise within ~64 ms
ALPHA_C_SMOOTH = 0.7  # smoothing of the correction factor alpha_c (Eq. 11)
BETA_MAX = 0.8  # cap of the smoothing factor of the first and second moments (Section IV)
A_V = 2.12  # B_c = 1 + a_v sqrt(mean 1/Q_eq) (Eq. 22)
# Noise-slope limits by mean 1/Q_eq (Section IV): a steadier estimate may follow a faster rise.
_SLOPE_STEPS = ((0.03, 8.0), (0.05, 4.0), (0.06, 2.0))
_SLOPE_DEFAULT = 1.2
# Power floor (re full scale) so digital silence does not divide by zero: -200 dB.
_POWER_FLOOR = 1e-20
_sum = np.add.reduce


def m_of_d(d: float) -> float:
    """``M(D)`` of Martin's Table III, linearly interpolated between the tabulated ``D``."""
    return float(np.interp(d, M_TABLE_D, M_TABLE_M))


class MinimumStatistics:
    """Streaming noise-power tracker over frames, vectorised over independent features.

    Parameters
    ----------
    n_features : int
        Number of power values per frame (e.g. 18 band powers plus broadband ones).
    frame_s : float, keyword-only
        Frame hop, seconds (default 10 ms).
    window_s : float, keyword-only
        Length of the minimum search, seconds (default 1.52 s).
    n_subwindows : int, keyword-only
        Sub-windows ``U`` the search is split into (default 8).
    """

    def __init__(
        self,
        n_features: int,
        *,
        frame_s: float = ANALYSIS_FRAME_S,
        window_s: float = 1.52,
        n_subwindows: int = 8,
    ) -> None:
        if n_features < 1:
            raise SettingsError(f"n_features={n_features} must be at least 1; pass the number of powers per frame")
        if n_subwindows < 2 or window_s <= 0 or frame_s <= 0:
            raise SettingsError("window_s and frame_s must be positive and n_subwindows at least 2; pass e.g. 1.52, 0.01, 8")
        self.n_features = n_features
        self.sub_len = max(2, int(round(window_s / frame_s / n_subwindows)))  # V
        self.n_sub = n_subwindows  # U
        self.window_len = self.sub_len * self.n_sub  # D = U V
        self._m_d = m_of_d(self.window_len)
        self._m_v = m_of_d(self.sub_len)
        self._started = False

    def _start(self, y: FloatArray) -> None:
        n = self.n_features
        self._p = y.copy()  # smoothed power P (Eq. 4)
        self._noise = y.copy()  # sigma_N^2
        # first and second moments of P, one row each
        self._moments = np.stack([y, y * y])
        self._alpha_c = 1.0
        # minimum of the biased P over the current sub-window, for D (row 0) and V (row 1)
        self._actmin = np.full((2, n), np.inf)
        self._pmin_u = y.copy()
        self._buffer = np.full((self.n_sub, n), np.inf)  # minima of the last U sub-windows
        self._buffer_i = 0
        self._sub_count = 1
        self._local_min = np.zeros(n, dtype=bool)
        # constants of B_min for D (row 0) and V (row 1), Eqs. 17-18
        m = np.array([[self._m_d], [self._m_v]])
        self._two_m = 2.0 * m
        self._one_minus_m = 1.0 - m
        self._two_d_minus_1 = np.array([[(self.window_len - 1) * 2.0], [(self.sub_len - 1) * 2.0]])
        # work arrays of _step
        self._alpha, self._beta, self._tmp, self._q_inv = (np.empty(n) for _ in range(4))
        self._terms, self._candidate = np.empty((2, n)), np.empty((2, n))
        self._lower = np.empty(n, dtype=bool)
        self._started = True

    def _step(self, y: FloatArray, y_sum: np.float64, out: FloatArray) -> None:
        """One frame: write the noise estimate of power ``y`` (whose sum is ``y_sum``) into ``out``."""
        # One call per 10 ms frame on arrays of a few dozen values, so the cost is numpy's
        # per-call overhead: the arrays are updated in place, the pairs of rows that follow
        # the same formula (the two moments, the minima over D and over V) in one call each,
        # with the same operations in the same order as the formulas (hence the same values);
        # slow helpers (np.clip, .mean, np.where, np.errstate) are replaced by plain ufuncs.
        p, noise, tmp, alpha, beta = self._p, self._noise, self._tmp, self._alpha, self._beta
        # Correction factor for the smoothing (Eq. 11), from the whole frame's power.
        ratio = _sum(p) / y_sum
        alpha_c_tilde = 1.0 / (1.0 + (ratio - 1.0) ** 2)
        self._alpha_c = ALPHA_C_SMOOTH * self._alpha_c + (1.0 - ALPHA_C_SMOOTH) * max(alpha_c_tilde, 0.7)
        # Optimal smoothing factor (Eq. 7 with alpha_c), floored at ALPHA_MIN.
        np.divide(p, noise, out=alpha)
        alpha -= 1.0
        np.square(alpha, out=alpha)
        alpha += 1.0
        np.divide(ALPHA_MAX * self._alpha_c, alpha, out=alpha)
        np.maximum(alpha, ALPHA_MIN, out=alpha)
        # P = alpha P + (1 - alpha) y  (Eq. 4)
        p *= alpha
        np.subtract(1.0, alpha, out=tmp)
        tmp *= y
        p += tmp
        # Variance of P from first and second moments (Eq. 23), and 1/Q_eq (Eq. 16).
        np.multiply(alpha, alpha, out=beta)
        np.minimum(beta, BETA_MAX, out=beta)
        moments, terms = self._moments, self._terms
        moments *= beta
        np.subtract(1.0, beta, out=tmp)
        np.multiply(tmp, p, out=terms[0])  # (1 - beta) P
        np.multiply(terms[0], p, out=terms[1])  # (1 - beta) P P
        moments += terms
        q_inv = np.square(moments[0], out=self._q_inv)
        np.subtract(moments[1], q_inv, out=q_inv)  # var P
        np.square(noise, out=tmp)
        tmp *= 2.0
        q_inv /= tmp
        np.maximum(q_inv, 0.0, out=q_inv)
        np.minimum(q_inv, 0.5, out=q_inv)
        q_inv_mean = float(_sum(q_inv) / q_inv.size)
        b_c = 1.0 + A_V * math.sqrt(q_inv_mean)  # Eq. 22
        # Q_eq = 1 / q_inv, infinite where q_inv is 0 (then no bias below; process() lets 1/0 pass).
        q = np.divide(1.0, q_inv, out=tmp)
        # P B_min(d, Q_eq) B_c with B_min = 1 + (d - 1) 2 / ((Q_eq - 2 M) / (1 - M)) for d = D
        # and V (Eqs. 17-18); infinite Q_eq -> no bias.
        candidate = np.subtract(q, self._two_m, out=self._candidate)
        candidate /= self._one_minus_m
        np.divide(self._two_d_minus_1, candidate, out=candidate)
        candidate += 1.0
        candidate *= p
        candidate *= b_c
        actmin = self._actmin
        lower = np.less(candidate[0], actmin[0], out=self._lower)
        np.copyto(actmin, candidate, where=lower)
        actmin_sub = actmin[1]
        if self._sub_count == self.sub_len:
            # End of a sub-window: store its minimum, take the minimum over the last U.
            self._local_min[lower] = False
            self._buffer[self._buffer_i] = actmin[0]
            self._buffer_i = (self._buffer_i + 1) % self.n_sub
            self._pmin_u = self._buffer.min(axis=0)
            slope = next((s for lim, s in _SLOPE_STEPS if q_inv_mean < lim), _SLOPE_DEFAULT)
            rising = self._local_min & (actmin_sub < slope * self._pmin_u) & (actmin_sub > self._pmin_u)
            if rising.any():
                self._pmin_u = np.where(rising, actmin_sub, self._pmin_u)
                self._buffer[:, rising] = self._pmin_u[rising]
            self._local_min[:] = False
            self._sub_count = 1
            actmin[0] = np.inf
        else:
            if self._sub_count > 1:
                self._local_min |= lower
            self._sub_count += 1
        # the estimate is the state of the next frame: out is not written again until then
        self._noise = self._pmin_u = np.minimum(actmin_sub, self._pmin_u, out=out)

    def process(self, power: npt.ArrayLike) -> FloatArray:
        """Noise power estimate for each frame.

        Parameters
        ----------
        power : array_like, shape (n_frames, n_features)
            Noisy power per frame (any linear power unit, non-negative).

        Returns
        -------
        ndarray, shape (n_frames, n_features)
            Estimated noise power in the same unit, float64.
        """
        y_all = np.maximum(np.asarray(power, dtype=np.float64), _POWER_FLOOR)
        if y_all.ndim != 2 or y_all.shape[1] != self.n_features:
            raise SettingsError(
                f"power has shape {y_all.shape}; pass (n_frames, {self.n_features}) powers per frame"
            )
        out = np.empty_like(y_all)
        if not y_all.shape[0]:
            return out
        first = 0
        if not self._started:
            self._start(y_all[0])
            out[0] = self._noise
            first = 1
        # the frame sums of Eq. 11, all at once (a row reduction sums as the 1-D one does)
        y_sums = _sum(y_all, axis=1)
        step = self._step
        with np.errstate(divide="ignore"):
            for i in range(first, y_all.shape[0]):
                step(y_all[i], y_sums[i], out[i])
        # the state must not alias the array handed back (the caller may change it)
        self._noise = self._pmin_u = self._noise.copy()
        return out
