"""The fine fit: put mapped cue in-points on speech onsets, and read the rate drift from them.

Subtitlers start a cue on the first sound of its line (CHECKS.md section 6: in-cue at speech
onset); out-points carry a reading extension and are not used. An onset is a rise of the
detector's probability. In noise a detector finds an onset late, by as much as the start
of the line lies under the noise (measured on the demo programmes: 0-100 ms per line in
pink noise at +10 dB, a few ms over music); clear onsets are the least delayed, which is
why strong rises weigh more.
"""

from __future__ import annotations

import numpy as np
from scipy.ndimage import gaussian_filter1d

from planner._typing import FloatArray
from planner.model import SpeechActivity

#: Fine search half-width and step, seconds; smoothing of the onset strength (Gaussian sigma).
FINE_SEARCH_S = 0.4
FINE_STEP_S = 0.001
ONSET_SIGMA_S = 0.02
#: Half-width of the per-cue onset search of the drift fit, and its step, seconds.
DRIFT_SEARCH_S = 0.2
DRIFT_STEP_S = 0.001
#: Fewest cues with a clear onset, and least span between two cues, for a drift fit.
DRIFT_MIN_CUES = 6
DRIFT_MIN_DT_S = 1.0


def onset_strength(activity: SpeechActivity) -> FloatArray:
    """Smoothed rise of the speech probability per frame (where speech starts), ``(n,)``."""
    p = activity.probability.astype(np.float64)
    # Each rise is weighted by how far from 1 the probability still was, so the start of
    # a gradual rise (speech emerging from noise) counts more than its top.
    rise = np.maximum(np.diff(p, prepend=p[:1]), 0.0) * (1.0 - np.concatenate((p[:1], p[:-1])))
    return gaussian_filter1d(rise, ONSET_SIGMA_S / activity.frame_s, mode="constant", truncate=4.0)


def onset_votes(g: FloatArray, starts_s: FloatArray, offset_s: float, deltas: FloatArray, frame_s: float) -> FloatArray:
    """Onset strength at each mapped in-point shifted by each delta, ``(n_cues, n_deltas)``.

    Rows are divided by the larger of their own peak and the median peak: no cue votes
    more than 1, so one huge rise (the programme start, a door slam) cannot outvote the
    rest, while weak onsets keep their smaller weight (in noise the clear onsets are the
    least delayed ones).
    """
    pos = (starts_s[:, None] + offset_s + deltas[None, :]) / frame_s
    vals = np.interp(pos, np.arange(g.size), g, left=0.0, right=0.0)
    peak = vals.max(axis=1)
    return vals / np.maximum(peak, max(float(np.median(peak)), 1e-12))[:, None]


def fine_offset(g: FloatArray, starts_s: FloatArray, offset_s: float, frame_s: float) -> tuple[float, float]:
    """Offset near ``offset_s`` that puts the mapped in-points on speech onsets.

    Returns the refined offset (s) and its prominence: peak of the mean vote over its
    median across the search range (1 when there is no peak).
    """
    deltas = np.arange(-FINE_SEARCH_S, FINE_SEARCH_S + FINE_STEP_S / 2, FINE_STEP_S)
    strength = onset_votes(g, starts_s, offset_s, deltas, frame_s).mean(axis=0)
    k = int(np.argmax(strength))
    base = float(np.median(strength))
    prominence = float(strength[k] / base) if base > 0 else (np.inf if strength[k] > 0 else 1.0)
    return offset_s + float(deltas[k]), prominence


def drift_ratio(
    g: FloatArray, starts_s: FloatArray, ratio: float, offset_s: float, frame_s: float
) -> tuple[float, float] | None:
    """Rate ratio implied by the onsets around a mapping and its standard error, or None.

    Each cue's onset residual is the shift (within :data:`DRIFT_SEARCH_S`) that puts its
    mapped in-point on its strongest onset (cues whose onset is under a quarter of the
    median are left out); residuals grow as ``(true ratio - ratio) * t``,
    so the Theil-Sen slope (median of pairwise slopes, robust to stray onsets) over cue
    pairs at least :data:`DRIFT_MIN_DT_S` apart, added to ``ratio``, estimates the ratio.
    The standard error is that of a least-squares slope with the residual spread taken
    robustly (1.4826 x median absolute residual). None with fewer than
    :data:`DRIFT_MIN_CUES` cues that have an onset.
    """
    deltas = np.arange(-DRIFT_SEARCH_S, DRIFT_SEARCH_S + DRIFT_STEP_S / 2, DRIFT_STEP_S)
    vals = onset_votes(g, ratio * starts_s, offset_s, deltas, frame_s)
    clear = vals.max(axis=1) >= 0.25
    if int(clear.sum()) < DRIFT_MIN_CUES:
        return None
    t, d = starts_s[clear], deltas[np.argmax(vals[clear], axis=1)]
    i, j = np.triu_indices(t.size, 1)
    dt = t[j] - t[i]
    ok = dt >= DRIFT_MIN_DT_S
    if not ok.any():
        return None
    slope = float(np.median((d[j][ok] - d[i][ok]) / dt[ok]))
    resid = d - slope * t
    sigma = 1.4826 * float(np.median(np.abs(resid - np.median(resid))))
    se = sigma / (float(np.std(t)) * np.sqrt(t.size)) if np.std(t) > 0 else np.inf
    return ratio + slope, se
