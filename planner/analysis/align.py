"""Subtitle-to-audio mapping ``t_audio = rate_ratio * t_subs + offset_s``, with edits.

Method
------
1. *Signals* (10 ms frames). Speech: the detector's probability minus its 20 s moving
   mean, scaled to unit mean absolute value, so the contrast between speech and its
   surroundings counts, not the level (over a crowd the probability never drops near 0);
   outside the audio the signal is -1 (no speech there). Cues: 1 where a cue is shown.
2. *Coarse fit*: for each trade frame-rate ratio of :data:`RATE_CANDIDATES` (exact
   fractions), the cue signal stretched by the ratio is cross-correlated (FFT) with the
   speech signal over every offset within ``+/-max_offset_s``. The score of an offset is
   the mean speech signal under the cue frames.
3. *Fine fit* (:mod:`planner.analysis.onsets`): around the coarse offset (+/-0.4 s, 1 ms
   steps) the offset maximising the mean onset vote at the mapped in-points. Ratios too
   close for the coarse fit to part (1 and 1001/1000 over a few minutes: within 80 % of
   the best coarse score) each get their own fine fit, and the one whose in-points sit
   best on the onsets (highest mean vote) wins: the most likely candidate, with no prior
   for any ratio; only an exact tie goes to the simpler ratio (list order). When the
   per-cue vote differences to a runner-up are within :data:`RATIO_TIE_SE` standard
   errors of zero, a note says the runner-up fits nearly as well.
4. *Edits* (:mod:`planner.analysis.edits`): local offsets per window of cues, dynamic
   programming over the cues with a penalty per break, one fine fit per segment.

Confidence
----------
``(S1 - max(S2, 0)) / S1`` clipped to 0..1, where S1 is the coarse score of the chosen
(piecewise) mapping and S2 the best coarse score of any mapping that differs from it by at
least :data:`DISTINCT_S` somewhere on the cues (other offsets and other ratios). The speech
signal has zero local mean, so 0 is the score of cues placed at random (chance). 1: nothing
else comes near; 0: the runner-up is as good. With no fit better than chance the written
times are kept (confidence 0); cues outside the audio cap it at :data:`OUTSIDE_CAP`; every
such case says why in ``Alignment.notes``.
"""

from __future__ import annotations

from collections.abc import Sequence
from fractions import Fraction

import numpy as np

from planner._typing import FloatArray
from planner.analysis.checks import (
    MIN_REPORT_CONFIDENCE,
    HouseStyle,
    cps,
    cue_flags,
    dialogue_mask,
    is_no_speech,
    pair_flags,
    uncovered_speech,
)
from planner.analysis.confidence import moving_mean, span_mask, spans_from_notes
from planner.analysis.edits import break_time_s, coarse_scores, find_segments, span_agreement
from planner.analysis.onsets import FineFit, fine_fit, onset_strength
from planner.analysis.speechmask import runs as mask_runs
from planner.errors import InputError
from planner.io.timecode import frame_rate
from planner.model import Alignment, Cue, CueTiming, MappingSegment, SpeechActivity, UncoveredSpeech
from planner.units import nearest_int

#: Trade frame-rate ratios searched, as (name, exact ratio t_audio / t_subs). 23.976 is
#: exactly 24000/1001 fps (SMPTE ST 12-1), so 24/23.976 = 1001/1000 (also 30/29.97).
RATE_CANDIDATES: tuple[tuple[str, Fraction], ...] = (
    ("1", Fraction(1)),
    ("25/24", Fraction(25, 24)),
    ("24/25", Fraction(24, 25)),
    ("24/23.976", 24 / Fraction(24000, 1001)),
    ("23.976/24", Fraction(24000, 1001) / 24),
    ("25/23.976", 25 / Fraction(24000, 1001)),
    ("23.976/25", Fraction(24000, 1001) / 25),
)
#: Window of the moving mean taken off the speech probability, seconds (chosen here: longer
#: than a scene's dialogue rhythm, shorter than a change of background).
LOCAL_MEAN_S = 20.0
#: Two mappings are distinct when they disagree by at least this much on some cue, seconds.
DISTINCT_S = 1.0
#: Ratios within this share of the best coarse score compete on their fine fits.
RATIO_COARSE_SHARE = 0.8
#: A runner-up ratio "fits nearly as well" when the winner's mean per-cue vote lead is
#: within this many standard errors of zero (about the two-sided 95 % bound of a normal
#: mean; it only decides whether a note is written, not which ratio is chosen).
RATIO_TIE_SE = 2.0
#: Fewest cues the alignment will fit; below, the written times are kept.
MIN_CUES = 3
#: Confidence below which a warning is written.
LOW_CONFIDENCE = 0.3
#: Confidence cap when cues fall outside the audio after mapping.
OUTSIDE_CAP = 0.5
#: Speech needed in the audio for a fit, seconds.
MIN_SPEECH_S = 1.0

