"""Hearing profiles: hearing threshold levels on the 18 SII bands, from age presets or an audiogram.

The SII takes the listener's hearing threshold level T' in dB HL per band (ANSI S3.5-1997
clause 4.4). ``normal`` is 0 dB HL everywhere (audiometric zero is the median threshold of
young otologically normal listeners). The age presets are the median hearing threshold
deviation of otologically normal people of that age from ISO 7029:2017,

    dH_md(f, Y) = a(f) * (Y - 18) ** b(f)   dB, for age Y >= 18 years,

with the per-frequency coefficients ``a``, ``b`` of its Table 1 for men and for women; a
preset is the mean of the two (an audience of both sexes in equal numbers). ISO 7029:2017
gives its data for 18 to 80 years and marks the values above 70 years at 3 kHz to 8 kHz as
informative only, so ``age-80`` is a plausible, not a normative, profile there.

Audiograms and presets live on audiometric frequencies; they are carried onto the SII band
centres by linear interpolation in log frequency, holding the end values beyond the first
and last audiometric frequency.

References
----------
ISO 7029:2017, "Acoustics - Statistical distribution of hearing thresholds related to age and
gender", clause 4.2 and Table 1. The coefficients below were not read in the standard
itself: they are its Table 1 as transcribed in the open-source ``phonometry`` library
(``src/phonometry/hearing/threshold.py``); for instance 20.2 dB at 4 kHz for men of 60.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import numpy.typing as npt

from planner._typing import FloatArray
from planner.analysis.sii import SII_BANDS_HZ
from planner.errors import SettingsError

#: Names accepted by :func:`hearing_profile`.
PROFILE_NAMES = ("normal", "age-60", "age-70", "age-80")

#: Audiometric frequencies of ISO 7029 Table 1, Hz.
AUDIOMETRIC_HZ = (125.0, 250.0, 500.0, 750.0, 1000.0, 1500.0, 2000.0, 3000.0, 4000.0, 6000.0, 8000.0)

# ISO 7029:2017 Table 1, median coefficients (a, b) per audiometric frequency (see module
# docstring for where these numbers were read).
_ISO7029_MEN = (
    (2.50e-6, 3.841), (1.39e-4, 2.832), (4.59e-4, 2.537), (5.70e-4, 2.512), (7.02e-4, 2.494),
    (1.09e-3, 2.446), (1.56e-3, 2.404), (2.54e-3, 2.350), (3.40e-3, 2.325), (4.53e-3, 2.315),
    (5.06e-3, 2.328),
)  # fmt: skip
_ISO7029_WOMEN = (
    (6.16e-4, 2.451), (3.98e-4, 2.568), (2.61e-4, 2.708), (2.25e-4, 2.775), (2.21e-4, 2.805),
    (2.53e-4, 2.813), (3.12e-4, 2.792), (4.88e-4, 2.728), (7.37e-4, 2.660), (1.47e-3, 2.539),
    (2.53e-3, 2.439),
)  # fmt: skip

#: Age of each preset, years.
_PRESET_AGES = {"age-60": 60.0, "age-70": 70.0, "age-80": 80.0}

#: Accepted range of audiogram thresholds, dB HL (the span of clinical audiometers).
THRESHOLD_RANGE_DB_HL = (-10.0, 120.0)

_CSV_HEADER = ("frequency_hz", "threshold_db_hl")


@dataclass(frozen=True)
class HearingProfile:
    """A listener's hearing threshold level on the 18 SII bands.

    Parameters
    ----------
    name : str
        Profile name (``normal``, ``age-70``, ``audiogram``, ...), as shown in reports.
    thresholds_db_hl : tuple of float
        Hearing threshold level T' at each of :data:`planner.analysis.sii.SII_BANDS_HZ`, dB HL.
    """

    name: str
    thresholds_db_hl: tuple[float, ...]

    def __post_init__(self) -> None:
        if len(self.thresholds_db_hl) != len(SII_BANDS_HZ):
            raise SettingsError(
                f"hearing profile {self.name!r} has {len(self.thresholds_db_hl)} thresholds; "
                f"pass one per SII band ({len(SII_BANDS_HZ)})"
            )
        if not all(math.isfinite(t) for t in self.thresholds_db_hl):
            raise SettingsError(f"hearing profile {self.name!r} has a non-finite threshold; pass finite dB HL values")


def iso7029_median_db(age_years: float, *, sex: str = "both") -> FloatArray:
    """Median hearing threshold deviation from age 18 at :data:`AUDIOMETRIC_HZ` (ISO 7029:2017).

    Parameters
    ----------
    age_years : float
        Age, years, 18 to 80 (the range of ISO 7029:2017).
    sex : {"both", "men", "women"}, keyword-only
        ``both`` averages the medians of men and women (dB).

    Returns
    -------
    ndarray, shape (11,)
        ``a * (age - 18) ** b`` per audiometric frequency, dB.

    Raises
    ------
    SettingsError
        If the age is outside 18..80 or ``sex`` is unknown.
    """
    if not 18.0 <= age_years <= 80.0:
        raise SettingsError(f"age_years={age_years!r} must be between 18 and 80 (ISO 7029 range); pass an age in it")
    tables = {"men": (_ISO7029_MEN,), "women": (_ISO7029_WOMEN,), "both": (_ISO7029_MEN, _ISO7029_WOMEN)}
    if sex not in tables:
        raise SettingsError(f"sex={sex!r} must be one of both, men, women; pass one of those")
    # Clause 4.2, Table 1: dH_md = a (Y - 18)^b, per frequency.
    medians = [np.array([a * (age_years - 18.0) ** b for a, b in table]) for table in tables[sex]]
    return np.mean(medians, axis=0)


def _to_sii_bands(frequency_hz: npt.ArrayLike, db_hl: npt.ArrayLike) -> FloatArray:
    # Linear in log frequency between audiogram points, end values held beyond them.
    hz = np.asarray(frequency_hz, dtype=np.float64)
    return np.interp(np.log(SII_BANDS_HZ), np.log(hz), np.asarray(db_hl, dtype=np.float64))


def hearing_profile(name: str) -> HearingProfile:
    """A named preset: ``normal`` (0 dB HL) or the ISO 7029 median for ``age-60/70/80``.

    Parameters
    ----------
    name : str
        One of :data:`PROFILE_NAMES`.

    Returns
    -------
    HearingProfile

    Raises
    ------
    SettingsError
        If the name is not a preset.
    """
    if name == "normal":
        return HearingProfile("normal", (0.0,) * len(SII_BANDS_HZ))
    if name not in _PRESET_AGES:
        raise SettingsError(
            f"hearing={name!r} must be one of {', '.join(PROFILE_NAMES)}; pass one of those or an audiogram file"
        )
    median = iso7029_median_db(_PRESET_AGES[name])
    return HearingProfile(name, tuple(float(v) for v in _to_sii_bands(AUDIOMETRIC_HZ, median)))


def profile_from_points(
    frequency_hz: Sequence[float] | npt.ArrayLike,
    threshold_db_hl: Sequence[float] | npt.ArrayLike,
    *,
    name: str = "audiogram",
    path: str | Path | None = None,
) -> HearingProfile:
    """Hearing profile from audiogram points, interpolated onto the SII bands.

    Parameters
    ----------
    frequency_hz : sequence of float
        Audiogram frequencies, Hz, positive and strictly increasing, at least two.
    threshold_db_hl : sequence of float
        Hearing threshold level at each frequency, dB HL, within -10..120.
    name : str, keyword-only
        Profile name.
    path : str or Path, keyword-only, optional
        File the points came from, named in error messages.

    Returns
    -------
    HearingProfile

    Raises
    ------
    SettingsError
        If a value is missing, not a number, out of range or out of order.
    """
    hz = _numbers("frequency_hz", frequency_hz, path)
    db = _numbers("threshold_db_hl", threshold_db_hl, path)
    if hz.size != db.size:
        raise SettingsError(
            f"audiogram has {hz.size} frequencies but {db.size} thresholds; give one threshold per frequency",
            path=path,
        )
    if hz.size < 2:
        raise SettingsError(f"audiogram has {hz.size} point(s); give at least 2 frequencies with thresholds", path=path)
    for i, f in enumerate(hz):
        if f <= 0:
            raise SettingsError(f"frequency_hz[{i}]={f:g} must be positive; give frequencies in Hz", path=path)
        if i and f <= hz[i - 1]:
            raise SettingsError(
                f"frequency_hz[{i}]={f:g} is not above the previous {hz[i - 1]:g}; "
                "list frequencies in increasing order, each once",
                path=path,
            )
    lo, hi = THRESHOLD_RANGE_DB_HL
    for i, t in enumerate(db):
        if not lo <= t <= hi:
            raise SettingsError(
                f"threshold_db_hl[{i}]={t:g} at {hz[i]:g} Hz is outside {lo:g}..{hi:g} dB HL; "
                "give hearing threshold levels in dB HL as read from the audiogram",
                path=path,
            )
    return HearingProfile(name, tuple(float(v) for v in _to_sii_bands(hz, db)))


def _numbers(field: str, values: object, path: str | Path | None) -> FloatArray:
    if isinstance(values, (str, bytes)) or not isinstance(values, (Sequence, np.ndarray)):
        raise SettingsError(f"{field} must be a list of numbers, not {values!r}; give a list", path=path)
    out = []
    for i, v in enumerate(values):
        try:
            x = float(v)
        except (TypeError, ValueError):
            raise SettingsError(f"{field}[{i}]={v!r} is not a number; give plain numbers", path=path) from None
        if not math.isfinite(x):
            raise SettingsError(f"{field}[{i}]={v!r} is not a finite number; give plain numbers", path=path)
        out.append(x)
    return np.array(out, dtype=np.float64)


def parse_audiogram(text: str, *, path: str | Path | None = None, name: str = "audiogram") -> HearingProfile:
    """Hearing profile from the text of an audiogram file, CSV or JSON.

    CSV: header ``frequency_hz,threshold_db_hl`` then one row per frequency (blank lines
    ignored). JSON: ``{"frequency_hz": [...], "threshold_db_hl": [...]}`` or a mapping from
    frequency to threshold, e.g. ``{"250": 15, "500": 20}``. Text starting with ``{`` or
    ``[`` is read as JSON.

    Raises
    ------
    SettingsError
        If the text is neither form, or a value fails :func:`profile_from_points`.
    """
    body = text.lstrip("\ufeff").strip()
    if body.startswith(("{", "[")):
        return _parse_json(body, path, name)
    return _parse_csv(body, path, name)


def _parse_json(body: str, path: str | Path | None, name: str) -> HearingProfile:
    try:
        data = json.loads(body)
    except json.JSONDecodeError as exc:
        raise SettingsError(
            f"audiogram is not valid JSON ({exc.msg} at line {exc.lineno}); fix the file", path=path
        ) from None
    if not isinstance(data, Mapping):
        raise SettingsError(
            "audiogram JSON must be an object; see docs/methods.md for the two accepted forms", path=path
        )
    if set(data) == set(_CSV_HEADER):
        return profile_from_points(data["frequency_hz"], data["threshold_db_hl"], name=name, path=path)
    if any(key in data for key in _CSV_HEADER):
        raise SettingsError(
            "audiogram JSON needs both 'frequency_hz' and 'threshold_db_hl' lists and nothing else; "
            "add the missing one",
            path=path,
        )
    return profile_from_points(list(data.keys()), list(data.values()), name=name, path=path)


def _parse_csv(body: str, path: str | Path | None, name: str) -> HearingProfile:
    rows = [row for row in csv.reader(io.StringIO(body)) if any(cell.strip() for cell in row)]
    if not rows or tuple(cell.strip().lower() for cell in rows[0]) != _CSV_HEADER:
        found = ",".join(rows[0]) if rows else ""
        raise SettingsError(
            f"audiogram CSV must start with the header '{','.join(_CSV_HEADER)}' (found {found!r}); add that line",
            path=path,
        )
    for line, row in enumerate(rows[1:], start=2):
        if len(row) != 2:
            raise SettingsError(
                f"audiogram CSV row {line} has {len(row)} fields ({','.join(row)!r}); give frequency,threshold",
                path=path,
            )
    return profile_from_points([r[0].strip() for r in rows[1:]], [r[1].strip() for r in rows[1:]], name=name, path=path)


def load_audiogram(path: str | Path) -> HearingProfile:
    """Read an audiogram file (CSV or JSON, see :func:`parse_audiogram`) as a hearing profile.

    Raises
    ------
    SettingsError
        If the file cannot be read as UTF-8 text or its content is invalid.
    """
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SettingsError(
            f"cannot read the audiogram ({exc.__class__.__name__}); pass a UTF-8 CSV or JSON file", path=path
        ) from None
    return parse_audiogram(text, path=path)
