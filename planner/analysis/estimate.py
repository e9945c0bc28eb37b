"""Speech and background of one cue from the final mix alone (the archive case).

Without stems, the background under a cue is estimated per feature (the 18 SII band powers
and the K-weighted and flat powers of the listener's loudspeaker sum, see
:mod:`planner.analysis.features`) by independent published estimators, and the speech is the
rest of the measured power ``T`` over the cue's speech frames:

``tracker``
    Minimum statistics (Martin 2001, :mod:`planner.analysis.minstats`) run through the whole
    programme; its mean over the cue's speech frames. Mono and 5.1: on the listener power.
    Stereo mid/side (also the 5.1 fold-down): on the dialogue-carrying mid ``M`` only, since
    that part's background is the one hidden under the dialogue while the side ``C`` is
    measured: ``N = a tracked + b C`` (:func:`tracked_view` says why not on a 5.1 centre). Where the cue has speech-free context, the tracker's own
    bias for this background (its mean over the context frames against the context's measured
    power of what it follows) is divided out.
``context``
    The mean listener power over the speech-free frames in and around the cue (up to
    :data:`CONTEXT_S` either side of the span).
``spatial``
    Dialogue is mixed to the centre. The listener power is ``T = a M + b C`` with ``M`` the
    dialogue-carrying part and ``C`` the speech-free part: stereo mid ``(L+R)/2`` and side
    ``(L-R)/2`` (a = b = 2); 5.1 centre against the other channels weighted as in the listener
    sum (a = b = 1). With ``r`` the background's ratio ``M / C`` measured over the context,
    the background heard is ``C (a r + b)``. Without context ``r`` is assumed: 1 for stereo
    (uncorrelated background, so the side power is a floor), 0 for 5.1 (no background in the
    centre). This is the inter-channel similarity argument of Avendano and Jot (2004) on band
    powers.
``wada``
    WADA-SNR (Kim and Stern 2008, :mod:`planner.analysis.wada`) of the detection signal over
    the cue's speech samples: a blind broadband estimate of the flat background power, which
    moves the combined background of every feature by the same factor.

Combination: each estimate ``N_e`` comes with an uncertainty ``u_e`` in power units, the
relative error ``d_e`` times the power the estimator has to infer rather than measure: all
of it for the context and the tracker of the listener power, only the part hidden under the
dialogue (``N - b C``) for the spatial estimate and the tracker of the mid, plus 0.03 of the
measured ``b C``. ``ln N = sum(ln N_e / e_e^2) / sum(1 / e_e^2)`` with ``e_e = u_e(N) / N``
(inverse-variance weighting of log-normal errors; an estimate that infers only the hidden
part keeps the speech ``T - N`` accurate when it is small against the background). The
errors are evaluated at the combined ``N``, iterated from an equal-weight start, not at each
estimate's own value: an error that grows with the estimate's own hidden part would give the
lower estimates the larger weights and read the background low, hence the speech and the
SII high, most where the estimators disagree (a tonal bed whose centre/side ratio moves from
chord to chord); this is the variance function evaluated at the fitted mean of iteratively
reweighted least squares (McCullagh and Nelder 1989). Relative errors, our choice: tracker 0.25 (0.55 uncalibrated), context and
spatial 0.1, each plus half the log-ratio of what it relies on between the speech-free
frames before and after the cue (tracker: its calibration; context: the power; spatial: the
ratio ``r``; 0.3 when only one side has context, the tracker excepted), plus 0.3 x the
missing share of :data:`CONTEXT_FULL_FRAMES`; tracker and context also plus ``|ln(C / C_ctx)|``,
the change of the speech-free part between the context and the cue (a ride, ducking, a new
scene: the background's own level change, seen where a spatial structure exists); WADA 0.5. An estimate more than two of its
errors away from the combination is down-weighted (Huber's M-estimator). The WADA factor is the ratio of the flat background
with and without the WADA estimate in that weighting.

Confidence (0..1) = agreement x context x speech probability x layout: agreement
``1 / (1 + (s / 3 dB)^2)`` with ``s`` the weighted spread of the estimators'
speech-to-background ratios at the K-weighted feature; context ``0.6 + 0.4 min(1, frames /
50)``; layout 0.7 for a mono mix (no centre/side structure), else 1; and 0.3 when the speech
estimate sits on its floor.

References
----------
Martin, R. (2001), IEEE Trans. Speech Audio Process. 9(5), 504-512.
Avendano, C. and Jot, J.-M. (2004), "A frequency-domain approach to multichannel upmix",
J. Audio Eng. Soc. 52(7/8), 740-749.
Kim, C. and Stern, R. M. (2008), Proc. Interspeech 2008, 2598-2601.
Huber, P. J. (1964), "Robust estimation of a location parameter", Ann. Math. Statist. 35(1), 73-101.
McCullagh, P. and Nelder, J. A. (1989), Generalized Linear Models, 2nd ed., Chapman and Hall,
section 2.5 (iteratively reweighted least squares).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from planner._typing import FloatArray
from planner.analysis.features import FLAT, K

Spatial = Literal["none", "mid-side", "centre-others"]

#: Speech-free context taken either side of a cue's aligned span, seconds.
CONTEXT_S = 3.0
#: Context frames count ``exp(-d / CONTEXT_DECAY_S)`` at distance ``d`` from the span, so the
#: nearest speech-free audio weighs most (a background often changes between scenes).
CONTEXT_DECAY_S = 0.5
#: Speech-free frames (10 ms) that count as full context: 0.5 s.
CONTEXT_FULL_FRAMES = 50
#: Context frames below which a side's context is not used for ratios and calibration.
MIN_SIDE_FRAMES = 10
# Relative errors of the estimators (module docstring).
_D_TRACKER, _D_TRACKER_RAW = 0.25, 0.55
_D_BASE, _D_ONE_SIDE, _D_SHORT = 0.1, 0.3, 0.3
_D_MEASURED = 0.03  # the directly measured speech-free part of the spatial estimate
_D_WADA = 0.5
#: Deviation (in relative errors) beyond which an estimate is down-weighted (Huber 1964: 1.345-2).
HUBER_K = 2.0
_HUBER_STEPS = 4
#: Reweighting steps of the combination: errors at the combined value first, then Huber's too.
_COMBINE_STEPS = 8
#: Spread of the estimators' speech-to-background ratios that halves the confidence, dB.
AGREEMENT_SD_DB = 3.0
#: Confidence factor for a mono mix, which has no spatial estimator.
MONO_FACTOR = 0.7
#: Speech is kept at least this far below the listener power, dB (so its level stays finite).
SPEECH_FLOOR_DB = -30.0
#: Confidence factor when the speech estimate sits on that floor (its true level is unknown).
FLOOR_FACTOR = 0.3
# Listener power = a M + b C per spatial structure, the ratio r assumed without context, and
# the uncertainty of that assumption (as a ratio): a correlated stereo background can have
# several times the side's power in the mid; film mixes keep the centre about 10 dB under.
_STRUCTURE = {"mid-side": (2.0, 2.0, 1.0, 1.0), "centre-others": (1.0, 1.0, 0.0, 0.1)}
_TINY = 1e-20


def tracked_view(spatial: Spatial) -> Literal["mixed", "total"]:
    """What the noise tracker follows: the dialogue-carrying mid of a stereo (mid/side) mix,
    else the listener power.

    In a stereo mix the mid carries half the background, whose level is what is hidden under
    the dialogue. A 5.1 centre holds little background (film practice, about 10 dB under the
    others; the ratio assumed 0 in ``_STRUCTURE``): a tracker on it would follow mostly the
    dialogue's own minima, so there it follows the listener power, background-dominated.
    """
    return "mixed" if spatial == "mid-side" else "total"


@dataclass(frozen=True, eq=False)
class ContextMeans:
    """Mean powers ``(N_FEATURES,)`` over speech-free frames on one side of a cue.

    Frames are weighted by their nearness to the span (:data:`CONTEXT_DECAY_S`); ``n`` is the
    sum of the weights (frames inside the span count 1).
    """

    n: float
    total: FloatArray
    tracked: FloatArray
    mixed: FloatArray | None = None
    clean: FloatArray | None = None


@dataclass(frozen=True, eq=False)
class MixEvidence:
    """What the streaming pass measured over one cue for one listening arrangement.

    ``total``, ``tracked``, ``mixed`` and ``clean`` are mean powers ``(N_FEATURES,)`` re full
    scale over the cue's speech frames (listener sum, tracker output, the dialogue-carrying
    and the speech-free parts of ``spatial``; the tracker follows :func:`tracked_view`);
    ``before`` / ``after`` the same over the speech-free frames before and after the span's
    middle (``None`` if there are none).
    ``wada_speech_flat`` is the listener's flat speech power that the WADA-SNR of the
    detection signal implies; ``speech_probability`` the mean over the speech frames.
    """

    spatial: Spatial
    total: FloatArray
    tracked: FloatArray
    speech_probability: float
    before: ContextMeans | None = None
    after: ContextMeans | None = None
    mixed: FloatArray | None = None
    clean: FloatArray | None = None
    wada_speech_flat: float | None = None

    @property
    def n_context(self) -> float:
        """Weighted speech-free frames on both sides."""
        return float(sum(c.n for c in (self.before, self.after) if c is not None))


@dataclass(frozen=True, eq=False)
class MixEstimate:
    """Estimated listener powers of one cue (``(N_FEATURES,)`` each) and how far to trust them.

    ``spread_db`` is the weighted spread of the estimators' speech-to-background ratios;
    ``estimators`` names those used; ``notes`` say in plain words what limited the estimate.
    """

    speech: FloatArray
    background: FloatArray
    confidence: float
    spread_db: float
    estimators: tuple[str, ...]
    notes: tuple[str, ...] = ()


def _sides(ev: MixEvidence) -> list[ContextMeans]:
    return [c for c in (ev.before, ev.after) if c is not None and c.n > 0]


def _pooled(sides: Sequence[ContextMeans], field: str) -> FloatArray | None:
    """Frame-weighted mean of one field over the context sides."""
    parts = [(c.n, getattr(c, field)) for c in sides if getattr(c, field) is not None]
    if not parts:
        return None
    return sum(n * v for n, v in parts) / sum(n for n, _ in parts)


def _side_discrepancy(values: Sequence[FloatArray]) -> FloatArray | float:
    """Half the |log ratio| between the two sides, or the one-side penalty."""
    if len(values) < 2:
        return _D_ONE_SIDE
    return 0.5 * np.abs(np.log(np.maximum(values[0], _TINY) / np.maximum(values[1], _TINY)))


@dataclass(frozen=True, eq=False)
class _Estimate:
    """One estimator's background ``value`` and its error model, arrays ``(n_features,)``.

    ``measured`` is the part of ``value`` read directly (the speech-free part ``b C``, error
    :data:`_D_MEASURED`); the rest is inferred with relative error ``d`` plus an absolute
    error ``floor`` (an assumed ratio's own uncertainty). :meth:`relative_error` evaluates the
    power uncertainty at a given background, not at the estimate's own value.
    """

    name: str
    value: FloatArray
    d: FloatArray
    measured: FloatArray | float = 0.0
    floor: FloatArray | float = 0.0

    def relative_error(self, at: FloatArray) -> FloatArray:
        """``u_e / N`` at background ``N``: ``(d max(N - measured, 0) + 0.03 measured + floor) / N``."""
        inferred = np.maximum(at - self.measured, 0.0)
        u = self.d * inferred + _D_MEASURED * self.measured + self.floor
        return np.maximum(u / np.maximum(at, _TINY), 1e-6)

    def part(self, index: slice) -> _Estimate:
        """The same estimate restricted to some features."""

        def cut(x: FloatArray | float) -> FloatArray | float:
            return x[index] if isinstance(x, np.ndarray) else x

        return _Estimate(self.name, self.value[index], self.d[index], cut(self.measured), cut(self.floor))


def _tracker_estimate(
    ev: MixEvidence, full: Sequence[ContextMeans], tracked_ctx: FloatArray | None, extra: FloatArray | float
) -> _Estimate:
    """The minimum-statistics estimate.

    Mono and 5.1: the tracker follows the listener power, ``N = tracked``. Stereo
    (:func:`tracked_view`): it follows only the mid ``M`` (its background is what is hidden),
    and the side ``C`` is measured: ``N = a tracked + b C``, the relative error applying to
    ``a tracked`` only. Calibrated by the context ratio ``field / tracked`` where context exists.
    """
    field = tracked_view(ev.spatial)
    spatial = field == "mixed" and ev.mixed is not None and ev.clean is not None
    measured_ctx = _pooled(full, field)
    hidden: FloatArray
    d: FloatArray | float
    if measured_ctx is not None and tracked_ctx is not None:
        hidden = ev.tracked * measured_ctx / np.maximum(tracked_ctx, _TINY)
        # A calibration that differs between the two sides means a background changing level.
        bias: list[FloatArray] = [getattr(c, field) / np.maximum(c.tracked, _TINY) for c in full]
        d = _D_TRACKER + (_side_discrepancy(bias) if len(bias) == 2 else 0.0) + extra
    else:
        hidden, d = ev.tracked, _D_TRACKER_RAW
    d_hidden = np.broadcast_to(d, hidden.shape).astype(np.float64)
    if not spatial or ev.clean is None:
        return _Estimate("tracker", hidden, d_hidden)
    a, b, _, _ = _STRUCTURE[ev.spatial]
    return _Estimate("tracker", a * hidden + b * ev.clean, d_hidden, measured=b * ev.clean)


def _estimates(ev: MixEvidence) -> list[_Estimate]:
    """Every estimator that applies, with its error model."""
    sides = _sides(ev)
    full = [c for c in sides if c.n >= MIN_SIDE_FRAMES]
    short = _D_SHORT * max(0.0, 1.0 - ev.n_context / CONTEXT_FULL_FRAMES)
    out: list[_Estimate] = []
    context = _pooled(sides, "total")
    tracked_ctx = _pooled(full, "tracked")
    # Where the speech-free part is measured during the cue too, its change since the
    # context is the background's own level change (a ride, ducking, a new scene): the
    # context, and the tracker calibrated on it, are that much less reliable.
    clean_ctx = _pooled(full, "clean")
    stale: FloatArray | float = 0.0
    if ev.spatial != "none" and ev.clean is not None and clean_ctx is not None:
        stale = np.abs(np.log(np.maximum(ev.clean, _TINY) / np.maximum(clean_ctx, _TINY)))
    out.append(_tracker_estimate(ev, full, tracked_ctx, short + stale))
    if context is not None:
        levels: list[FloatArray] = [c.total for c in full]
        d = _D_BASE + _side_discrepancy(levels) + short + stale
        out.append(_Estimate("context", context, np.broadcast_to(d, context.shape).astype(np.float64)))
    if ev.spatial != "none" and ev.mixed is not None and ev.clean is not None:
        a, b, r_assumed, r_unknown = _STRUCTURE[ev.spatial]
        ratios: list[FloatArray] = [
            c.mixed / np.maximum(c.clean, _TINY) for c in full if c.mixed is not None and c.clean is not None
        ]
        mixed_ctx = _pooled(full, "mixed")
        floor: FloatArray | float = 0.0
        if ratios and mixed_ctx is not None and clean_ctx is not None:
            r = mixed_ctx / np.maximum(clean_ctx, _TINY)
            d = _D_BASE + _side_discrepancy(ratios) + short
        else:
            r = np.full_like(ev.clean, r_assumed)
            d, floor = _D_BASE, a * r_unknown * ev.clean
        # Only the hidden part a r C is inferred; b C is measured.
        d_arr = np.broadcast_to(d, ev.clean.shape).astype(np.float64)
        out.append(_Estimate("spatial", ev.clean * (a * r + b), d_arr, measured=b * ev.clean, floor=floor))
    return out


def _combine(estimates: Sequence[_Estimate]) -> tuple[FloatArray, FloatArray]:
    """Weighted mean of the estimates' logarithms, with outlying estimates down-weighted.

    Each estimate's error is taken as log-normal with its relative error as standard
    deviation, so the maximum-likelihood combination is the inverse-variance mean of the
    logarithms. Where an error depends on the power it is about (the inferred part of the
    spatial estimate), it is evaluated at the combined background, not at the estimate's own
    value, re-evaluated in each step from an equal-weight start: weighting by errors taken at
    each estimate's own value would favour the lower estimates and bias the background low
    (the variance function evaluated at the fitted mean, as in iteratively reweighted least
    squares, McCullagh and Nelder 1989). An estimate more than :data:`HUBER_K` of its errors
    from the mean has its weight scaled by ``(HUBER_K / z)^2`` (Huber's M-estimator), so a
    context spoilt by a level change the estimator cannot see does not drag the others.

    Returns the combined background and each estimate's relative error ``(n_estimates,
    n_features)`` at it.
    """
    logs = np.stack([np.log(np.maximum(e.value, _TINY)) for e in estimates])
    mean = logs.mean(axis=0)
    for step in range(_COMBINE_STEPS):
        rel = np.stack([e.relative_error(np.exp(mean)) for e in estimates])
        weights = 1.0 / rel**2
        if step >= _COMBINE_STEPS - _HUBER_STEPS:
            z = np.abs(logs - mean) / rel
            weights *= np.minimum(1.0, (HUBER_K / np.maximum(z, 1e-12)) ** 2)
        mean = (weights * logs).sum(axis=0) / weights.sum(axis=0)
    background = np.exp(mean)
    return background, np.stack([e.relative_error(background) for e in estimates])


def _snr_db(total: float, background: float) -> float:
    speech = max(total - background, total * 10.0 ** (SPEECH_FLOOR_DB / 10.0), _TINY)
    return float(10.0 * np.log10(speech / max(background, _TINY)))


def estimate_mix(ev: MixEvidence) -> MixEstimate:
    """Combine the estimators into the cue's speech and background listener powers.

    Parameters
    ----------
    ev : MixEvidence
        Measurements of one cue (see :class:`MixEvidence`).

    Returns
    -------
    MixEstimate
        Speech and background powers per feature, confidence 0..1 and notes.
    """
    estimates = _estimates(ev)
    background, errors = _combine(estimates)
    names = [e.name for e in estimates]
    if ev.wada_speech_flat is not None and ev.total[FLAT] > ev.wada_speech_flat:
        wada_flat = ev.total[FLAT] - ev.wada_speech_flat
        flat = [e.part(slice(FLAT, FLAT + 1)) for e in estimates]
        wada = _Estimate("wada", np.array([wada_flat]), np.array([_D_WADA]))
        with_wada, _ = _combine([*flat, wada])
        background = background * float(with_wada[0] / max(background[FLAT], _TINY))
        names.append("wada")
    floor = ev.total * 10.0 ** (SPEECH_FLOOR_DB / 10.0)
    background = np.clip(background, 0.0, ev.total - floor)
    speech = ev.total - background

    # Agreement: weighted spread of the estimators' speech-to-background ratios at K.
    weights = 1.0 / errors[:, K] ** 2
    weights /= weights.sum()
    ratios = np.array([_snr_db(ev.total[K], e.value[K]) for e in estimates])
    combined = _snr_db(ev.total[K], background[K])
    spread = float(np.sqrt((weights * (ratios - combined) ** 2).sum()))
    agreement = 1.0 / (1.0 + (spread / AGREEMENT_SD_DB) ** 2)
    context_factor = 0.6 + 0.4 * min(1.0, ev.n_context / CONTEXT_FULL_FRAMES)
    layout_factor = MONO_FACTOR if ev.spatial == "none" else 1.0
    floored = bool(background[K] >= ev.total[K] - floor[K] * 1.0001)
    floor_factor = FLOOR_FACTOR if floored else 1.0
    confidence = float(
        np.clip(agreement * context_factor * ev.speech_probability * layout_factor * floor_factor, 0.0, 1.0)
    )

    notes: list[str] = []
    if ev.spatial == "none":
        notes.append(
            "mono mix: no centre/side structure, so speech and background come from the noise "
            "tracker, the speech-free context and WADA-SNR only (confidence lowered)"
        )
    if ev.n_context < CONTEXT_FULL_FRAMES // 2:
        notes.append("little speech-free audio near the cue to measure the background on")
    if floored:
        notes.append("the background estimate leaves almost no speech: the speech-to-background figure is a floor")
    if spread > 2.0 * AGREEMENT_SD_DB:
        notes.append(f"the background estimators disagree (spread {spread:.1f} dB)")
    return MixEstimate(
        speech=speech,
        background=background,
        confidence=confidence,
        spread_db=spread,
        estimators=tuple(names),
        notes=tuple(notes),
    )
