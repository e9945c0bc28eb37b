"""Edits made after the subtitles: split the cues into segments that each keep one offset.

When a segment was inserted into the programme (an ident, a recap) or cut from it after
the subtitles were made, one mapping fits the cues before the edit and another those
after. The search here:

1. *Candidate offsets*: the best offset of each window of :data:`WINDOW_CUES` cues (half
   overlapping), found by the same cross-correlation as the global fit, plus the global
   best; offsets closer than :data:`CLUSTER_S` count as one.
2. *Dynamic programming* over the cues in time order (a Viterbi path): each cue scores
   the mean speech signal under its frames at each candidate offset; changing offset
   between two cues costs :data:`BREAK_PENALTY` (about four well-matched cues' worth), and
   is only allowed when the mapped cues stay in order. The best path gives the segments.

The audio time of a break is only known to lie between the last speech of the cue before
and the first speech of the cue after (less the inserted length); :func:`break_time_s`
takes the middle of that interval.
"""

from __future__ import annotations

import numpy as np
from scipy import fft as sp_fft

from planner._typing import FloatArray
from planner.model import SpeechActivity
from planner.units import nearest_int

#: Cues per local window when looking for candidate offsets (hop: half of it).
WINDOW_CUES = 8
#: Candidate offsets closer than this are merged, seconds.
CLUSTER_S = 0.5
#: Cost of one break, in units of the per-cue mean speech signal (a matched cue scores
#: about +0.8, an unmatched one about 0 or less). Chosen here on synthetic programmes.
BREAK_PENALTY = 3.0
#: Mapped cues may overlap their predecessor by this much across a break, seconds.
ORDER_TOLERANCE_S = 0.5
#: Most candidate offsets kept (by how many windows chose them).
MAX_CANDIDATES = 12


#: Cue-signal frames per block of :func:`coarse_scores` (about 5.5 min of 10 ms frames): its
#: memory is that of a few such blocks, whatever the programme length.
COARSE_BLOCK_FRAMES = 1 << 15


def coarse_scores(z: FloatArray, a: np.ndarray, b: np.ndarray, max_lag: int) -> FloatArray:
    """Mean speech signal under the cue frames ``[a, b)`` shifted by each lag ``-max_lag..max_lag``.

    ``z`` is the speech signal ``(n,)`` (taken as -1 outside the audio); returns
    ``(2 max_lag + 1,)``, index ``k`` for lag ``k - max_lag`` frames. The cross-correlation
    of the cue cover with the speech signal is summed over blocks of
    :data:`COARSE_BLOCK_FRAMES` cue frames (each block's valid correlation against its slice
    of the speech signal), so memory does not grow with the programme.
    """
    a, b = np.asarray(a, dtype=np.int64), np.asarray(b, dtype=np.int64)
    j0, j1 = int(a.min()), int(b.max())
    out = np.zeros(2 * max_lag + 1)
    total = 0
    for s0 in range(j0, j1, COARSE_BLOCK_FRAMES):
        s1 = min(s0 + COARSE_BLOCK_FRAMES, j1)
        c = _cover(a, b, s0, s1)
        n_covered = int(np.count_nonzero(c))
        if n_covered == 0:
            continue  # adds exactly nothing
        total += n_covered
        out += _correlate_valid(_extended(z, s0 - max_lag, s1 + max_lag), c)
    if total == 0:
        return np.full(2 * max_lag + 1, -1.0)
    out /= total
    return out


def _correlate_valid(x: FloatArray, c: FloatArray) -> FloatArray:
    """``scipy.signal.correlate(x, c, mode="valid", method="fft")`` of real 1-D arrays with
    ``len(x) >= len(c)``: the same FFT steps as ``scipy.signal.fftconvolve`` takes (padded to
    the next fast length, kept centred), through scipy.fft, which loads in a third of the time
    scipy.signal does (the values are the same; tests/test_align.py checks them)."""
    if c.size == 1:  # as fftconvolve: no transform along an axis of length one
        return x * c[0]
    n = x.size + c.size - 1
    size = [sp_fft.next_fast_len(n, True)]
    full = sp_fft.irfftn(sp_fft.rfftn(x, size, axes=[0]) * sp_fft.rfftn(c[::-1], size, axes=[0]), size, axes=[0])[:n]
    n_valid = x.size - c.size + 1
    start = (n - n_valid) // 2
    return full[start : start + n_valid].copy()


def _cover(a: np.ndarray, b: np.ndarray, s0: int, s1: int) -> FloatArray:
    """1.0 on the frames of ``[s0, s1)`` inside any cue span ``[a, b)``, else 0.0."""
    hit = (a < s1) & (b > s0)
    lo, hi = np.maximum(a[hit], s0) - s0, np.minimum(b[hit], s1) - s0
    delta = np.zeros(s1 - s0 + 1, dtype=np.int32)
    np.add.at(delta, lo, 1)
    np.add.at(delta, hi, -1)
    return (np.cumsum(delta[:-1], dtype=np.int32) > 0).astype(np.float64)


def _extended(z: FloatArray, lo: int, hi: int) -> FloatArray:
    """``z[lo:hi]`` with -1 for the frames outside the signal."""
    ext = np.full(hi - lo, -1.0)
    s0, s1 = max(lo, 0), min(hi, z.size)
    if s1 > s0:
        ext[s0 - lo : s1 - lo] = z[s0:s1]
    return ext


