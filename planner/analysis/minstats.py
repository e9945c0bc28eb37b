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
from numba import njit

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
        # constants of B_min for D (index 0) and V (index 1), Eqs. 17-18
        m = np.array([m_of_d(self.window_len), m_of_d(self.sub_len)])
        self._constants = np.stack([2.0 * m, 1.0 - m, np.array([(self.window_len - 1) * 2.0, (self.sub_len - 1) * 2.0])])
        self._started = False

    def _start(self, y: FloatArray) -> None:
        n = self.n_features
        self._p = y.copy()  # smoothed power P (Eq. 4)
        self._noise = y.copy()  # sigma_N^2, which is also the running minimum P_min,u
        self._moments = np.stack([y, y * y])  # first and second moments of P
        # minimum of the biased P over the current sub-window, for D (row 0) and V (row 1)
        self._actmin = np.full((2, n), np.inf)
        self._buffer = np.full((self.n_sub, n), np.inf)  # minima of the last U sub-windows
        self._local_min = np.zeros(n, dtype=np.bool_)
        # alpha_c, then the buffer position and the frame count in the sub-window
        self._alpha_c, self._buffer_i, self._sub_count = 1.0, 0, 1
        self._started = True

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
        self._alpha_c, self._buffer_i, self._sub_count = _track(
            y_all, first, out, self._p, self._noise, self._moments, self._actmin, self._buffer, self._local_min,
            self._constants, self._alpha_c, self._buffer_i, self._sub_count, self.sub_len,
        )  # fmt: skip
        return out


@njit(cache=True, nogil=True, error_model="numpy")
def _track(  # type: ignore[no-untyped-def]  # noqa: PLR0913
    y_all, first, out, p, noise, moments, actmin, buffer, local_min, constants, alpha_c, buffer_i, sub_count, sub_len
):
    """Frames ``first:`` of ``y_all`` through the tracker: estimates into ``out``, state updated in place.

    Compiled (numba), one frame after another: the recursion is serial in time. Returns the
    scalar state ``(alpha_c, buffer_i, sub_count)``. Division by zero gives infinity
    (``error_model="numpy"``): a zero ``1/Q_eq`` means no bias.
    """
    n_frames, n = y_all.shape
    n_sub = buffer.shape[0]
    q_inv = np.empty(n)
    lower = np.empty(n, dtype=np.bool_)
    for i in range(first, n_frames):
        y = y_all[i]
        # Correction factor for the smoothing (Eq. 11), from the whole frame's power.
        p_sum = 0.0
        y_sum = 0.0
        for k in range(n):
            p_sum += p[k]
            y_sum += y[k]
        ratio = p_sum / y_sum
        alpha_c_tilde = 1.0 / (1.0 + (ratio - 1.0) ** 2)
        alpha_c = ALPHA_C_SMOOTH * alpha_c + (1.0 - ALPHA_C_SMOOTH) * max(alpha_c_tilde, 0.7)
        q_sum = 0.0
        for k in range(n):
            # Optimal smoothing factor (Eq. 7 with alpha_c), floored at ALPHA_MIN.
            a = p[k] / noise[k] - 1.0
            a = max(ALPHA_MAX * alpha_c / (a * a + 1.0), ALPHA_MIN)
            pk = p[k] * a + (1.0 - a) * y[k]  # Eq. 4
            p[k] = pk
            # Variance of P from first and second moments (Eq. 23), and 1/Q_eq (Eq. 16).
            beta = min(a * a, BETA_MAX)
            t = (1.0 - beta) * pk
            m0 = moments[0, k] * beta + t
            m1 = moments[1, k] * beta + t * pk
            moments[0, k] = m0
            moments[1, k] = m1
            qi = min(max((m1 - m0 * m0) / (noise[k] * noise[k] * 2.0), 0.0), 0.5)
            q_inv[k] = qi
            q_sum += qi
        q_inv_mean = q_sum / n
        b_c = 1.0 + A_V * math.sqrt(q_inv_mean)  # Eq. 22
        for k in range(n):
            # P B_min(d, Q_eq) B_c with B_min = 1 + (d - 1) 2 / ((Q_eq - 2 M) / (1 - M)) for
            # d = D and V (Eqs. 17-18); an infinite Q_eq (1/Q_eq = 0) gives no bias.
            q = 1.0 / q_inv[k]
            c_d = (constants[2, 0] / ((q - constants[0, 0]) / constants[1, 0]) + 1.0) * p[k] * b_c
            c_v = (constants[2, 1] / ((q - constants[0, 1]) / constants[1, 1]) + 1.0) * p[k] * b_c
            lower[k] = c_d < actmin[0, k]
            if lower[k]:
                actmin[0, k] = c_d
                actmin[1, k] = c_v
        if sub_count == sub_len:
            # End of a sub-window: store its minimum, take the minimum over the last U, and
            # let a rising floor follow the sub-window minimum within the noise slope.
            slope = _SLOPE_DEFAULT
            for limit, step in _SLOPE_STEPS:
                if q_inv_mean < limit:
                    slope = step
                    break
            for k in range(n):
                buffer[buffer_i, k] = actmin[0, k]
            buffer_i = (buffer_i + 1) % n_sub
            for k in range(n):
                lowest = buffer[0, k]
                for u in range(1, n_sub):
                    lowest = min(lowest, buffer[u, k])
                sub_min = actmin[1, k]
                if local_min[k] and not lower[k] and sub_min < slope * lowest and sub_min > lowest:
                    lowest = sub_min
                    for u in range(n_sub):
                        buffer[u, k] = lowest
                noise[k] = lowest
                local_min[k] = False
                actmin[0, k] = np.inf
            sub_count = 1
        else:
            if sub_count > 1:
                for k in range(n):
                    local_min[k] = local_min[k] or lower[k]
            sub_count += 1
        # the estimate is the state of the next frame
        for k in range(n):
            noise[k] = min(actmin[1, k], noise[k])
            out[i, k] = noise[k]
    return alpha_c, buffer_i, sub_count
