"""Streaming programme loudness: ITU-R BS.1770-4 (K-weighting, gating), EBU Tech 3342 (LRA), true peak.

:class:`LoudnessMeter` takes blocks of any size. It keeps the K-weighting filter state
across blocks and stores only the mean square of each 100 ms step per channel (36 000
steps per hour), from which every figure is computed at the end: 400 ms blocks (4 steps,
75 % overlap) for integrated, momentary and speech-gated loudness, 3 s windows (30 steps)
for short-term loudness and the loudness range. Results do not depend on the block sizes
fed. References: ITU-R BS.1770-4 (2015) Annex 1 and 2 (unchanged in substance in -5),
EBU Tech 3341 (2023), EBU Tech 3342 (2023).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from planner._typing import AudioArray, BoolArray, FloatArray
from planner.analysis.truepeak import TruePeakMeter
from planner.errors import AudioInputError, InputError
from planner.model import Layout, LoudnessSummary
from planner.units import ANALYSIS_FRAME_S, nearest_int

__all__ = ["LoudnessMeter", "TruePeakMeter", "channel_weights", "k_weighting_sos", "measure_loudness"]

# BS.1770-4 Annex 1 Table 1 (stage 1, high shelf) and Table 2 (stage 2, RLB high-pass) at 48 kHz.
_SHELF_48K = (1.53512485958697, -2.69169618940638, 1.19839281085285, 1.0, -1.69065929318241, 0.73248077421585)
_HIGHPASS_48K = (1.0, -2.0, 1.0, 1.0, -1.99004745483398, 0.99007225036621)
# Analog prototypes whose bilinear transform at 48 kHz reproduces Tables 1-2 (to 5e-13):
# the parameters of the published "DeMan" design, as listed in the project's CHECKS sheet 1.1.
_SHELF_GAIN_DB = 3.99984385397
_SHELF_Q = 0.7071752369554193
_SHELF_FC_HZ = 1681.9744509555319
_SHELF_VB_EXPONENT = 0.499666774155
_HIGHPASS_Q = 0.5003270373253953
_HIGHPASS_FC_HZ = 38.13547087613982

_OFFSET_LU = -0.691  # BS.1770 eq. (2): cancels the K-weighting gain at 997 Hz
_ABSOLUTE_GATE_LUFS = -70.0  # BS.1770 eq. (6); Tech 3342 §3.1
_RELATIVE_GATE_LU = -10.0  # BS.1770 eq. (7)
_LRA_RELATIVE_GATE_LU = -20.0  # Tech 3342 §3.1
_LRA_PERCENTILES = (10.0, 95.0)  # Tech 3342 §3.1
_STEP_S = 0.1  # 75 % overlap of 400 ms blocks; Tech 3342 hop
_BLOCK_STEPS = 4  # 400 ms gating / momentary block
_SHORT_TERM_STEPS = 30  # 3 s short-term window
_SPEECH_SHARE = 0.5  # a block counts as speech when at least half its frames are speech
_MIN_RATE_HZ = 8000  # below this the shelf (1.68 kHz) comes too close to Nyquist

#: BS.1770-4 Table 3 weights by layout: L, R, C 1.0; Ls, Rs 1.41; LFE excluded (weight 0).
_WEIGHTS: dict[Layout, tuple[float, ...]] = {
    "mono": (1.0,),
    "stereo": (1.0, 1.0),
    "5.1": (1.0, 1.0, 1.0, 0.0, 1.41, 1.41),
}


def channel_weights(layout: Layout) -> tuple[float, ...]:
    """BS.1770-4 Table 3 channel weights G_i for a layout, in the reader's channel order."""
    if layout not in _WEIGHTS:
        raise InputError(f"layout={layout!r} must be one of {', '.join(_WEIGHTS)}; pass one of those")
    return _WEIGHTS[layout]


def _bilinear_shelf(k: float) -> tuple[float, ...]:
    """High shelf through the bilinear transform with pre-warped ``k = tan(pi fc / fs)``."""
    vh = 10.0 ** (_SHELF_GAIN_DB / 20.0)
    vb = vh**_SHELF_VB_EXPONENT
    a0 = 1.0 + k / _SHELF_Q + k * k
    return (
        (vh + vb * k / _SHELF_Q + k * k) / a0,
        2.0 * (k * k - vh) / a0,
        (vh - vb * k / _SHELF_Q + k * k) / a0,
        1.0,
        2.0 * (k * k - 1.0) / a0,
        (1.0 - k / _SHELF_Q + k * k) / a0,
    )


