"""Per-sample gain automation from a plan's gain events, evaluated block by block.

Each :class:`~planner.model.GainEvent` contributes a gain in dB shaped by a raised-cosine
ramp (a Hann half-window): ``w = (1 - cos(pi x)) / 2`` for ``x`` going 0 -> 1 across the ramp in,
``w = 1`` from ``start_s`` to ``end_s``, and the mirror image across the ramp out. The ramp is
applied in the dB domain (``gain_db(t) = event_gain_db * w(t)``), so a fade moves at a
steady rate in level, as a fader ride does (common practice). The curve and its first
derivative are continuous (no step, no corner), which is what keeps its spectrum compact:
the largest sample-to-sample change in dB is ``abs(gain_db) * pi / (2 * ramp_samples)``.

Outside every event's ramps the gain is exactly ``1.0`` (float32), so unity-gain samples
pass bit for bit. Where two events overlap, the deepest background cut (or the largest
dialogue lift) wins at each sample: a minimum (maximum) of continuous curves is continuous,
and no sample is ever moved further than some event planned.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Literal

import numpy as np

from planner.errors import PlanFileError
from planner.model import GainEvent

EnvelopeTarget = Literal["background", "dialogue"]


class GainEnvelope:
    """Gain curve of one target (background or dialogue) for a plan's events.

    Parameters
    ----------
    events : sequence of GainEvent
        The plan's events; events with a zero gain for ``target`` are ignored.
    sample_rate_hz : int
        Rate of the audio the curve is applied to, Hz.
    target : {"background", "dialogue"}
        Which of the event's gains this curve carries.
    duration_s : float, optional
        Programme length, seconds; lets a ramp out of zero length end an event at the end.

    Raises
    ------
    PlanFileError
        If an event's gain has the wrong sign for its target, its span is reversed, or a
        ramp of zero length lies inside the programme.
    """

    def __init__(
        self,
        events: Sequence[GainEvent],
        sample_rate_hz: int,
        target: EnvelopeTarget,
        *,
        duration_s: float | None = None,
    ) -> None:
        if target not in ("background", "dialogue"):
            raise ValueError(f"target={target!r} must be one of background, dialogue; pass one of those")
        if sample_rate_hz <= 0:
            raise ValueError(f"sample_rate_hz={sample_rate_hz!r} must be positive; pass the audio's rate")
        self.sample_rate_hz = int(sample_rate_hz)
        self.target: EnvelopeTarget = target
        rows = []
        for ev in sorted(events, key=lambda e: (e.start_s, e.event_id)):
            gain_db = ev.background_gain_db if target == "background" else ev.dialogue_gain_db
            if (target == "background" and gain_db > 0.0) or (target == "dialogue" and gain_db < 0.0):
                sign = "<= 0" if target == "background" else ">= 0"
                raise PlanFileError(f"{target}_gain_db={gain_db!r} must be {sign}; fix the plan", event_id=ev.event_id)
            if not ev.end_s >= ev.start_s:
                raise PlanFileError(f"end_s={ev.end_s!r} is before start_s={ev.start_s!r}; fix the plan", event_id=ev.event_id)
            # A ramp of zero length is a step, allowed only where the programme starts or ends.
            edge_s = 1.0 / sample_rate_hz
            bad_in = not ev.ramp_in_ms > 0.0 and ev.start_s > edge_s
            bad_out = not ev.ramp_out_ms > 0.0 and (duration_s is None or ev.end_s < duration_s - edge_s)
            if bad_in or bad_out or ev.ramp_in_ms < 0.0 or ev.ramp_out_ms < 0.0:
                raise PlanFileError(
                    f"ramp_in_ms={ev.ramp_in_ms!r}, ramp_out_ms={ev.ramp_out_ms!r}: a ramp may be 0 only at the "
                    "programme's start or end (elsewhere it is a click); give it a length > 0",
                    event_id=ev.event_id,
                )
            if gain_db == 0.0:
                continue
            ramp_in_s = ev.ramp_in_ms / 1000.0
            ramp_out_s = ev.ramp_out_ms / 1000.0
            rows.append((ev.start_s - ramp_in_s, ev.start_s, ev.end_s, ev.end_s + ramp_out_s, gain_db))
        table = np.array(rows, dtype=np.float64).reshape(-1, 5)
        self._t0, self._t1, self._t2, self._t3, self._gain_db = table.T
        fs = float(self.sample_rate_hz)
        # First and one-past-last sample where w > 0 can occur (w is 0 at t0 and t3 exactly).
        self._first = np.floor(self._t0 * fs).astype(np.int64)
        self._stop = np.floor(self._t3 * fs).astype(np.int64) + 2

    @property
    def n_events(self) -> int:
        """Number of events that move this target."""
        return int(self._gain_db.shape[0])

    def spans(self) -> tuple[tuple[int, int], ...]:
        """Merged sample spans ``(first, stop)`` outside which the gain is exactly 1.0, in time order."""
        out: list[tuple[int, int]] = []
        for a, b in sorted(zip(self._first.tolist(), self._stop.tolist())):
            a = max(a, 0)
            if out and a <= out[-1][1]:
                out[-1] = (out[-1][0], max(out[-1][1], b))
            elif b > a:
                out.append((a, b))
        return tuple(out)

    def touches(self, start_frame: int, n: int) -> bool:
        """Whether any event acts on samples ``start_frame .. start_frame + n - 1`` (else the gain there is exactly 1.0)."""
        return bool(self._hits(start_frame, n).size)

    def _hits(self, start_frame: int, n: int) -> np.ndarray:
        """Indices of the events acting on samples ``start_frame .. start_frame + n - 1``."""
        return np.flatnonzero((self._first < start_frame + n) & (self._stop > start_frame))

    def block_db(self, start_frame: int, n: int) -> np.ndarray:
        """Gain in dB for samples ``start_frame .. start_frame + n - 1``, float64 ``(n,)``; 0.0 outside events."""
        return self._block_db(start_frame, n)[0]

    def _block_db(self, start_frame: int, n: int) -> tuple[np.ndarray, int, int]:
        """The dB gain and the sub-range ``[lo, hi)`` of the block that any event touches.

        Each event's curve is evaluated on its ramps only: between them ``w`` is exactly 1, so
        the gain there is the event's own (the same values as evaluating ``w`` everywhere).
        """
        out = np.zeros(n, dtype=np.float64)
        hit = self._hits(start_frame, n)
        if hit.size == 0:
            return out, 0, 0
        fs = float(self.sample_rate_hz)
        combine = np.minimum if self.target == "background" else np.maximum
        lo_all, hi_all = n, 0
        for k in hit.tolist():
            lo = max(int(self._first[k]) - start_frame, 0)
            hi = min(int(self._stop[k]) - start_frame, n)
            t0, t1, t2, t3, gain_db = (float(v[k]) for v in (self._t0, self._t1, self._t2, self._t3, self._gain_db))
            # samples lo..rise-1 have t < t1 (ramp in), fall..hi-1 have t > t2 (ramp out)
            rise = _first_at(start_frame, lo, hi, fs, t1, after=False)
            fall = _first_at(start_frame, rise, hi, fs, t2, after=True)
            if rise > lo:
                t = (start_frame + np.arange(lo, rise, dtype=np.float64)) / fs
                out[lo:rise] = combine(out[lo:rise], gain_db * _ramp_in(t, t0, t1))
            if fall > rise:
                out[rise:fall] = combine(out[rise:fall], gain_db)
            if hi > fall:
                t = (start_frame + np.arange(fall, hi, dtype=np.float64)) / fs
                out[fall:hi] = combine(out[fall:hi], gain_db * _ramp_out(t, t2, t3))
            lo_all, hi_all = min(lo_all, lo), max(hi_all, hi)
        return out, lo_all, hi_all

    def block(self, start_frame: int, n: int) -> np.ndarray:
        """Linear gain for samples ``start_frame .. start_frame + n - 1``, float32 ``(n,)``.

        Exactly 1.0 wherever no event acts (``10 ** 0`` is exactly 1), so those samples
        multiply through unchanged.
        """
        db, lo, hi = self._block_db(start_frame, n)
        gain = np.ones(n, dtype=np.float32)
        if hi > lo:
            # one power per run of equal values (a held gain is one run; every ramp sample its own)
            part = db[lo:hi]
            starts = np.concatenate([[0], np.flatnonzero(part[1:] != part[:-1]) + 1])
            lengths = np.diff(np.append(starts, part.size))
            gain[lo:hi] = np.repeat(np.power(10.0, part[starts] / 20.0), lengths)
        return gain

    def max_step_db(self) -> float:
        """Largest possible change of the dB gain between adjacent samples (raised-cosine slope bound)."""
        if self.n_events == 0:
            return 0.0
        ramps = np.stack([self._t1 - self._t0, self._t3 - self._t2])
        ramp_samples = np.where(ramps > 0.0, ramps, np.inf).min(axis=0) * self.sample_rate_hz
        # d/dx of (1 - cos(pi x))/2 peaks at pi/2; one sample is 1/ramp_samples of x.
        return float(np.max(np.abs(self._gain_db) * math.pi / (2.0 * np.maximum(ramp_samples, 1.0))))


def _first_at(start_frame: int, lo: int, hi: int, fs: float, limit_s: float, *, after: bool) -> int:
    """First sample index in ``[lo, hi]`` whose time ``(start_frame + i) / fs`` is at least
    ``limit_s`` (past it, when ``after``), ``hi`` if none; the same float arithmetic as the curve."""
    while lo < hi:
        mid = (lo + hi) // 2
        t = (start_frame + float(mid)) / fs
        if t > limit_s or (t == limit_s and not after):
            hi = mid
        else:
            lo = mid + 1
    return lo


def _ramp_in(t: np.ndarray, t0: float, t1: float) -> np.ndarray:
    """Raised-cosine ramp in over [t0, t1] at times ``t < t1`` (a zero-length ramp is a plain edge: 0)."""
    # cos(0) = 1 exactly in IEEE arithmetic, so w is exactly 0 at t0.
    if not t1 > t0:
        return np.zeros_like(t)
    return 0.5 - 0.5 * np.cos(np.pi * np.clip((t - t0) / (t1 - t0), 0.0, 1.0))


def _ramp_out(t: np.ndarray, t2: float, t3: float) -> np.ndarray:
    """Raised-cosine ramp out over [t2, t3] at times ``t > t2`` (zero length: 0); exactly 0 at t3 (cos(pi) = -1)."""
    if not t3 > t2:
        return np.zeros_like(t)
    return 0.5 + 0.5 * np.cos(np.pi * np.clip((t - t2) / (t3 - t2), 0.0, 1.0))