def span_agreement(zcum: FloatArray, a: np.ndarray, b: np.ndarray) -> FloatArray:
    """Sum of the speech signal over frames ``[a, b)`` from its cumulative sum (-1 per frame outside)."""
    n = zcum.size - 1
    a_in, b_in = np.clip(a, 0, n), np.clip(b, 0, n)
    return (zcum[b_in] - zcum[a_in]) - ((b - a) - (b_in - a_in))


def _candidates(z: FloatArray, a: np.ndarray, b: np.ndarray, global_scores: FloatArray, max_lag: int, frame_s: float) -> np.ndarray:
    lags = [int(np.argmax(global_scores)) - max_lag]
    hop = WINDOW_CUES // 2
    if a.size >= 2 * WINDOW_CUES:
        for w in range(0, a.size - hop, hop):
            sc = coarse_scores(z, a[w : w + WINDOW_CUES], b[w : w + WINDOW_CUES], max_lag)
            lags.append(int(np.argmax(sc)) - max_lag)
    # Cluster: walk the sorted lags, start a new cluster after a jump of CLUSTER_S; each
    # cluster is represented by its lag with the best global score.
    radius = nearest_int(CLUSTER_S / frame_s)
    ordered = sorted(lags)
    clusters: list[list[int]] = [[ordered[0]]]
    for lag in ordered[1:]:
        if lag - clusters[-1][-1] >= radius:
            clusters.append([lag])
        else:
            clusters[-1].append(lag)
    reps = [(len(c), max(c, key=lambda x: (global_scores[x + max_lag], -x))) for c in clusters]
    first = min(range(len(reps)), key=lambda i: abs(reps[i][1] - lags[0]))
    rest = sorted((r for i, r in enumerate(reps) if i != first), key=lambda r: (-r[0], r[1]))
    return np.array([reps[first][1]] + [r[1] for r in rest[: MAX_CANDIDATES - 1]], dtype=np.int64)


def find_segments(
    z: FloatArray,
    zcum: FloatArray,
    a: np.ndarray,
    b: np.ndarray,
    global_scores: FloatArray,
    max_lag: int,
    *,
    frame_s: float = 0.01,
) -> list[tuple[int, int, int]]:
    """Segments of cues sharing one offset, as ``(first, last, lag_frames)`` in cue order.

    Parameters
    ----------
    z, zcum : ndarray
        Speech signal ``(n,)`` and its cumulative sum ``(n + 1,)`` with a leading 0.
    a, b : ndarray
        In and out frames of the cues (time order) after the ratio, before any offset.
    global_scores : ndarray
        Coarse scores of all cues over lags ``-max_lag..max_lag``.
    """
    lags = _candidates(z, a, b, global_scores, max_lag, frame_s)
    length = np.maximum(b - a, 1)
    per_cue = np.stack([span_agreement(zcum, a + lag, b + lag) / length for lag in lags], axis=1)
    n, k = per_cue.shape
    tol = nearest_int(ORDER_TOLERANCE_S / frame_s)
    score = per_cue[0].copy()
    back = np.zeros((n, k), dtype=np.int64)
    for i in range(1, n):
        # switch[k_new, k_old]: allowed when cue i (new lag) starts after cue i-1 (old lag) ends.
        allowed = (a[i] + lags[:, None]) >= (b[i - 1] + lags[None, :] - tol)
        options = np.where(allowed, score[None, :] - BREAK_PENALTY, -np.inf)
        options[np.arange(k), np.arange(k)] = score
        back[i] = np.argmax(options, axis=1)
        score = options[np.arange(k), back[i]] + per_cue[i]
    state = int(np.argmax(score))
    path = np.empty(n, dtype=np.int64)
    for i in range(n - 1, -1, -1):
        path[i] = state
        state = int(back[i, state])
    cuts = np.flatnonzero(np.diff(path)) + 1
    bounds = np.concatenate(([0], cuts, [n]))
    return [(int(s), int(e) - 1, int(lags[path[s]])) for s, e in zip(bounds[:-1], bounds[1:])]


def break_time_s(
    activity: SpeechActivity, prev_span_s: tuple[float, float], next_span_s: tuple[float, float], jump_s: float
) -> float:
    """Audio time of an edit between two mapped cues, seconds.

    ``prev_span_s`` / ``next_span_s``: the cues either side of the break, mapped by their
    own segments; ``jump_s``: offset after minus offset before (> 0: a segment was inserted).
    The edit lies after the last speech of the cue before and, for an insertion, at least
    ``jump_s`` before the first speech of the cue after; the middle is returned.
    """
    segs = activity.segments()
    offs = [e for s, e in segs if prev_span_s[0] < e <= prev_span_s[1] + 0.5]
    ons = [s for s, e in segs if next_span_s[0] - 0.5 <= s < next_span_s[1]]
    lo = float(max(offs)) if offs else float(prev_span_s[1])
    hi = float(min(ons)) if ons else float(next_span_s[0])
    hi -= max(jump_s, 0.0)
    return 0.5 * (lo + max(hi, lo))
