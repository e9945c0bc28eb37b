"""From a cue's speech and background powers to its scores: levels, spectra, SII, short-time SII.

Shared by the stems and the mix-only paths of :mod:`planner.analysis.masking`: both end with
mean listener powers per feature (:mod:`planner.analysis.features`) for the speech and the
background over the cue's speech frames.

Listening level (docs/methods.md): a programme measuring -23 LUFS is heard at
``listening_level_db_spl``. Digital powers become sound pressure levels by one absolute offset,
``spl_offset_db = listening_level_db_spl + 23``: a band of mean square ``p`` re full scale
(summed over loudspeakers with the BS.1770 weights) is ``10 log10(p) + spl_offset_db`` dB SPL.
At 997 Hz, where K-weighting and the -0.691 constant cancel, a signal of ``L`` LUFS is then
heard at ``L + spl_offset_db`` dB SPL; 6 dB more signal is 6 dB more SPL.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from planner._typing import FloatArray
from planner.analysis.bands import band_spectrum_level_db
from planner.analysis.features import K
from planner.analysis.hearing import PROFILE_NAMES, hearing_profile, profile_from_points
from planner.analysis.sii import N_BANDS, SII_BANDS_HZ, sii
from planner.settings import AnalysisSettings
from planner.units import ANALYSIS_FRAME_S, nearest_int

#: Programme loudness that the listening level refers to, LUFS (EBU R 128 target).
REFERENCE_LUFS = -23.0
#: BS.1770-5 Eq. (2) constant, LU.
LOUDNESS_OFFSET_LU = -0.691
#: Spectrum levels are kept at or above this, dB SPL/Hz (far below the SII's internal noise,
#: so it changes no SII, and keeps records free of -inf).
SPECTRUM_FLOOR_DB = -60.0
#: Key suffix in ``sii_by_profile`` for the ITU-R BS.775 stereo fold-down of a 5.1 programme.
FOLD_DOWN_SUFFIX = "@stereo-fold-down"

# Short-time SII windows of Rhebergen and Versfeld (2005), from memory: 35 ms at the lowest
# band falling to 9.4 ms at 8 kHz (interpolated here linearly in log frequency). The band
# analyser already integrates over Hann windows of 80 ms below 630 Hz and 20 ms above, whose
# equivalent rectangular durations are 2/3 of their length; where the ESII window is longer,
# consecutive 10 ms frames are averaged over the difference.
_ESII_LOW_S, _ESII_HIGH_S = 0.035, 0.0094
_ANALYSER_ERD_S = np.where(SII_BANDS_HZ < 630.0, 0.08, 0.02) * 2.0 / 3.0


def esii_window_s() -> FloatArray:
    """ESII window length per SII band, seconds (35 ms at 160 Hz to 9.4 ms at 8 kHz)."""
    x = np.log(SII_BANDS_HZ / SII_BANDS_HZ[0]) / np.log(SII_BANDS_HZ[-1] / SII_BANDS_HZ[0])
    return _ESII_LOW_S + x * (_ESII_HIGH_S - _ESII_LOW_S)


def esii_frames(frame_s: float = ANALYSIS_FRAME_S) -> npt.NDArray[np.int64]:
    """Frames averaged per band for the short-time SII (at least 1)."""
    extra = np.maximum(esii_window_s() - _ANALYSER_ERD_S, 0.0)
    return np.array([1 + nearest_int(e / frame_s) for e in extra], dtype=np.int64)


class TrailingMean:
    """Per-band mean over the last ``n_b`` frames, streaming (the ESII windows)."""

    def __init__(self, lengths: npt.ArrayLike) -> None:
        self.lengths = np.asarray(lengths, dtype=np.int64)
        self._history = np.zeros((0, self.lengths.size))

    def process(self, x: FloatArray) -> FloatArray:
        """Windowed values of the frames ``x`` ``(n, n_bands)``; earlier frames come from the history."""
        n_keep = int(self.lengths.max()) - 1
        data = np.vstack([self._history, x])
        cum = np.vstack([np.zeros((1, data.shape[1])), np.cumsum(data, axis=0)])
        end = np.arange(self._history.shape[0] + 1, data.shape[0] + 1)[:, None]
        start = np.maximum(end - self.lengths[None, :], 0)
        cols = np.arange(data.shape[1])[None, :]
        out = (cum[end, cols] - cum[start, cols]) / (end - start)
        self._history = data[data.shape[0] - n_keep :] if n_keep > 0 else data[:0]
        return out


def analysis_thresholds(settings: AnalysisSettings) -> tuple[str, dict[str, FloatArray]]:
    """The analysis profile's name and the thresholds (dB HL, per SII band) of every profile scored.

    Always ``normal`` and every age preset (:data:`~planner.analysis.hearing.PROFILE_NAMES`);
    with ``settings.hearing == "audiogram"`` also ``audiogram`` from the settings' points.
    """
    table = {name: np.asarray(hearing_profile(name).thresholds_db_hl) for name in PROFILE_NAMES}
    if settings.hearing == "audiogram":
        profile = profile_from_points(settings.audiogram_hz, settings.audiogram_db_hl, name="audiogram")
        table["audiogram"] = np.asarray(profile.thresholds_db_hl)
    elif settings.hearing not in table:
        table[settings.hearing] = np.asarray(hearing_profile(settings.hearing).thresholds_db_hl)
    return settings.hearing, table


def spl_offset_db(listening_level_db_spl: float) -> float:
    """dB SPL of a full-scale mean square of 1: ``listening_level_db_spl - REFERENCE_LUFS``."""
    return listening_level_db_spl - REFERENCE_LUFS


def loudness_lufs(k_power: float) -> float | None:
    """BS.1770 loudness of a K-weighted, channel-summed mean square; ``None`` for zero power."""
    if not k_power > 0.0:
        return None
    return LOUDNESS_OFFSET_LU + 10.0 * float(np.log10(k_power))


def spectrum_db(band_power: npt.ArrayLike, offset_db: float) -> FloatArray:
    """Spectrum level, dB SPL/Hz, of band powers ``(..., 18)``, floored at :data:`SPECTRUM_FLOOR_DB`."""
    level = band_spectrum_level_db(np.asarray(band_power, dtype=np.float64)[..., :N_BANDS], offset_db)
    return np.maximum(level, SPECTRUM_FLOOR_DB)


@dataclass(frozen=True)
class Levels:
    """The level scores of one cue and one listening arrangement."""

    speech_db: float | None
    background_db: float | None
    sbld_lu: float | None
    speech_spectrum_db: FloatArray
    background_spectrum_db: FloatArray


def levels(speech: FloatArray, background: FloatArray, offset_db: float) -> Levels:
    """K-weighted levels (LUFS), their difference (LU) and both spectra (dB SPL/Hz)."""
    s_db, b_db = loudness_lufs(float(speech[K])), loudness_lufs(float(background[K]))
    return Levels(
        speech_db=s_db,
        background_db=b_db,
        sbld_lu=None if s_db is None or b_db is None else s_db - b_db,
        speech_spectrum_db=spectrum_db(speech, offset_db),
        background_spectrum_db=spectrum_db(background, offset_db),
    )


def sii_by_profile(
    speech_spectrum_db: FloatArray,
    background_spectrum_db: FloatArray,
    thresholds: Mapping[str, FloatArray],
    *,
    suffix: str = "",
) -> dict[str, float]:
    """Classic SII (ANSI S3.5) of one pair of spectra for every hearing profile, keyed ``name + suffix``."""
    names = sorted(thresholds)
    values = sii(speech_spectrum_db, background_spectrum_db, np.stack([thresholds[n] for n in names]))
    return {f"{n}{suffix}": float(v) for n, v in zip(names, np.atleast_1d(values))}


def short_time_sii(
    speech_spectrum_db: FloatArray, background_frames: FloatArray, offset_db: float, threshold_db_hl: FloatArray
) -> float | None:
    """ESII: mean over frames of the SII of the cue's speech spectrum against each frame's background.

    Parameters
    ----------
    speech_spectrum_db : ndarray, shape (18,)
        The cue's average speech spectrum level, dB SPL/Hz (speech as its long-term spectrum,
        as in Rhebergen and Versfeld 2005).
    background_frames : ndarray, shape (n_frames, 18)
        Windowed background band powers re full scale, one row per speech frame.
    offset_db : float
        SPL offset (:func:`spl_offset_db`).
    threshold_db_hl : ndarray, shape (18,)
        Hearing thresholds, dB HL.

    Returns
    -------
    float or None
        Mean SII, or ``None`` without frames.
    """
    if background_frames.shape[0] == 0:
        return None
    values = sii(speech_spectrum_db[None, :], spectrum_db(background_frames, offset_db), threshold_db_hl[None, :])
    return float(np.mean(values))
