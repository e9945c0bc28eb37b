"""Speech Intelligibility Index, ANSI S3.5-1997 (R2007), one-third-octave band procedure.

The core calculation of clause 4 of the standard: from the equivalent speech spectrum level
E', the equivalent noise spectrum level N' and the hearing threshold T' in the 18 bands of
Table 3 (160 Hz to 8 kHz), compute self-speech masking, upward spread of masking, the
disturbance spectrum, the level-distortion factor and the band audibility, and weight the
audibility by the band-importance function. Every function is vectorised over leading axes:
inputs of shape ``(..., 18)`` give results of shape ``(...)`` (or ``(..., 18)`` per band), so
the short-time SII can evaluate every 10 ms frame of a cue in one call.

Levels are free-field equivalent spectrum levels at the listener's position, dB SPL per Hz
(clause 3.6, 3.15); hearing thresholds are dB HL (clause 3.23). ``-inf`` dB is allowed and
means "no energy in this band".

References
----------
ANSI S3.5-1997 (R2007), "Methods for calculation of the Speech Intelligibility Index",
Acoustical Society of America. Table 3 values as transcribed in the open-source
``speech-intelligibility-index`` 1.0.2 package (checked in tests/test_sii.py).
"""

from __future__ import annotations

from collections.abc import Mapping
from types import MappingProxyType

import numpy as np
import numpy.typing as npt

from planner._typing import FloatArray
from planner.errors import InputError

N_BANDS = 18


def _frozen(values: list[float]) -> FloatArray:
    out = np.array(values, dtype=np.float64)
    out.flags.writeable = False
    return out


#: Nominal mid-band frequencies of the one-third-octave procedure, Hz (ANSI S3.5 Table 3).
SII_BANDS_HZ = _frozen(
    [160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150, 4000, 5000, 6300, 8000]
)

#: Band-importance function for average speech, ANSI S3.5 Table 3 (sums to 1).
BAND_IMPORTANCE_AVERAGE = _frozen(
    [0.0083, 0.0095, 0.0150, 0.0289, 0.0440, 0.0578, 0.0653, 0.0711, 0.0818,
     0.0844, 0.0882, 0.0898, 0.0868, 0.0844, 0.0771, 0.0527, 0.0364, 0.0185]
)  # fmt: skip

#: Standard speech spectrum levels at 1 m, dB SPL/Hz, by vocal effort (ANSI S3.5 Table 3).
STANDARD_SPEECH_SPECTRA: Mapping[str, FloatArray] = MappingProxyType(
    {
        "normal": _frozen(
            [32.41, 34.48, 34.75, 33.98, 34.59, 34.27, 32.06, 28.30, 25.01,
             23.00, 20.15, 17.32, 13.18, 11.55, 9.33, 5.31, 2.59, 1.13]
        ),
        "raised": _frozen(
            [33.81, 33.92, 38.98, 38.57, 39.11, 40.15, 38.78, 36.37, 33.86,
             31.89, 28.58, 25.32, 22.35, 20.15, 16.78, 11.47, 7.67, 5.07]
        ),
        "loud": _frozen(
            [35.29, 37.76, 41.55, 43.78, 43.30, 44.85, 45.55, 44.05, 42.16,
             40.53, 37.70, 34.39, 30.98, 28.21, 25.41, 18.35, 13.87, 11.39]
        ),
        "shout": _frozen(
            [30.77, 36.65, 42.50, 46.51, 47.40, 49.24, 51.21, 51.44, 51.31,
             49.63, 47.65, 44.32, 40.80, 38.13, 34.41, 28.24, 23.45, 20.72]
        ),
    }
)  # fmt: skip

#: Reference internal noise spectrum level X, dB SPL/Hz (ANSI S3.5 Table 3, clause 4.4).
INTERNAL_NOISE_DB = _frozen(
    [0.6, -1.7, -3.9, -6.1, -8.2, -9.7, -10.8, -11.9, -12.5,
     -13.5, -15.4, -17.7, -21.2, -24.2, -25.9, -23.6, -15.8, -7.1]
)  # fmt: skip

