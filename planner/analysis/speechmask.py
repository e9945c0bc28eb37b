"""From a speech probability track to a speech mask: hysteresis, gap filling, runs.

Numpy only, so that the subtitle checks and the planner can use the mask rules without
loading a speech detector (:mod:`planner.analysis.vad` uses them for its own mask).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner._typing import BoolArray, FloatArray
from planner.errors import SettingsError
from planner.units import ANALYSIS_FRAME_S, nearest_int


@dataclass(frozen=True)
class Hangover:
    """Hysteresis and duration rules that turn a probability track into a speech mask.

    Defaults follow the upstream Silero segmenter (CHECKS.md section 8: threshold 0.5,
    release ``threshold - 0.15``, minimum speech 250 ms, padding 30 ms) except the minimum
    silence: upstream closes gaps under 100 ms; here gaps under 300 ms are closed, because
    pauses between words and at commas inside one spoken line run to about 100-300 ms (from
    memory; measured 40-190 ms on the espeak-ng demo lines, with full stops up to ~460 ms).

    Parameters
    ----------
    threshold : float
        Probability at or above which speech starts.
    release : float
        Probability below which speech ends (hysteresis; ``release <= threshold``).
    min_speech_s, min_silence_s, pad_s : float
        Shortest speech run kept, shortest silence kept, padding added to each side, seconds.
    """

    threshold: float = 0.5
    release: float = 0.35
    min_speech_s: float = 0.25
    min_silence_s: float = 0.30
    pad_s: float = 0.03

    def __post_init__(self) -> None:
        if not (0.0 < self.release <= self.threshold < 1.0):
            raise SettingsError(
                f"hangover thresholds release={self.release}, threshold={self.threshold} must satisfy "
                "0 < release <= threshold < 1; pass values in that order"
            )
        for name in ("min_speech_s", "min_silence_s", "pad_s"):
            if not (0.0 <= getattr(self, name) <= 5.0):
                raise SettingsError(f"{name}={getattr(self, name)!r} must be between 0 and 5 s; pass a value in that range")

    def apply(self, probability: FloatArray, frame_s: float = ANALYSIS_FRAME_S) -> BoolArray:
        """Speech mask ``(n,)`` bool from a probability track ``(n,)`` at ``frame_s`` seconds."""
        mask = _hysteresis(np.asarray(probability, dtype=np.float32), self.threshold, self.release)
        mask = fill_short_gaps(mask, nearest_int(self.min_silence_s / frame_s))
        mask = _drop_short_runs(mask, nearest_int(self.min_speech_s / frame_s))
        return _dilate(mask, nearest_int(self.pad_s / frame_s))


def runs(mask: BoolArray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (exclusive) frame indices of the True runs of ``mask``."""
    padded = np.zeros(mask.size + 2, dtype=np.int8)
    padded[1:-1] = mask
    edges = np.flatnonzero(np.diff(padded))
    return edges[::2], edges[1::2]


def _from_runs(n: int, starts: np.ndarray, ends: np.ndarray) -> BoolArray:
    # int32 counts, summed in place: the track spans the whole programme (at most 2**31 frames)
    delta = np.zeros(n + 1, dtype=np.int32)
    np.add.at(delta, starts, 1)
    np.add.at(delta, ends, -1)
    np.cumsum(delta, out=delta)
    return delta[:-1] > 0


def _hysteresis(p: np.ndarray, on: float, off: float) -> BoolArray:
    # Each frame takes the state set by the most recent frame that was decisive
    # (>= on starts speech, < off ends it); frames in between keep that state.
    starts = p >= on
    decisive = p < off
    decisive |= starts
    last = np.arange(p.size, dtype=np.int32)  # frame indices fit 32 bits (2**31 frames: 248 days)
    last[~decisive] = -1
    np.maximum.accumulate(last, out=last)
    out = starts[last]  # where no frame was decisive yet, last is -1 and the result is cleared below
    out &= last >= 0
    return out


def fill_short_gaps(mask: BoolArray, min_frames: int) -> BoolArray:
    """``mask`` with False runs shorter than ``min_frames`` between True runs set True."""
    starts, ends = runs(mask)
    if starts.size < 2 or min_frames <= 0:
        return mask
    keep = (starts[1:] - ends[:-1]) >= min_frames
    return _from_runs(mask.size, starts[np.concatenate(([True], keep))], ends[np.concatenate((keep, [True]))])


def _drop_short_runs(mask: BoolArray, min_frames: int) -> BoolArray:
    starts, ends = runs(mask)
    keep = (ends - starts) >= min_frames
    return _from_runs(mask.size, starts[keep], ends[keep])


def _dilate(mask: BoolArray, pad_frames: int) -> BoolArray:
    starts, ends = runs(mask)
    return _from_runs(mask.size, np.maximum(starts - pad_frames, 0), np.minimum(ends + pad_frames, mask.size))
