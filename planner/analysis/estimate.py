"""Speech and background of one cue from the final mix alone (the archive case).

Without stems, the background under a cue is estimated per feature (the 18 SII band powers
and the K-weighted and flat powers of the listener's loudspeaker sum, see
:mod:`planner.analysis.features`) by independent published estimators, and the speech is the
rest of the measured power ``T`` over the cue's speech frames:

``tracker``
    Minimum statistics (Martin 2001, :mod:`planner.analysis.minstats`) run through the whole
    programme on the listener power; its mean over the cue's speech frames. Where the cue has
    speech-free context, the tracker's own bias for this background (its mean over the context
    frames against the context's measured power) is divided out.
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
of ``N_e`` for the tracker and the context, only the part ``a r C`` hidden under the dialogue
for the spatial estimate. ``ln N = sum(ln N_e / e_e^2) / sum(1 / e_e^2)`` with ``e_e = u_e /
N_e`` (inverse-variance weighting of log-normal errors; the spatial estimate, which infers
only the part of the background hidden under the dialogue, keeps the speech ``T - N``
accurate when it is small against the background). Relative errors, our choice: tracker 0.25 (0.55 uncalibrated), context and
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
    and the speech-free parts of ``spatial``); ``before`` / ``after`` the same over the
    speech-free frames before and after the span's middle (``None`` if there are none).
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


def _estimates(ev: MixEvidence) -> list[tuple[str, FloatArray, FloatArray]]:
    """``(name, N_e, e_e)`` for every estimator that applies: background power, relative error."""
    sides = _sides(ev)
    full = [c for c in sides if c.n >= MIN_SIDE_FRAMES]
    short = _D_SHORT * max(0.0, 1.0 - ev.n_context / CONTEXT_FULL_FRAMES)
    out: list[tuple[str, FloatArray, FloatArray]] = []
    context = _pooled(sides, "total")
    tracked_ctx = _pooled(full, "tracked")
    # Where the speech-free part is measured during the cue too, its change since the
    # context is the background's own level change (a ride, ducking, a new scene): the
    # context, and the tracker calibrated on it, are that much less reliable.
    clean_ctx = _pooled(full, "clean")
    stale: FloatArray | float = 0.0
    if ev.spatial != "none" and ev.clean is not None and clean_ctx is not None:
        stale = np.abs(np.log(np.maximum(ev.clean, _TINY) / np.maximum(clean_ctx, _TINY)))
    total_ctx = _pooled(full, "total")
    if total_ctx is not None and tracked_ctx is not None:
        calibrated = ev.tracked * total_ctx / np.maximum(tracked_ctx, _TINY)
        # A calibration that differs between the two sides means a background changing level.
        bias: list[FloatArray] = [c.total / np.maximum(c.tracked, _TINY) for c in full]
        d = _D_TRACKER + (_side_discrepancy(bias) if len(bias) == 2 else 0.0) + short + stale
        out.append(("tracker", calibrated, np.broadcast_to(d, calibrated.shape).astype(np.float64)))
    else:
        out.append(("tracker", ev.tracked, np.full_like(ev.tracked, _D_TRACKER_RAW)))
    if context is not None:
        levels: list[FloatArray] = [c.total for c in full]
        d = _D_BASE + _side_discrepancy(levels) + short + stale
        out.append(("context", context, np.broadcast_to(d, context.shape).astype(np.float64)))
    if ev.spatial != "none" and ev.mixed is not None and ev.clean is not None:
        a, b, r_assumed, r_unknown = _STRUCTURE[ev.spatial]
        ratios: list[FloatArray] = [
            c.mixed / np.maximum(c.clean, _TINY) for c in full if c.mixed is not None and c.clean is not None
        ]
        mixed_ctx = _pooled(full, "mixed")
        if ratios and mixed_ctx is not None and clean_ctx is not None:
            r = mixed_ctx / np.maximum(clean_ctx, _TINY)
            hidden = a * r * (_D_BASE + _side_discrepancy(ratios) + short)
        else:
            r = np.full_like(ev.clean, r_assumed)
            hidden = a * (_D_BASE * r + r_unknown)
        # Relative to the whole background C (a r + b): only the hidden part is inferred.
        out.append(("spatial", ev.clean * (a * r + b), (hidden + _D_MEASURED * b) / (a * r + b)))
    return out


def _combine(estimates: list[tuple[str, FloatArray, FloatArray]]) -> FloatArray:
    """Weighted mean of the estimates' logarithms, with outlying estimates down-weighted.

    Each estimate's error is taken as log-normal with its relative error as standard
    deviation, so the maximum-likelihood combination is the inverse-variance mean of the
    logarithms; weights depend on the errors only, never on the values. An estimate more than
    :data:`HUBER_K` of its errors from the mean has its weight scaled by ``(HUBER_K / z)^2``
    (Huber's M-estimator, a few reweighting steps), so a context spoilt by a level change the
    estimator cannot see does not drag the others.
    """
    logs = np.stack([np.log(np.maximum(n, _TINY)) for _, n, _ in estimates])
    rel = np.stack([np.maximum(e, 1e-6) for _, _, e in estimates])
    base = 1.0 / rel**2
    mean = (base * logs).sum(axis=0) / base.sum(axis=0)
    for _ in range(_HUBER_STEPS):
        z = np.abs(logs - mean) / rel
        weights = base * np.minimum(1.0, (HUBER_K / np.maximum(z, 1e-12)) ** 2)
        mean = (weights * logs).sum(axis=0) / weights.sum(axis=0)
    return np.exp(mean)


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
    background = _combine(estimates)
    names = [name for name, _, _ in estimates]
    if ev.wada_speech_flat is not None and ev.total[FLAT] > ev.wada_speech_flat:
        wada_flat = ev.total[FLAT] - ev.wada_speech_flat
        flat = [(n, v[FLAT : FLAT + 1], u[FLAT : FLAT + 1]) for n, v, u in estimates]
        with_wada = _combine([*flat, ("wada", np.array([wada_flat]), np.array([_D_WADA]))])
        background = background * float(with_wada[0] / max(background[FLAT], _TINY))
        names.append("wada")
    floor = ev.total * 10.0 ** (SPEECH_FLOOR_DB / 10.0)
    background = np.clip(background, 0.0, ev.total - floor)
    speech = ev.total - background

    # Agreement: weighted spread of the estimators' speech-to-background ratios at K.
    weights = np.array([1.0 / max(e[K], 1e-6) ** 2 for _, _, e in estimates])
    weights /= weights.sum()
    ratios = np.array([_snr_db(ev.total[K], n[K]) for _, n, _ in estimates])
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