def _bilinear_highpass(k: float, gain: float) -> tuple[float, ...]:
    """Second-order high-pass through the bilinear transform, passband gain ``gain``."""
    a0 = 1.0 + k / _HIGHPASS_Q + k * k
    g = gain / a0
    return (g, -2.0 * g, g, 1.0, 2.0 * (k * k - 1.0) / a0, (1.0 - k / _HIGHPASS_Q + k * k) / a0)


def k_weighting_sos(sample_rate_hz: int) -> np.ndarray:
    """BS.1770 K-weighting (stage 1 shelf, stage 2 high-pass) as second-order sections.

    At 48 kHz these are the coefficients of BS.1770-4 Tables 1 and 2 exactly. At other
    rates the same analog prototypes go through the bilinear transform, so the response
    is that of the 48 kHz filter ("the same frequency response", Annex 1). Table 2's
    numerator (1, -2, 1) is not normalised, giving the high-pass a passband gain of
    ``1 + k/Q + k^2`` at 48 kHz (+0.043 dB); that gain is kept at every rate.

    Returns
    -------
    ndarray
        ``(2, 6)`` float64 rows ``b0 b1 b2 a0 a1 a2`` for :func:`scipy.signal.sosfilt`.
    """
    if sample_rate_hz < _MIN_RATE_HZ:
        raise AudioInputError(
            f"sample_rate_hz={sample_rate_hz} is too low for BS.1770 loudness; resample to at least {_MIN_RATE_HZ} Hz"
        )
    if sample_rate_hz == 48000:
        return np.array([_SHELF_48K, _HIGHPASS_48K])
    return _prototype_sos(sample_rate_hz)


def _prototype_sos(sample_rate_hz: int) -> np.ndarray:
    """K-weighting designed from the analog prototypes (reproduces Tables 1-2 at 48 kHz to 5e-13)."""
    k48 = math.tan(math.pi * _HIGHPASS_FC_HZ / 48000.0)
    gain48 = 1.0 + k48 / _HIGHPASS_Q + k48 * k48
    shelf = _bilinear_shelf(math.tan(math.pi * _SHELF_FC_HZ / sample_rate_hz))
    highpass = _bilinear_highpass(math.tan(math.pi * _HIGHPASS_FC_HZ / sample_rate_hz), gain48)
    return np.array([shelf, highpass])


def _lufs(power: FloatArray | float) -> np.ndarray:
    """BS.1770 eq. (2)/(4): -0.691 + 10 log10(weighted mean square); -inf for zero power."""
    with np.errstate(divide="ignore"):
        return _OFFSET_LU + 10.0 * np.log10(np.asarray(power, dtype=np.float64))


def _gated_lufs(power: FloatArray) -> float | None:
    """BS.1770 eq. (5)-(7): integrated loudness of blocks with mean-square ``power``; None if all gated."""
    loudness = _lufs(power)
    keep = loudness > _ABSOLUTE_GATE_LUFS
    if not keep.any():
        return None
    relative = float(_lufs(power[keep].mean())) + _RELATIVE_GATE_LU
    keep &= loudness > relative
    return float(_lufs(power[keep].mean()))


def _loudness_range(power: FloatArray) -> float | None:
    """EBU Tech 3342 §3.1 loudness range of short-term windows with mean-square ``power``."""
    loudness = _lufs(power)
    keep = loudness > _ABSOLUTE_GATE_LUFS
    if not keep.any():
        return None
    relative = float(_lufs(power[keep].mean())) + _LRA_RELATIVE_GATE_LU
    values = np.sort(loudness[keep & (loudness > relative)])
    # Tech 3342 §5 listing: nearest rank, 1-based index round((n - 1) p / 100 + 1)
    low, high = (values[nearest_int((values.size - 1) * p / 100.0 + 1.0) - 1] for p in _LRA_PERCENTILES)
    return float(high - low)


def _max_lufs(power: FloatArray) -> float | None:
    if power.size == 0 or not (power > 0.0).any():
        return None
    return float(_lufs(power.max()))


