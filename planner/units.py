"""Every conversion between seconds, audio samples and analysis frames.

One rounding rule everywhere: a time converts to the *nearest* sample or frame, halves
rounding up (``floor(x + 0.5)``). Timecode (video frames, SMPTE) lives in
:mod:`planner.io.timecode`, which uses the same rule.
"""

from __future__ import annotations

import math

import numpy as np

#: Resolution of every per-frame analysis track (speech probability, band levels), seconds.
ANALYSIS_FRAME_S = 0.01


def nearest_int(x: float) -> int:
    """Round to the nearest integer, halves up (the project's one rounding rule)."""
    return math.floor(x + 0.5)


def seconds_to_samples(t_s: float, sample_rate_hz: float) -> int:
    """Nearest sample index for a time in seconds."""
    return nearest_int(t_s * sample_rate_hz)


def samples_to_seconds(n: int, sample_rate_hz: float) -> float:
    """Time in seconds of sample index ``n``."""
    return n / sample_rate_hz


def seconds_to_frames(t_s: float, frame_s: float = ANALYSIS_FRAME_S) -> int:
    """Nearest analysis-frame index for a time in seconds."""
    return nearest_int(t_s / frame_s)


def frames_to_seconds(i: int | np.ndarray, frame_s: float = ANALYSIS_FRAME_S) -> float | np.ndarray:
    """Start time in seconds of analysis frame ``i``."""
    return i * frame_s


def db_to_gain(db: float | np.ndarray) -> float | np.ndarray:
    """Amplitude gain for a level change in dB."""
    return 10.0 ** (np.asarray(db) / 20.0) if isinstance(db, np.ndarray) else 10.0 ** (db / 20.0)


def power_to_db(power: float | np.ndarray, floor_db: float = -200.0) -> float | np.ndarray:
    """Power (mean square) to dB, clamped at ``floor_db`` for zero power."""
    p = np.maximum(np.asarray(power, dtype=np.float64), 10.0 ** (floor_db / 10.0))
    out = 10.0 * np.log10(p)
    return float(out) if out.ndim == 0 else out