_RATE_ORDER = {name: k for k, (name, _) in enumerate(RATE_CANDIDATES)}


def _ratio(name: str) -> float:
    return float(dict(RATE_CANDIDATES)[name])


def _speech_signal(activity: SpeechActivity) -> FloatArray:
    p = activity.probability.astype(np.float64)
    width = max(nearest_int(LOCAL_MEAN_S / activity.frame_s), 1)
    z = p - moving_mean(p, width)
    scale = float(np.mean(np.abs(z)))
    return z / scale if scale > 1e-9 else z


def _frames(t_s: FloatArray, frame_s: float) -> np.ndarray:
    """Nearest frame index of each time (the project's rounding rule, vectorised)."""
    return np.floor(np.asarray(t_s) / frame_s + 0.5).astype(np.int64)


def _spread_ms(names: list[str], starts_s: FloatArray) -> float:
    """Largest disagreement in ms, over the cues, between mappings of these ratios pinned at the middle."""
    ratios = [_ratio(n) for n in names]
    half = 0.5 * float(starts_s.max() - starts_s.min())
    return 1000.0 * (max(ratios) - min(ratios)) * half


def _identity(cues: Sequence[Cue], duration_s: float, note: str) -> Alignment:
    end = max([duration_s] + [c.end_s for c in cues])
    return Alignment(
        segments=(MappingSegment(subs_start_s=0.0, subs_end_s=float(end), rate_ratio=1.0, offset_s=0.0),),
        confidence=0.0,
        rate_name="1",
        notes=(note,),
    )


def _choose_ratio(
    g: FloatArray,
    starts: FloatArray,
    scores: dict[str, FloatArray],
    coarse: dict[str, float],
    max_lag: int,
    frame_s: float,
    notes: list[str],
) -> str:
    """Name of the frame-rate ratio whose fine fit puts the in-points best on the onsets.

    Candidates are the ratios within :data:`RATIO_COARSE_SHARE` of the best coarse score;
    each is fine-fitted from its own coarse offset. Appends a note to ``notes`` when a
    runner-up is within :data:`RATIO_TIE_SE` standard errors (paired over the cues).
    """
    best_coarse = max(coarse.values())
    contenders = [n for n, _ in RATE_CANDIDATES if coarse[n] >= RATIO_COARSE_SHARE * best_coarse]
    fits: dict[str, FineFit] = {}
    for name in contenders:
        lag_s = (int(np.argmax(scores[name])) - max_lag) * frame_s
        fits[name] = fine_fit(g, _ratio(name) * starts, lag_s, frame_s)
    rate_name = max(contenders, key=lambda n: (fits[n].score, -_RATE_ORDER[n]))
    close = [n for n in contenders if n != rate_name and _near_tie(fits[rate_name].votes, fits[n].votes)]
    if close:
        notes.append(
            f"frame-rate ratio {rate_name} chosen; {', '.join(close)} fit(s) nearly as well on this length of programme "
            f"(the mappings part by {_spread_ms([rate_name] + close, starts):.0f} ms at most over the cues)"
        )
    return rate_name


def _near_tie(votes_best: FloatArray, votes_other: FloatArray) -> bool:
    """Whether the mean per-cue vote lead of the best fit is within :data:`RATIO_TIE_SE` standard errors."""
    d = votes_best - votes_other
    se = float(np.std(d, ddof=1)) / np.sqrt(d.size) if d.size > 1 else np.inf
    return float(np.mean(d)) <= RATIO_TIE_SE * se


