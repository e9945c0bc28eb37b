"""Blind broadband SNR of noisy speech: WADA-SNR (waveform amplitude distribution analysis).

Kim and Stern model clean speech samples as Gamma-distributed in amplitude (shape 0.4, random
sign) and the noise as Gaussian. The statistic ``G = ln(mean |z|) - mean(ln |z|)`` of the noisy
samples then depends only on the SNR, rising from 0.409 (noise alone) to 1.645 (speech alone),
and the SNR is read back from a table of ``G`` against SNR.

Kim and Stern published that table (-20 to +100 dB in 1 dB steps). Here it is computed from
the model itself, once, on first use: for speech amplitude ``a`` and noise deviation ``sigma``,
``E|a + n|`` is the folded-normal mean and ``E ln|a + n|`` comes from the non-central
chi-square with one degree of freedom (a Poisson mixture of central ones, ``E ln chi2_m =
ln 2 + digamma(m / 2)``), both averaged over the Gamma density by Simpson's rule. The result
agrees with the published anchors (tests/test_estimate.py, section 4 of the check sheet) to
within 0.3 dB of SNR from 0 to 30 dB; it is monotone, so the published table's dip below
-15 dB does not arise.

The statistic needs only three running sums (``sum |z|``, ``sum ln |z|``, count), so a cue's
WADA-SNR is accumulated block by block without holding its samples.

References
----------
Kim, C. and Stern, R. M. (2008), "Robust signal-to-noise ratio estimation based on waveform
amplitude distribution analysis", Proc. Interspeech 2008, 2598-2601.
"""

from __future__ import annotations

import functools

import numpy as np
import numpy.typing as npt
from scipy import special

from planner._typing import FloatArray

#: Shape of the Gamma distribution of clean-speech amplitudes (Kim and Stern 2008).
GAMMA_SHAPE = 0.4
#: SNR grid of the look-up table, dB (the published range and step).
TABLE_SNR_DB = np.arange(-20.0, 101.0, 1.0)
#: Amplitudes below this are clamped before the logarithm (as in the published method).
AMPLITUDE_FLOOR = 1e-10

# Integration grid: t = a**GAMMA_SHAPE maps the Gamma density's singularity at a = 0 onto a
# smooth integrand; a = 60 leaves out e**-60 of the mass. 2001 Simpson nodes agree with 40001
# to 1e-5 in G (checked when this module was written).
_N_NODES = 2001
_A_MAX = 60.0
# Poisson terms of the non-central chi-square where its half non-centrality is below
# _SERIES_LIMIT; above it the two-term expansion of E ln(1 + eps Z) is used (error < eps**6).
_N_TERMS = 160
_SERIES_LIMIT = 50.0


def _model_statistic(snr_db: FloatArray) -> FloatArray:
    """``G`` of Gamma(0.4)-amplitude speech plus Gaussian noise at each SNR, dB."""
    k = GAMMA_SHAPE
    t = np.linspace(0.0, _A_MAX**k, _N_NODES)
    a = t ** (1.0 / k)
    weights = np.ones(_N_NODES)
    weights[1:-1:2], weights[2:-1:2] = 4.0, 2.0
    # Density of a in the variable t: exp(-a) / Gamma(k + 1), times the Simpson weights.
    weights *= np.exp(-a) / special.gamma(k + 1.0)
    weights /= weights.sum()
    j = np.arange(_N_TERMS)
    digamma_j = special.digamma(0.5 + j)
    log_factorial = special.gammaln(j + 1.0)
    speech_power = k * (k + 1.0)  # E[a^2] of Gamma(k, scale 1)
    out = np.empty(np.size(snr_db))
    for i, snr in enumerate(np.atleast_1d(snr_db)):
        sigma = np.sqrt(speech_power / 10.0 ** (snr / 10.0))
        mu = a / sigma
        # Folded-normal mean E|a + n|.
        mean_abs = sigma * np.sqrt(2.0 / np.pi) * np.exp(-0.5 * mu * mu) + a * special.erf(mu / np.sqrt(2.0))
        half = 0.5 * mu * mu
        mean_log = np.empty_like(a)
        far = half >= _SERIES_LIMIT
        eps = 1.0 / mu[far]
        mean_log[far] = np.log(a[far]) - 0.5 * eps**2 - 0.75 * eps**4
        h = half[~far][:, None]
        # Poisson(j; h) weights; the node a = 0 (h = 0) puts all weight on j = 0.
        log_h = np.log(np.where(h > 0, h, 1.0))
        poisson = np.exp(-h + j * log_h - log_factorial)
        poisson[h[:, 0] == 0, 1:] = 0.0
        mean_log[~far] = np.log(sigma) + 0.5 * (np.log(2.0) + poisson @ digamma_j)
        out[i] = np.log(weights @ mean_abs) - weights @ mean_log
    return out


@functools.cache
def wada_table() -> tuple[FloatArray, FloatArray]:
    """The look-up table ``(snr_db, G)``, computed from the model once and cached (read-only)."""
    g = _model_statistic(TABLE_SNR_DB)
    snr = TABLE_SNR_DB.copy()
    for arr in (snr, g):
        arr.flags.writeable = False
    return snr, g


def wada_statistic(sum_abs: float, sum_log_abs: float, n: int) -> float:
    """``G = ln(mean |z|) - mean(ln |z|)`` from running sums (amplitudes clamped at the floor)."""
    return float(np.log(sum_abs / n) - sum_log_abs / n)


def snr_from_statistic(g: float) -> float:
    """SNR in dB for a statistic ``G`` (linear interpolation, clamped to -20..+100 dB)."""
    snr, table = wada_table()
    return float(np.interp(g, table, snr))


def wada_snr_db(x: npt.ArrayLike) -> float:
    """WADA-SNR of a mono signal, dB (-20..+100).

    Parameters
    ----------
    x : array_like, shape (n,)
        Noisy speech samples (any scale; the statistic is scale-free above the floor).

    Returns
    -------
    float
        Estimated speech-to-noise power ratio, dB.
    """
    acc = WadaAccumulator()
    acc.add(np.asarray(x))
    value = acc.snr_db()
    if value is None:
        raise ValueError("wada_snr_db needs at least one sample")
    return value


class WadaAccumulator:
    """Running sums for a WADA-SNR over samples fed in any number of pieces."""

    def __init__(self) -> None:
        self.sum_abs = 0.0
        self.sum_log_abs = 0.0
        self.n = 0

    def add(self, x: npt.ArrayLike) -> None:
        """Add samples (mono, any shape flattened)."""
        mag = np.maximum(np.abs(np.asarray(x, dtype=np.float64)).ravel(), AMPLITUDE_FLOOR)
        self.sum_abs += float(mag.sum())
        self.sum_log_abs += float(np.log(mag).sum())
        self.n += int(mag.size)

    def snr_db(self) -> float | None:
        """Estimated SNR, dB, or ``None`` before any sample."""
        if self.n == 0:
            return None
        return snr_from_statistic(wada_statistic(self.sum_abs, self.sum_log_abs, self.n))

    def speech_fraction(self) -> float | None:
        """Share of the power that is speech, ``f / (1 + f)`` with ``f`` the SNR as a ratio."""
        snr = self.snr_db()
        if snr is None:
            return None
        f = 10.0 ** (snr / 10.0)
        return f / (1.0 + f)
