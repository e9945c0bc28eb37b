"""Where a speech detector's verdict deserves less trust: steady (crowd-like) sound and hovering scores.

Any detector calls crowd babble speech: it *is* speech, only not the dialogue. What sets a
crowd (or a steady noise the detector mistook for speech) apart from one talker is the
envelope: a single voice stops between syllables and words, so its 10 ms energy swings by
many dB within a second, while a crowd of voices fills the gaps of each other and its
envelope stays flat. Measured on the synthesized demo programmes (standard deviation of the
10 ms log energy in 200-1000 Hz over 1 s, detected-speech frames): dialogue over pink
noise, rain or the music bed at +5 dB or better 5.2 dB or more (10th percentile), over
babble at +10 dB about 6.6 dB (median); the 8-voice babble alone 3.6 dB (median, 90th
percentile 5.2 dB). Spans of detected speech whose
envelope is flatter than :data:`STEADY_DEPTH_DB` are marked ``steady``; spans where the
speech probability stays close to the decision threshold are marked ``uncertain``.

The spans travel as sentences in ``SpeechActivity.notes`` (so they survive analysis.json)
in the fixed form written by :func:`span_note`; :func:`spans_from_notes` reads them back.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Literal

import numpy as np

from planner._typing import BoolArray, FloatArray
from planner.units import ANALYSIS_FRAME_S, nearest_int

SpanKind = Literal["steady", "uncertain"]

#: Window over which envelope depth and threshold closeness are measured, seconds.
WINDOW_S = 1.0
#: Envelope depth (std of 10 ms log energy over :data:`WINDOW_S`) below which detected speech
#: is called steady, dB. Chosen here between the measured single-talker and babble values above.
STEADY_DEPTH_DB = 4.5
#: Frames count towards a steady span from this speech probability on, below the decision
#: threshold: a crowd scores 0.3-0.9 on the neural detector between the lines, noise and
#: music under 0.1 (measured on the demo programmes), so crowds are marked even where the
#: detector does not call them speech. Chosen here.
SPEECH_LIKE_P = 0.2
#: A frame is "near the threshold" when its probability is within this distance of it.
NEAR_THRESHOLD = 0.2
#: Least flagged time in a reported span, seconds.
MIN_SPAN_S = 2.0
#: Longest interruption merged into one span, seconds: steady spans bridge the dialogue
#: lines of a crowd scene (lines run 1-5 s) so that the whole scene is one region.
STEADY_MERGE_S = 5.0
UNCERTAIN_MERGE_S = 0.5

_REASONS: dict[SpanKind, str] = {
    "steady": "steady speech-like sound without the pauses of one talker (crowd or noise)",
    "uncertain": "speech probability stays near the decision threshold",
}
_NOTE = re.compile(r"^low confidence (\d+\.\d{2})-(\d+\.\d{2}) s: (.+)$")


@dataclass(frozen=True)
class LowConfidenceSpan:
    """A stretch where detected speech may not be dialogue (``steady``) or the score hovers (``uncertain``)."""

    start_s: float
    end_s: float
    kind: SpanKind


def moving_mean(x: FloatArray, width: int) -> FloatArray:
    """Centred moving mean of ``x`` over ``width`` samples (shrinking at the edges), float64."""
    n = x.size
    c = np.concatenate(([0.0], np.cumsum(x, dtype=np.float64)))
    half, ahead = width // 2, width - width // 2
    # Frame i averages c[min(i + ahead, n)] - c[max(i - half, 0)] over that many frames,
    # written with slices instead of index arrays: the same sums and divisions in a third of
    # the memory (these tracks span the whole programme).
    out = np.empty(n)
    whole_end = min(max(n - ahead + 1, 0), n)  # frames before this one end their window inside
    out[:whole_end] = c[ahead : ahead + whole_end]
    out[whole_end:] = c[n]
    whole_start = min(half, n)  # frames from this one on start their window inside
    out[:whole_start] -= c[0]
    out[whole_start:] -= c[: n - whole_start]
    if whole_end > whole_start:
        out[whole_start:whole_end] /= width
    edge = np.concatenate((np.arange(whole_start), np.arange(max(whole_end, whole_start), n)))
    out[edge] /= np.maximum(np.minimum(edge + ahead, n) - np.maximum(edge - half, 0), 1)
    return out


def envelope_depth_db(energy_db: FloatArray, *, frame_s: float = ANALYSIS_FRAME_S) -> FloatArray:
    """Standard deviation of the frame log energy over a centred :data:`WINDOW_S` window, dB per frame."""
    width = max(nearest_int(WINDOW_S / frame_s), 1)
    e = np.asarray(energy_db, dtype=np.float64)
    mean = moving_mean(e, width)
    var = moving_mean(e * e, width) - mean * mean
    return np.sqrt(np.maximum(var, 0.0))


def _spans(flag: BoolArray, kind: SpanKind, merge_s: float, frame_s: float) -> list[LowConfidenceSpan]:
    padded = np.concatenate(([0], flag.astype(np.int8), [0]))
    edges = np.flatnonzero(np.diff(padded))
    starts, ends = edges[::2], edges[1::2]
    if starts.size == 0:
        return []
    # Merge runs separated by short interruptions; keep spans with enough flagged time.
    keep = (starts[1:] - ends[:-1]) >= nearest_int(merge_s / frame_s)
    starts = starts[np.concatenate(([True], keep))]
    ends = ends[np.concatenate((keep, [True]))]
    flagged = np.concatenate(([0], np.cumsum(flag, dtype=np.int64)))
    long_enough = (flagged[ends] - flagged[starts]) >= nearest_int(MIN_SPAN_S / frame_s)
    return [
        LowConfidenceSpan(round(float(a * frame_s), 2), round(float(b * frame_s), 2), kind)
        for a, b in zip(starts[long_enough], ends[long_enough])
    ]


def low_confidence_spans(
    probability: FloatArray,
    energy_db: FloatArray,
    *,
    threshold: float,
    frame_s: float = ANALYSIS_FRAME_S,
) -> tuple[LowConfidenceSpan, ...]:
    """Steady and uncertain spans of a speech track, in time order.

    Parameters
    ----------
    probability : ndarray
        Speech probability ``(n,)`` per frame.
    energy_db : ndarray
        Frame energy ``(n,)`` in the detector's envelope band, dB (any reference).
    threshold : float
        The probability at which the detector's mask switches to speech.
    """
    p = np.asarray(probability, dtype=np.float64)
    if p.size == 0:
        return ()
    width = max(nearest_int(WINDOW_S / frame_s), 1)
    steady = (p >= SPEECH_LIKE_P) & (envelope_depth_db(energy_db, frame_s=frame_s) < STEADY_DEPTH_DB)
    near = moving_mean((np.abs(p - threshold) < NEAR_THRESHOLD).astype(np.float64), width) > 0.5
    spans = _spans(steady, "steady", STEADY_MERGE_S, frame_s) + _spans(near, "uncertain", UNCERTAIN_MERGE_S, frame_s)
    return tuple(sorted(spans, key=lambda s: (s.start_s, s.kind)))


def span_note(span: LowConfidenceSpan) -> str:
    """The sentence that records a span in ``SpeechActivity.notes``."""
    return f"low confidence {span.start_s:.2f}-{span.end_s:.2f} s: {_REASONS[span.kind]}"


def spans_from_notes(notes: tuple[str, ...]) -> tuple[LowConfidenceSpan, ...]:
    """The spans recorded by :func:`span_note` among ``notes`` (other notes are ignored)."""
    by_reason = {v: k for k, v in _REASONS.items()}
    out = []
    for note in notes:
        m = _NOTE.match(note)
        if m and m.group(3) in by_reason:
            out.append(LowConfidenceSpan(float(m.group(1)), float(m.group(2)), by_reason[m.group(3)]))
    return tuple(out)


def span_mask(spans: tuple[LowConfidenceSpan, ...], n_frames: int, kind: SpanKind, *, frame_s: float = ANALYSIS_FRAME_S) -> BoolArray:
    """Frames ``(n_frames,)`` inside spans of ``kind``."""
    mask = np.zeros(n_frames, dtype=bool)
    for s in spans:
        if s.kind == kind:
            mask[max(nearest_int(s.start_s / frame_s), 0) : min(nearest_int(s.end_s / frame_s), n_frames)] = True
    return mask