#: Free-field to eardrum transfer function, dB (ANSI S3.5 Table 3; used by clause 5.3 inputs).
FREE_FIELD_TO_EARDRUM_DB = _frozen(
    [0.0, 0.5, 1.0, 1.4, 1.5, 1.8, 2.4, 3.1, 2.6, 3.0, 6.1, 12.0, 16.8, 15.0, 14.3, 10.7, 6.4, 1.8]
)

#: Default equivalent noise spectrum level when no noise is given, dB (clause 4.2, note).
DEFAULT_NOISE_DB = -50.0

#: Self-speech masking: V = E' - 24 dB (clause 4.3.2.1, Eq. 5).
_SELF_MASKING_DB = 24.0

# Eq. 9 uses log10(0.89 F_i / F_k) for every lower band k < i; fixed by the band centres, so
# it is computed once, for the 153 pairs (k, i) with k < i, ordered by i then k.
_PAIR_I, _PAIR_K = np.nonzero(np.tril(np.ones((N_BANDS, N_BANDS), dtype=bool), k=-1))  # row i, column k < i
_PAIR_LOG = np.log10(0.89 * SII_BANDS_HZ[_PAIR_I] / SII_BANDS_HZ[_PAIR_K])
# where the pairs of each band i >= 1 start (band i has i lower bands)
_PAIR_STARTS = np.flatnonzero(np.diff(_PAIR_I, prepend=-1))
# 10**(x / 10) as exp(x ln(10) / 10): the same values to a few ulps, at a third of the cost
_DB_TO_POWER = 0.1 * np.log(10.0)

# Rows of flattened input processed together in Eq. 9 (bounds the (rows, 153) work array
# to a few MB whatever the number of frames).
_CHUNK_ROWS = 2048


def one_third_octave_bandwidths_hz(centres_hz: npt.ArrayLike = SII_BANDS_HZ) -> FloatArray:
    """Width in Hz of one-third-octave bands with edges ``fc * 2**(+-1/6)``.

    Parameters
    ----------
    centres_hz : array_like
        Band centre frequencies, Hz (default: the 18 SII bands).

    Returns
    -------
    ndarray
        ``fc * (2**(1/6) - 2**(-1/6))``, Hz, same shape as ``centres_hz``.
    """
    fc = np.asarray(centres_hz, dtype=np.float64)
    return fc * (2.0 ** (1.0 / 6.0) - 2.0 ** (-1.0 / 6.0))


def _bands_array(name: str, value: npt.ArrayLike | None, default: float) -> FloatArray:
    arr = np.full(N_BANDS, default) if value is None else np.asarray(value, dtype=np.float64)
    if arr.ndim == 0 or arr.shape[-1] != N_BANDS:
        raise InputError(
            f"{name} has shape {arr.shape}, needs {N_BANDS} bands on its last axis; "
            "pass levels on the 18 SII bands (SII_BANDS_HZ)"
        )
    if np.isnan(arr).any():
        raise InputError(f"{name} contains NaN; pass finite levels (or -inf for an empty band)")
    return arr


def _equivalent_masking_db(b_db: FloatArray, n_db: FloatArray) -> FloatArray:
    """Equivalent masking spectrum level Z, dB, from B and N' (clause 4.3.2.3-4.3.2.5).

    Both inputs have shape ``(m, 18)``.
    """
    # Slope of upward spread of masking, dB per octave (Eq. 7).
    c = -80.0 + 0.6 * (b_db + 10.0 * np.log10(SII_BANDS_HZ) - 6.353)
    z = np.empty_like(b_db)
    for lo in range(0, b_db.shape[0], _CHUNK_ROWS):
        rows = slice(lo, lo + _CHUNK_ROWS)
        # Masking of band i by each lower band k (Eq. 9), one column per pair (k, i).
        with np.errstate(invalid="ignore"):
            spread_db = b_db[rows][:, _PAIR_K] + 3.32 * c[rows][:, _PAIR_K] * _PAIR_LOG
        spread = np.exp(spread_db * _DB_TO_POWER)
        total = np.exp(n_db[rows] * _DB_TO_POWER)
        total[:, 1:] += np.add.reduceat(spread, _PAIR_STARTS, axis=1)
        with np.errstate(divide="ignore"):
            z[rows] = 10.0 * np.log10(total)
    # Band 1 has no lower band: Z_1 = B_1 (clause 4.3.2.4).
    z[:, 0] = b_db[:, 0]
    return z