class LoudnessMeter:
    """Block-wise BS.1770-4 / EBU Tech 3342 meter of one programme.

    Parameters
    ----------
    sample_rate_hz : int
        Rate of the blocks (at least 8000 Hz).
    layout : {"mono", "stereo", "5.1"}
        Channel layout; sets the channel weights (LFE excluded) and the expected channel count.
    true_peak : bool, keyword-only
        Meter the true and sample peaks here (default); False when another meter fed the
        same samples does it (e.g. in another process), given to :meth:`summary`.
    on_weighted : callable, keyword-only, optional
        Called with the K-weighted samples of the metered channels (LFE left out) of every
        block, float64 ``(n_metered, n)``, before they are squared (e.g.
        :meth:`planner.analysis.framepower.SignalKPower.feed`); it must not keep the array.

    Notes
    -----
    Memory: one float64 per channel per 100 ms step (under 2 MB per hour of 5.1), plus
    less than one step of pending samples. A step is ``round(0.1 fs)`` samples, exactly
    100 ms at every usual rate. The 400 ms blocks start at every step; a block or window
    that the end of the programme cuts short is discarded (BS.1770-4 Annex 1).
    """

    def __init__(
        self,
        sample_rate_hz: int,
        layout: Layout,
        *,
        true_peak: bool = True,
        on_weighted: Callable[[FloatArray], None] | None = None,
    ) -> None:
        weights = channel_weights(layout)
        self.sample_rate_hz = sample_rate_hz
        self.layout = layout
        self.n_channels = len(weights)
        # imported here, as in features.py: the compiled filter loads numba (about 0.3 s
        # and 100 MB), and `cueplan plan` reaches this module (through the scoring) without metering
        from planner.analysis.iir import sosfilt

        self._sosfilt = sosfilt
        self._sos = k_weighting_sos(sample_rate_hz)
        self._metered = [i for i, w in enumerate(weights) if w > 0.0]
        self._weights = np.array([weights[i] for i in self._metered])
        self._step = nearest_int(_STEP_S * sample_rate_hz)
        self._zi: FloatArray = np.zeros((self._sos.shape[0], len(self._metered), 2))
        self._pending = np.zeros((len(self._metered), 0))  # squares of the unfinished step
        self._work = np.zeros((len(self._metered), 0))
        self._step_sums: list[np.ndarray] = []
        self._true_peak = TruePeakMeter(sample_rate_hz, self.n_channels) if true_peak else None
        self._on_weighted = on_weighted
        self.n_frames = 0

    def feed(self, block: AudioArray) -> None:
        """Add float32 samples of shape ``(n, n_channels)`` (full scale 1.0)."""
        if block.ndim != 2 or block.shape[1] != self.n_channels:
            raise InputError(
                f"block shape {block.shape} does not match layout {self.layout!r} ({self.n_channels} channels); "
                f"pass (n, {self.n_channels}) blocks"
            )
        if block.shape[0] == 0:
            return
        if self._true_peak is not None:
            self._true_peak.feed(block)
        # channels first in float64 (stage 2's poles sit 0.005 from the unit circle), copied
        # into a reused buffer: fresh megabyte temporaries per block cost page faults
        if self._work.shape[1] != block.shape[0]:
            self._work = np.zeros((len(self._metered), block.shape[0]))
        for row, channel in enumerate(self._metered):
            self._work[row] = block[:, channel]
        y, self._zi = self._sosfilt(self._sos, self._work, self._zi)
        if self._on_weighted is not None:
            self._on_weighted(y)
        np.square(y, out=y)
        head = 0
        if self._pending.shape[1]:
            head = min(self._step - self._pending.shape[1], y.shape[1])
            self._pending = np.concatenate([self._pending, y[:, :head]], axis=1)
            if self._pending.shape[1] == self._step:
                self._step_sums.append(self._pending.sum(axis=1)[None, :])
                self._pending = self._pending[:, :0]
        n_steps = (y.shape[1] - head) // self._step
        if n_steps:
            whole = y[:, head : head + n_steps * self._step].reshape(y.shape[0], n_steps, self._step)
            self._step_sums.append(whole.sum(axis=2).T)
        rest = y[:, head + n_steps * self._step :]
        if rest.shape[1]:
            self._pending = np.concatenate([self._pending, rest], axis=1)
        self.n_frames += int(block.shape[0])

    def _step_power(self) -> np.ndarray:
        """Channel-weighted sum of squares of every complete step, ``(n_steps,)``."""
        if not self._step_sums:
            return np.zeros(0)
        return np.concatenate(self._step_sums) @ self._weights

    def summary(
        self,
        speech_mask: BoolArray | None = None,
        frame_s: float = ANALYSIS_FRAME_S,
        *,
        peaks: TruePeakMeter | None = None,
    ) -> LoudnessSummary:
        """Every figure of the audio fed so far.

        Parameters
        ----------
        speech_mask : ndarray of bool, optional
            Speech decision per analysis frame from the start of the audio; frames past its
            end count as non-speech. Without it ``speech_lufs`` is None.
        frame_s : float
            Frame length of ``speech_mask`` in seconds.
        peaks : TruePeakMeter, optional
            The peak meter fed the same samples, for a meter made with ``true_peak=False``.

        Returns
        -------
        LoudnessSummary
            Integrated loudness (LUFS), loudness range (LU), true peak (dBTP), sample
            peak (dBFS), maximum momentary and short-term loudness (LUFS) and the
            speech-gated loudness (LUFS): integrated loudness over the 400 ms blocks at
            least half of whose frames are speech, gated as the integrated loudness.
            ``None`` where nothing is left after gating or the audio is too short.
        """
        peaks = peaks if peaks is not None else self._true_peak
        if peaks is None:
            raise InputError("this meter was made with true_peak=False; pass peaks= (the meter fed the same samples)")
        steps = self._step_power()
        blocks = _window_power(steps, _BLOCK_STEPS, self._step)
        short = _window_power(steps, _SHORT_TERM_STEPS, self._step)
        speech_lufs = None
        if speech_mask is not None:
            speech = _speech_blocks(speech_mask, frame_s, blocks.size, self._step / self.sample_rate_hz)
            speech_lufs = _gated_lufs(blocks[speech])
        return LoudnessSummary(
            integrated_lufs=_gated_lufs(blocks),
            loudness_range_lu=_loudness_range(short),
            true_peak_dbtp=peaks.dbtp,
            sample_peak_dbfs=peaks.sample_peak_dbfs,
            max_momentary_lufs=_max_lufs(blocks),
            max_short_term_lufs=_max_lufs(short),
            speech_lufs=speech_lufs,
        )


