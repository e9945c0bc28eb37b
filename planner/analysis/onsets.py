"""The fine fit: put mapped cue in-points on speech onsets, and score how well they sit.

Subtitlers start a cue on the first sound of its line (CHECKS.md section 6: in-cue at speech
onset); out-points carry a reading extension and are not used. In noise a detector's
probability does not jump at the first sound: it climbs over several 32 ms windows as the
line emerges from the noise (pink noise at +5 dB: 0.2, 0.33, 0.42, then 1.0 over about
100 ms on the demo programmes), so the steepest rise comes late, by as much as the start
of the line lies under the noise. The onset strength here therefore marks where a *step*
into speech begins rather than where the rise is steepest: the mean probability over the
next :data:`AHEAD_S` less the mean over the last :data:`BEHIND_S`, weighted by how far
from speech the last :data:`BEHIND_S` was. For a clean step this peaks on the step; for a
staircase it peaks near its foot, where speech is ahead and none is behind. Measured on
the synthesized programmes of benchmarks/bench_align.py (fine fit started from the true
offset, six cases per background): over pink noise at +5 dB the offset read 4-44 ms late
with the steepest-rise strength used before and 4-13 ms late with this one (at 0 dB 55-78
and 22-32 ms); over music and babble at +5 dB it stays within -11..+2 ms.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from planner._typing import FloatArray
from planner.model import SpeechActivity

#: Fine search half-width and step, seconds.
FINE_SEARCH_S = 0.4
FINE_STEP_S = 0.001
#: Windows of the step-onset strength, seconds: ahead a syllable or so (the speech that
#: follows an onset), behind about the shortest pause between lines (the silence before
#: it). Picked among a few such pairs on the bench programmes, so fitted to them: a
#: longer ahead window reads onsets earlier (helps in pink noise, hurts over babble, whose
#: crowd rises come before the line), a longer behind window later. Pairs 0.15/0.10,
#: 0.20/0.15 and 0.25/0.15 s all keep the offset within 20 ms at +5 dB; 0.20/0.10 and
#: 0.25/0.20 miss by about 8 ms over babble, 0.15/0.15 by 5 ms over pink noise.
AHEAD_S = 0.25
BEHIND_S = 0.15


class FineFit(NamedTuple):
    """Result of :func:`fine_fit`: offset (s), prominence, mean vote and each cue's vote at the offset."""

    offset_s: float
    prominence: float
    score: float
    votes: FloatArray


def onset_strength(activity: SpeechActivity) -> FloatArray:
    """Step-onset strength per frame, ``(n,)``, 0..1: speech ahead and none just behind."""
    p = activity.probability.astype(np.float64)
    n = p.size
    c = np.concatenate(([0.0], np.cumsum(p)))
    i = np.arange(n)
    ahead_f = max(int(round(AHEAD_S / activity.frame_s)), 1)
    behind_f = max(int(round(BEHIND_S / activity.frame_s)), 1)
    ahead = (c[np.minimum(i + ahead_f, n)] - c[i]) / ahead_f
    behind = (c[i] - c[np.maximum(i - behind_f, 0)]) / behind_f
    return np.maximum(ahead - behind, 0.0) * (1.0 - behind)


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


def fine_fit(g: FloatArray, starts_s: FloatArray, offset_s: float, frame_s: float) -> FineFit:
    """Offset within :data:`FINE_SEARCH_S` of ``offset_s`` that puts the mapped in-points on speech onsets.

    ``score`` is the mean vote (:func:`onset_votes`) at that offset and ``votes`` each
    cue's; ``prominence`` the peak mean vote over its median across the search range (1
    when there is no peak).
    """
    deltas = np.arange(-FINE_SEARCH_S, FINE_SEARCH_S + FINE_STEP_S / 2, FINE_STEP_S)
    votes = onset_votes(g, starts_s, offset_s, deltas, frame_s)
    strength = votes.mean(axis=0)
    k = int(np.argmax(strength))
    base = float(np.median(strength))
    prominence = float(strength[k] / base) if base > 0 else (np.inf if strength[k] > 0 else 1.0)
    return FineFit(offset_s + float(deltas[k]), prominence, float(strength[k]), votes[:, k])