def band_audibility(
    speech_db: npt.ArrayLike,
    noise_db: npt.ArrayLike | None = None,
    threshold_db_hl: npt.ArrayLike | None = None,
) -> FloatArray:
    """Band audibility A = L * K per SII band (ANSI S3.5 clause 4.3-4.7).

    Parameters
    ----------
    speech_db : array_like, shape (..., 18)
        Equivalent speech spectrum level E', dB SPL/Hz.
    noise_db : array_like, shape (..., 18), optional
        Equivalent noise spectrum level N', dB SPL/Hz; default -50 dB in every band.
    threshold_db_hl : array_like, shape (..., 18), optional
        Equivalent hearing threshold level T', dB HL; default 0 dB HL.

    Returns
    -------
    ndarray, shape (..., 18)
        Band audibility in [0, 1] (broadcast shape of the inputs).

    Raises
    ------
    InputError
        If an input does not have 18 bands on its last axis or contains NaN.
    """
    e = _bands_array("speech_db", speech_db, 0.0)
    n = _bands_array("noise_db", noise_db, DEFAULT_NOISE_DB)
    t = _bands_array("threshold_db_hl", threshold_db_hl, 0.0)
    try:
        e, n, t = np.broadcast_arrays(e, n, t)
    except ValueError:
        raise InputError(
            f"speech_db {e.shape}, noise_db {n.shape} and threshold_db_hl {t.shape} do not broadcast; "
            "pass arrays with matching leading axes"
        ) from None
    shape = e.shape
    e2, n2, t2 = (a.reshape(-1, N_BANDS) for a in (e, n, t))

    # Self-speech masking spectrum and the larger of it and the noise (Eq. 5, clause 4.3.2.2).
    b = np.maximum(e2 - _SELF_MASKING_DB, n2)
    z = _equivalent_masking_db(b, n2)
    # Disturbance: masking or internal noise raised by the hearing loss (Eq. 10, clause 4.5).
    d = np.maximum(z, INTERNAL_NOISE_DB + t2)
    # Level distortion factor for speech louder than normal effort (Eq. 11); -inf speech gives 1.
    with np.errstate(invalid="ignore"):
        level = np.minimum(1.0, 1.0 - (e2 - STANDARD_SPEECH_SPECTRA["normal"] - 10.0) / 160.0)
        # Audibility: speech-to-disturbance ratio mapped from -15..+15 dB onto 0..1 (Eq. 12).
        k = np.clip((e2 - d + 15.0) / 30.0, 0.0, 1.0)
    # A band with -inf speech and -inf disturbance is inaudible, not undefined.
    k = np.where(np.isnan(k), 0.0, k)
    return (level * k).reshape(shape)  # Eq. 13


def sii(
    speech_db: npt.ArrayLike,
    noise_db: npt.ArrayLike | None = None,
    threshold_db_hl: npt.ArrayLike | None = None,
    *,
    importance: npt.ArrayLike | None = None,
) -> float | FloatArray:
    """Speech Intelligibility Index, ANSI S3.5-1997 one-third-octave procedure (clause 4).

    Parameters
    ----------
    speech_db : array_like, shape (..., 18)
        Equivalent speech spectrum level E' on the SII bands, dB SPL/Hz.
    noise_db : array_like, shape (..., 18), optional
        Equivalent noise spectrum level N', dB SPL/Hz; default -50 dB (clause 4.2).
    threshold_db_hl : array_like, shape (..., 18), optional
        Equivalent hearing threshold level T', dB HL; default 0 (normal hearing).
    importance : array_like, shape (18,), optional
        Band-importance function; default :data:`BAND_IMPORTANCE_AVERAGE` (Table 3).

    Returns
    -------
    float or ndarray, shape (...)
        SII = sum of importance x band audibility (Eq. 14); a float for one spectrum.

    Raises
    ------
    InputError
        If an input does not have 18 bands on its last axis or contains NaN.
    """
    weights = BAND_IMPORTANCE_AVERAGE if importance is None else _bands_array("importance", importance, 0.0)
    if weights.ndim != 1:
        raise InputError(f"importance has shape {weights.shape}; pass one weight per SII band, shape (18,)")
    out = band_audibility(speech_db, noise_db, threshold_db_hl) @ weights
    return float(out) if np.ndim(out) == 0 else out
