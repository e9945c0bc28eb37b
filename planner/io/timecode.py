"""SMPTE ST 12-1 timecode: frame counts, ``HH:MM:SS:FF`` strings and seconds.

All arithmetic is exact (:class:`fractions.Fraction`): the NTSC-family rates are
``24000/1001``, ``30000/1001`` and ``60000/1001`` frames per second, never 23.976 or
29.97 as floats. A *frame count* is the 0-based number of a frame from ``00:00:00:00``;
a timecode string labels one frame. Time in seconds converts to the *nearest* frame,
halves rounding up, the same rule as :mod:`planner.units`.

Drop-frame (ST 12-1, "drop-frame compensation") keeps 29.97 and 59.94 timecode close to
the clock by skipping frame *numbers* (never frames): 2 (29.97) or 4 (59.94) numbers at
the start of every minute except minutes 00, 10, 20, 30, 40 and 50. Drop-frame strings
use ``;`` before the frames field, non-drop ``:``. On input, a drop-frame rate also takes
``:`` (the generic separator, as in the default programme start ``00:00:00:00``), but a
``;`` with a non-drop rate is refused, since it says the timecode was counted another way.

A programme-start offset (``start="10:00:00:00"``) is the timecode of the programme's
first frame (time 0 s); it is added once in :func:`seconds_to_timecode` and taken off once
in :func:`timecode_to_seconds`. Timecode does not wrap at midnight here: a frame count
beyond ``23:59:59:FF`` is an error, so every conversion is invertible.
"""

from __future__ import annotations

import functools
import math
import numbers
import re
from dataclasses import dataclass
from fractions import Fraction

from planner.errors import InputError, SettingsError

#: Exact rate and nominal (counting) rate of each frame-rate name users type (ST 12-1);
#: the names are those of ``planner.settings.FRAME_RATES``.
_RATES: dict[str, tuple[Fraction, int]] = {
    "23.976": (Fraction(24000, 1001), 24),
    "24": (Fraction(24), 24),
    "25": (Fraction(25), 25),
    "29.97": (Fraction(30000, 1001), 30),
    "30": (Fraction(30), 30),
    "50": (Fraction(50), 50),
    "59.94": (Fraction(60000, 1001), 60),
}

#: Frame numbers skipped at the start of each non-tenth minute in drop-frame counting,
#: by nominal rate (ST 12-1: 00-01 at 29.97, 00-03 at 59.94).
_DROPPED_PER_MINUTE = {30: 2, 60: 4}

_TIMECODE_RE = re.compile(r"(\d{2}):(\d{2}):(\d{2})([:;])(\d{2})")


@dataclass(frozen=True)
class FrameRate:
    """A video frame rate as timecode counts it.

    Attributes
    ----------
    name : str
        The name users type, one of ``planner.settings.FRAME_RATES`` (e.g. ``"29.97"``).
    fps : Fraction
        Exact frames per second (``30000/1001`` for ``"29.97"``).
    drop_frame : bool
        Whether timecode labels skip frame numbers (29.97 and 59.94 only).
    nominal : int
        Frames counted per timecode second (the frames field runs ``0 .. nominal-1``).
    """

    name: str
    fps: Fraction
    drop_frame: bool
    nominal: int

    def __post_init__(self) -> None:
        if self.name not in _RATES:
            raise SettingsError(f"fps={self.name!r} must be one of {', '.join(_RATES)}; pass one of those")
        if (self.fps, self.nominal) != _RATES[self.name]:
            fps, nominal = _RATES[self.name]
            message = f"fps {self.name} is exactly {fps} with nominal {nominal}; use frame_rate({self.name!r})"
            raise SettingsError(message)
        if self.drop_frame and self.nominal not in _DROPPED_PER_MINUTE:
            raise SettingsError(
                f"drop_frame=True needs fps 29.97 or 59.94, not fps={self.name}; pass drop_frame=False or a DF rate"
            )

    @property
    def frame_s(self) -> Fraction:
        """Duration of one frame in seconds, exact."""
        return 1 / self.fps

    @property
    def dropped_per_minute(self) -> int:
        """Frame numbers skipped at the start of each non-tenth minute (0 for non-drop)."""
        return _DROPPED_PER_MINUTE[self.nominal] if self.drop_frame else 0

    @property
    def frames_per_ten_minutes(self) -> int:
        """Frames labelled in ten minutes of timecode (17982 at 29.97 DF)."""
        return self.nominal * 600 - 9 * self.dropped_per_minute

    @property
    def frames_per_day(self) -> int:
        """Frames labelled from ``00:00:00:00`` to ``23:59:59:FF`` inclusive."""
        return 144 * self.frames_per_ten_minutes

    @property
    def separator(self) -> str:
        """``";"`` before the frames field for drop-frame, ``":"`` otherwise."""
        return ";" if self.drop_frame else ":"