def align(cues: Sequence[Cue], activity: SpeechActivity, *, max_offset_s: float = 90.0, duration_s: float) -> Alignment:
    """Estimate the mapping of subtitle times onto audio times.

    Parameters
    ----------
    cues : sequence of Cue
        The cues as written (any order; fitted in time order).
    activity : SpeechActivity
        Speech track of the audio (10 ms frames from t = 0).
    max_offset_s : float
        Largest offset searched either way, seconds.
    duration_s : float
        Length of the audio, seconds.

    Returns
    -------
    Alignment
        One segment per stretch between detected edits; ``breaks_s`` in audio seconds.

    Raises
    ------
    InputError
        If ``duration_s`` or ``max_offset_s`` is not positive and finite.
    """
    if not (np.isfinite(duration_s) and duration_s > 0):
        raise InputError(f"duration_s={duration_s!r} must be a positive number of seconds; pass the audio length")
    if not (np.isfinite(max_offset_s) and max_offset_s >= 0):
        raise InputError(f"max_offset_s={max_offset_s!r} must be zero or more seconds; pass e.g. 90")
    order = sorted(cues, key=lambda c: (c.start_s, c.end_s, c.index))
    frame_s = activity.frame_s
    if len(order) < MIN_CUES:
        return _identity(order, duration_s, f"only {len(order)} cue(s): too few to fit a mapping; times kept as written (confidence 0)")
    if float(activity.is_speech.sum()) * frame_s < MIN_SPEECH_S:
        return _identity(order, duration_s, "no speech detected in the audio; times kept as written (confidence 0)")
    starts = np.array([c.start_s for c in order])
    ends = np.maximum(np.array([c.end_s for c in order]), starts)
    span_lo = min(float(r) for _, r in RATE_CANDIDATES) * starts.min() - max_offset_s
    span_hi = max(float(r) for _, r in RATE_CANDIDATES) * ends.max() + max_offset_s
    if starts.min() - max_offset_s > duration_s or span_hi < 0 or span_lo > duration_s:
        return _identity(
            order,
            duration_s,
            f"the subtitles ({starts.min():.1f}-{ends.max():.1f} s) do not overlap the audio (0-{duration_s:.1f} s) "
            f"within +/-{max_offset_s:g} s; check that they belong to this programme or set the programme start "
            "timecode; times kept as written (confidence 0)",
        )

    z = _speech_signal(activity)
    g = onset_strength(activity)
    zcum = np.concatenate(([0.0], np.cumsum(z)))
    max_lag = nearest_int(max_offset_s / frame_s)
    scores: dict[str, FloatArray] = {}
    coarse: dict[str, float] = {}
    for name, frac in RATE_CANDIDATES:
        r = float(frac)
        sc = coarse_scores(z, _frames(r * starts, frame_s), _frames(r * ends, frame_s), max_lag)
        scores[name] = sc
        coarse[name] = float(sc.max())
    notes: list[str] = []
    rate_name = _choose_ratio(g, starts, scores, coarse, max_lag, frame_s, notes)
    ratio = _ratio(rate_name)

    # Edits: one offset per segment of cues (planner.analysis.edits), then a fine fit each.
    a_f, b_f = _frames(ratio * starts, frame_s), _frames(ratio * ends, frame_s)
    pieces = find_segments(z, zcum, a_f, b_f, scores[rate_name], max_lag, frame_s=frame_s)
    offsets: list[float] = []
    for first, last, lag in pieces:
        off, prom, _, _ = fine_fit(g, ratio * starts[first : last + 1], lag * frame_s, frame_s)
        if prom < 1.5:
            off = lag * frame_s
            notes.append(
                f"cues {order[first].index}-{order[last].index}: no clear speech onsets to refine on; "
                "offset accurate to about +/-0.2 s"
            )
        offsets.append(off)
    segments, breaks = [], []
    for k, ((first, last, _), off) in enumerate(zip(pieces, offsets)):
        lo = float(min(0.0, starts[0])) if k == 0 else float(starts[first])
        hi = float(starts[pieces[k + 1][0]]) if k + 1 < len(pieces) else float(max(ends.max(), (duration_s - off) / ratio))
        segments.append(MappingSegment(subs_start_s=lo, subs_end_s=hi, rate_ratio=ratio, offset_s=round(off, 4)))
        if k > 0:
            prev = pieces[k - 1][1]
            before = (ratio * starts[prev] + offsets[k - 1], ratio * ends[prev] + offsets[k - 1])
            after = (ratio * starts[first] + off, ratio * ends[first] + off)
            breaks.append(round(break_time_s(activity, before, after, off - offsets[k - 1]), 3))

    # Confidence: the chosen mapping against the best distinct one and against chance.
    mapped_a = np.concatenate([ratio * starts[f : l + 1] + o for (f, l, _), o in zip(pieces, offsets)])
    mapped_b = np.concatenate([ratio * ends[f : l + 1] + o for (f, l, _), o in zip(pieces, offsets)])
    fa, fb = _frames(mapped_a, frame_s), _frames(mapped_b, frame_s)
    s1 = float(span_agreement(zcum, fa, fb).sum() / max(int((fb - fa).sum()), 1))
    s2 = -np.inf
    t_ends = np.array([starts.min(), ends.max()])
    for name, frac in RATE_CANDIDATES:
        lags_s = (np.arange(scores[name].size) - max_lag) * frame_s
        same = np.zeros(lags_s.size, dtype=bool)
        for seg in segments:
            gap = np.abs((float(frac) - seg.rate_ratio) * t_ends[None, :] + (lags_s[:, None] - seg.offset_s))
            same |= gap.max(axis=1) < DISTINCT_S
        if (~same).any():
            s2 = max(s2, float(scores[name][~same].max()))
    confidence = float(np.clip((s1 - max(s2, 0.0)) / s1, 0.0, 1.0)) if s1 > 0 else 0.0
    if s1 <= 0:
        return _identity(order, duration_s, "the cues match the speech no better than chance at any offset; times kept as written (confidence 0)")

    if len(segments) > 1:
        notes.append(
            f"{len(breaks)} edit(s) found at {', '.join(f'{b:.2f}' for b in breaks)} s (audio); one mapping per segment"
        )
    outside = int(np.sum((mapped_b > duration_s + 0.5) | (mapped_a < -0.5)))
    if outside:
        confidence = min(confidence, OUTSIDE_CAP)
        notes.append(
            f"{outside} cue(s) fall outside the audio (0-{duration_s:.1f} s) after mapping; the subtitles may be "
            f"for a longer cut of the programme (confidence capped at {OUTSIDE_CAP})"
        )
    if confidence < LOW_CONFIDENCE:
        notes.append(f"low alignment confidence {confidence:.2f}: another mapping fits almost as well; check the result")
    return Alignment(
        segments=tuple(segments),
        confidence=round(confidence, 4),
        rate_name=rate_name,
        breaks_s=tuple(breaks),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- per-cue timing


def _segment_for(alignment: Alignment, t_subs_s: float) -> MappingSegment:
    for seg in alignment.segments:
        if t_subs_s < seg.subs_end_s:
            return seg
    return alignment.segments[-1]


def _nearest(points: FloatArray, t: float, tol: float) -> float | None:
    if points.size == 0:
        return None
    k = int(np.argmin(np.abs(points - t)))
    return float(points[k]) if abs(points[k] - t) <= tol else None


def time_cues(
    cues: Sequence[Cue],
    alignment: Alignment,
    activity: SpeechActivity,
    style: HouseStyle,
    *,
    snap_tolerance_s: float = 0.5,
    fps: str = "25",
    use_crowd_evidence: bool = True,
    min_confidence: float = MIN_REPORT_CONFIDENCE,
) -> tuple[tuple[CueTiming, ...], tuple[UncoveredSpeech, ...]]:
    """Map, snap and check every cue; find speech that no cue covers.

    Speech here is the detector's mask, except inside steady (crowd-like) regions noted by
    the detector, where the stricter :data:`~planner.analysis.checks.CROWD_HANGOVER` decides
    (``use_crowd_evidence``). Each cue is mapped by the segment holding its in-point; its in-
    and out-points move to the nearest speech onset / offset within ``snap_tolerance_s``
    (cues over no speech stay put), and the out-point is held to at least ``min_duration_s``
    after the in-point (unless the cue was shorter than that as written). Consecutive cues keep the house minimum gap (or the smaller gap they
    had after mapping): the earlier out-point yields first, then the later in-point. Cues
    that overlapped after mapping stay overlapping (and are flagged).

    A cue's speech is the speech overlapping its mapped span, bounded by the neighbouring
    cues' mapped spans. ``onset_error_ms`` = mapped in-point minus that speech's onset
    (positive: the cue comes in late); ``offset_error_ms`` likewise for the out-point.

    Parameters
    ----------
    cues : sequence of Cue
        The cues as written.
    alignment, activity, style
        Results of :func:`align`, the speech detector and :func:`~planner.analysis.checks.load_style`.
    snap_tolerance_s : float
        Farthest a cue edge moves to meet speech, seconds.
    fps : str
        Video frame rate name (for the minimum gap in frames), e.g. ``"25"``.
    use_crowd_evidence : bool
        Apply the crowd rules above (off: the detector's mask everywhere).
    min_confidence : float
        Uncovered speech of lower confidence is left out (default: what is reported).

    Returns
    -------
    (timings, uncovered)
        CueTiming per cue by ``index``; UncoveredSpeech runs in time order.
    """
    if not 0.0 <= snap_tolerance_s <= 5.0:
        raise InputError(f"snap_tolerance_s={snap_tolerance_s!r} must be between 0 and 5 s; pass e.g. 0.5")
    min_gap_s = float(style.min_gap_frames * frame_rate(fps).frame_s)
    frame_s = activity.frame_s
    order = sorted(cues, key=lambda c: (c.start_s, c.end_s, c.index))
    n = len(order)
    mapped = np.zeros((n, 2))
    for i, c in enumerate(order):
        seg = _segment_for(alignment, c.start_s)
        mapped[i] = (seg.map_s(c.start_s), seg.map_s(max(c.end_s, c.start_s)))
    steady = span_mask(spans_from_notes(activity.notes), activity.n_frames, "steady", frame_s=frame_s)
    speech = dialogue_mask(activity, steady if use_crowd_evidence else None)
    starts_f, ends_f = mask_runs(speech)
    onsets, offsets = starts_f * frame_s, ends_f * frame_s
    speech_cum = np.concatenate(([0], np.cumsum(speech, dtype=np.int64)))

    def speech_in(a: float, b: float) -> float:
        ia, ib = (int(np.clip(k, 0, activity.n_frames)) for k in _frames(np.array([a, b]), frame_s))
        return float(speech_cum[max(ib, ia)] - speech_cum[ia]) * frame_s

    aligned = mapped.copy()
    for i in range(n):
        a, b = mapped[i]
        if is_no_speech(speech_in(a, b), b - a):
            continue
        new_a = _nearest(onsets, a, snap_tolerance_s)
        new_a = a if new_a is None else new_a
        new_b = _nearest(offsets, b, snap_tolerance_s)
        new_b = b if new_b is None or new_b <= new_a else new_b
        aligned[i] = (new_a, max(new_b, new_a + style.min_duration_s) if b - a >= style.min_duration_s else new_b)
    for i in range(1, n):
        gap_mapped = mapped[i, 0] - mapped[i - 1, 1]
        if gap_mapped < 0:
            aligned[i - 1, 1] = min(aligned[i - 1, 1], mapped[i - 1, 1])
            aligned[i, 0] = max(aligned[i, 0], mapped[i, 0])
            continue
        need = min(min_gap_s, gap_mapped)
        if aligned[i, 0] - aligned[i - 1, 1] < need:
            aligned[i - 1, 1] = max(aligned[i, 0] - need, aligned[i - 1, 0] + frame_s)
            aligned[i, 0] = max(aligned[i, 0], aligned[i - 1, 1] + need)
            aligned[i, 1] = max(aligned[i, 1], aligned[i, 0] + frame_s)

    pairs = pair_flags([(float(a), float(b)) for a, b in aligned], min_gap_s)
    timings = []
    for i, c in enumerate(order):
        a, b = mapped[i]
        lo = mapped[i - 1, 1] if i > 0 else -np.inf
        hi = mapped[i + 1, 0] if i + 1 < n else np.inf
        # Runs overlapping [a, b): those ending after a and starting before b (runs are sorted).
        first, stop = int(np.searchsorted(offsets, a, side="right")), int(np.searchsorted(onsets, b, side="left"))
        onset = float(max(onsets[first], lo)) if stop > first else None
        offset = float(min(offsets[stop - 1], hi)) if stop > first else None
        start_s, end_s = float(aligned[i, 0]), float(aligned[i, 1])
        speech_s = speech_in(start_s, end_s)
        flags = cue_flags(
            text=c.text, start_s=start_s, end_s=end_s, speech_s=speech_s, onset_s=onset, offset_s=offset, style=style
        ) | pairs[i]
        timings.append(
            CueTiming(
                index=c.index,
                aligned_start_s=round(start_s, 3),
                aligned_end_s=round(end_s, 3),
                onset_error_ms=None if onset is None else round(1000.0 * float(a - onset), 1),
                offset_error_ms=None if offset is None else round(1000.0 * float(b - offset), 1),
                speech_s=round(speech_s, 3),
                cps=round(cps(c.text, end_s - start_s), 2),
                flags=tuple(sorted(flags)),
            )
        )
    timings.sort(key=lambda t: t.index)
    uncovered = uncovered_speech(
        speech,
        activity.probability,
        aligned,
        steady if use_crowd_evidence else None,
        level_db=activity.level_db if use_crowd_evidence else None,
        frame_s=frame_s,
        min_confidence=min_confidence,
    )
    return tuple(timings), uncovered