def _window_power(steps: np.ndarray, n_steps: int, step: int) -> np.ndarray:
    """Mean square of every window of ``n_steps`` consecutive steps (hop one step)."""
    if steps.size < n_steps:
        return np.zeros(0)
    return sliding_window_view(steps, n_steps).sum(axis=1) / (n_steps * step)


def _speech_blocks(mask: BoolArray, frame_s: float, n_blocks: int, step_s: float) -> np.ndarray:
    """Which 400 ms blocks have at least half of their analysis frames marked as speech."""
    if not (0.0 < frame_s <= _BLOCK_STEPS * step_s):
        raise InputError(f"frame_s={frame_s!r} must be in (0, 0.4] seconds; pass the speech mask's frame length")
    flags = np.asarray(mask, dtype=bool).ravel()
    counts = np.concatenate(([0], np.cumsum(flags)))
    per_block = nearest_int(_BLOCK_STEPS * step_s / frame_s)
    # block j covers [j step_s, j step_s + 0.4 s); frame indices by the project's rounding rule
    first = np.floor(np.arange(n_blocks) * step_s / frame_s + 0.5).astype(np.int64)
    last = np.minimum(first + per_block, flags.size)
    first = np.minimum(first, flags.size)
    return (counts[last] - counts[first]) >= _SPEECH_SHARE * per_block


def measure_loudness(
    blocks: Iterable[AudioArray],
    sample_rate_hz: int,
    layout: Layout,
    speech_mask: BoolArray | None = None,
    *,
    frame_s: float = ANALYSIS_FRAME_S,
) -> LoudnessSummary:
    """Meter a whole programme given as blocks (e.g. from :func:`planner.io.audio.read_blocks`).

    See :meth:`LoudnessMeter.summary` for the figures, units and the speech mask.
    """
    meter = LoudnessMeter(sample_rate_hz, layout)
    for block in blocks:
        meter.feed(block)
    return meter.summary(speech_mask=speech_mask, frame_s=frame_s)