def frame_rate(name: str, drop_frame: bool = False) -> FrameRate:
    """The :class:`FrameRate` for a rate name.

    Parameters
    ----------
    name : str
        One of ``"23.976"``, ``"24"``, ``"25"``, ``"29.97"``, ``"30"``, ``"50"``, ``"59.94"``.
    drop_frame : bool
        Drop-frame counting; allowed for ``"29.97"`` and ``"59.94"`` only.

    Raises
    ------
    SettingsError
        For an unknown name (the message lists the valid ones) or drop-frame at another rate.
    """
    if name not in _RATES:
        raise SettingsError(f"fps={name!r} must be one of {', '.join(_RATES)}; pass one of those")
    fps, nominal = _RATES[name]
    return FrameRate(name=name, fps=fps, drop_frame=bool(drop_frame), nominal=nominal)


def frames_to_timecode(frames: int, rate: FrameRate) -> str:
    """Timecode label of a 0-based frame count.

    Parameters
    ----------
    frames : int
        Frames since ``00:00:00:00``, ``0 <= frames < rate.frames_per_day``.
    rate : FrameRate

    Raises
    ------
    InputError
        If ``frames`` is not a whole number or lies outside one day of timecode.
    """
    if isinstance(frames, bool) or not isinstance(frames, numbers.Integral):
        raise InputError(f"frames={frames!r} must be a whole number of frames; pass an int")
    frames = int(frames)
    if not 0 <= frames < rate.frames_per_day:
        raise InputError(
            f"frames={frames} is outside 00:00:00:00 .. 23:59:59 at {rate.name} fps "
            f"(0 .. {rate.frames_per_day - 1}); timecode does not wrap here, pass a frame count within one day"
        )
    drop = rate.dropped_per_minute
    if drop:
        # Re-insert the skipped numbers: none in the first minute of each ten-minute block,
        # `drop` at the start of each of the nine following minutes.
        per_minute = rate.nominal * 60 - drop
        blocks, rest = divmod(frames, rate.frames_per_ten_minutes)
        skipped = 9 * drop * blocks
        if rest >= drop:
            skipped += drop * ((rest - drop) // per_minute)
        frames += skipped
    total_s, ff = divmod(frames, rate.nominal)
    hh, rest_s = divmod(total_s, 3600)
    mm, ss = divmod(rest_s, 60)
    return f"{hh:02d}:{mm:02d}:{ss:02d}{rate.separator}{ff:02d}"


def timecode_to_frames(tc: str, rate: FrameRate) -> int:
    """0-based frame count of a timecode label (inverse of :func:`frames_to_timecode`).

    Parameters
    ----------
    tc : str
        ``HH:MM:SS:FF``, or ``HH:MM:SS;FF`` for a drop-frame rate.
    rate : FrameRate

    Raises
    ------
    InputError
        For a malformed string, a field out of range (hours 00-23, minutes and seconds
        00-59, frames below the nominal rate), ``;`` with a non-drop rate, or a frame
        number that drop-frame counting skips.
    """
    if not isinstance(tc, str):
        raise InputError(f"timecode {tc!r} must be text such as '01:00:00:00'; pass a string")
    m = _TIMECODE_RE.fullmatch(tc)
    if m is None:
        raise InputError(
            f"timecode {tc!r} is not HH:MM:SS:FF (HH:MM:SS;FF for drop-frame); write two digits per field, "
            "e.g. '10:00:00:00'"
        )
    hh, mm, ss, sep, ff = int(m[1]), int(m[2]), int(m[3]), m[4], int(m[5])
    if hh > 23 or mm > 59 or ss > 59:
        raise InputError(f"timecode {tc!r} has a field out of range; hours run 00-23, minutes and seconds 00-59")
    if ff >= rate.nominal:
        raise InputError(
            f"timecode {tc!r} has frames {ff:02d}, but {rate.name} fps counts frames 00-{rate.nominal - 1:02d}; "
            "check the frame rate or the timecode"
        )
    if sep == ";" and not rate.drop_frame:
        raise InputError(
            f"timecode {tc!r} is drop-frame (';') but the rate is {rate.name} non-drop; "
            "pass drop-frame at 29.97/59.94 or write ':' before the frames"
        )
    drop = rate.dropped_per_minute
    minutes = 60 * hh + mm
    if drop and ss == 0 and ff < drop and mm % 10 != 0:
        raise InputError(
            f"timecode {tc!r} does not exist in drop-frame counting: frame numbers 00-{drop - 1:02d} are skipped "
            f"at the start of minute {mm:02d}; the next label is {hh:02d}:{mm:02d}:00;{drop:02d}"
        )
    # ST 12-1 drop-frame: `drop` numbers skipped in every minute that is not a multiple of ten.
    return rate.nominal * (3600 * hh + 60 * mm + ss) + ff - drop * (minutes - minutes // 10)


def _exact_seconds(t_s: float | Fraction | int) -> Fraction:
    """A time as an exact fraction: ints and Fractions as they are, floats by their shortest
    decimal form (so 0.06 means 3/50, the value that was written, not the binary neighbour)."""
    if isinstance(t_s, bool) or not isinstance(t_s, numbers.Real):
        raise InputError(f"time {t_s!r} must be a number of seconds; pass a float")
    if isinstance(t_s, numbers.Rational):
        return Fraction(int(t_s.numerator), int(t_s.denominator))
    value = float(t_s)
    if not math.isfinite(value):
        raise InputError(f"time {t_s!r} s is not finite; pass a number of seconds")
    return Fraction(repr(value))


@functools.lru_cache(maxsize=1 << 16)  # exports convert each event's times several times
def seconds_to_video_frames(t_s: float | Fraction, rate: FrameRate) -> int:
    """Nearest video frame to a time, halves up (``floor(t * fps + 1/2)``, exact).

    Parameters
    ----------
    t_s : float or Fraction
        Time in seconds (may be negative; the result then is too); a Fraction is taken exactly.
    rate : FrameRate
    """
    return math.floor(_exact_seconds(t_s) * rate.fps + Fraction(1, 2))


def seconds_to_timecode(t_s: float | Fraction, rate: FrameRate, *, start: str = "00:00:00:00") -> str:
    """Timecode of the frame nearest to a programme time.

    Parameters
    ----------
    t_s : float or Fraction
        Seconds from the programme's first frame.
    rate : FrameRate
    start : str
        Timecode of the programme's first frame (e.g. ``"10:00:00:00"``), added once.

    Raises
    ------
    InputError
        For a malformed ``start`` or a result outside one day of timecode.
    """
    origin = timecode_to_frames(start, rate)
    frames = origin + seconds_to_video_frames(t_s, rate)
    if not 0 <= frames < rate.frames_per_day:
        raise InputError(
            f"time {t_s!r} s from programme start {start} falls outside 00:00:00:00 .. 23:59:59; "
            "pass a time within the day or an earlier programme start"
        )
    return frames_to_timecode(frames, rate)


def timecode_to_seconds(tc: str, rate: FrameRate, *, start: str = "00:00:00:00") -> float:
    """Programme time in seconds of a timecode label (start of that frame).

    Parameters
    ----------
    tc : str
        The timecode, e.g. ``"10:00:01:12"``.
    rate : FrameRate
    start : str
        Timecode of the programme's first frame, taken off once; a ``tc`` before it gives
        a negative time.

    Raises
    ------
    InputError
        For a malformed ``tc`` or ``start`` (see :func:`timecode_to_frames`).
    """
    frames = timecode_to_frames(tc, rate) - timecode_to_frames(start, rate)
    return float(frames / rate.fps)
