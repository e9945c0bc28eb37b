"""Hearing profiles: ISO 7029 age presets, interpolation onto the SII bands, audiogram files."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from planner.analysis.hearing import (
    PROFILE_NAMES,
    HearingProfile,
    hearing_profile,
    iso7029_median_db,
    load_audiogram,
    parse_audiogram,
    profile_from_points,
)
from planner.analysis.sii import SII_BANDS_HZ
from planner.errors import InputError, SettingsError

BAND = {int(f): i for i, f in enumerate(SII_BANDS_HZ)}

# ISO 7029:2017 Table 1 median coefficients (a, b) for men and women, as transcribed in the
# open-source phonometry library (src/phonometry/hearing/threshold.py); not read in the
# standard itself. Written out here so the expected values are computed by hand in the test.
TABLE_1 = {
    1000: ((7.02e-4, 2.494), (2.21e-4, 2.805)),
    2000: ((1.56e-3, 2.404), (3.12e-4, 2.792)),
    4000: ((3.40e-3, 2.325), (7.37e-4, 2.660)),
    8000: ((5.06e-3, 2.328), (2.53e-3, 2.439)),
}


def test_normal_is_audiometric_zero() -> None:
    # Definition: 0 dB HL is the reference threshold (ANSI S3.5 default T' = 0, clause 4.2).
    assert hearing_profile("normal") == HearingProfile("normal", (0.0,) * 18)


@pytest.mark.parametrize("age", [60, 70, 80], ids=["60", "70", "80"])
@pytest.mark.parametrize("frequency_hz", sorted(TABLE_1), ids=lambda f: f"{f}Hz")
def test_age_presets_follow_the_iso_7029_formula(age: int, frequency_hz: int) -> None:
    # Source: ISO 7029:2017 clause 4.2, dH_md = a (Y - 18)^b; mean of men and women. These four
    # audiometric frequencies are SII band centres, so interpolation is exact there.
    (a_m, b_m), (a_w, b_w) = TABLE_1[frequency_hz]
    expected = (a_m * (age - 18) ** b_m + a_w * (age - 18) ** b_w) / 2
    got = hearing_profile(f"age-{age}").thresholds_db_hl[BAND[frequency_hz]]
    assert got == pytest.approx(expected, abs=1e-9)


def test_iso_7029_published_check_value() -> None:
    # Source: phonometry reference data for ISO 7029:2017 Table 1: men of 60 at 4 kHz, 20.2085 dB.
    assert iso7029_median_db(60, sex="men")[8] == pytest.approx(20.2085, abs=1e-3)
    # Ground truth of the formula: no deviation at the reference age of 18.
    np.testing.assert_allclose(iso7029_median_db(18), 0.0, atol=1e-12)


def test_presets_grow_with_age_and_with_frequency_above_1_khz() -> None:
    # Source: ISO 7029 (hearing worsens with age, faster at high frequencies).
    levels = np.array([hearing_profile(n).thresholds_db_hl for n in PROFILE_NAMES])
    assert np.all(np.diff(levels, axis=0) > 0)
    high = levels[1:, BAND[1000] :]
    assert np.all(np.diff(high, axis=1) > 0)


def test_interpolation_between_audiometric_frequencies_is_linear_in_log_frequency() -> None:
    # Ground truth: 1600 Hz lies at log(1600/1500)/log(2000/1500) between the 1500 and 2000 Hz
    # points; beyond the last point the value is held.
    got = profile_from_points([1500.0, 2000.0], [10.0, 30.0]).thresholds_db_hl
    w = np.log(1600 / 1500) / np.log(2000 / 1500)
    assert got[BAND[1600]] == pytest.approx(10.0 + 20.0 * w, abs=1e-12)
    assert got[BAND[160]] == 10.0 and got[BAND[8000]] == 30.0


@given(
    st.lists(st.floats(-10.0, 120.0, allow_nan=False), min_size=11, max_size=11),
)
def test_interpolation_is_exact_at_audiogram_frequencies(levels: list[float]) -> None:
    # Ground truth: at an audiogram frequency that is also an SII band centre, the band gets
    # the audiogram's own value.
    hz = [125.0, 250.0, 500.0, 750.0, 1000.0, 1500.0, 2000.0, 3000.0, 4000.0, 6000.0, 8000.0]
    got = profile_from_points(hz, levels).thresholds_db_hl
    for f, level in zip(hz, levels, strict=True):
        if int(f) in BAND:
            assert got[BAND[int(f)]] == pytest.approx(level, abs=1e-9)


POINTS = [(250, 10), (500, 15), (1000, 20), (2000, 35), (4000, 50), (8000, 65)]


@pytest.mark.parametrize(
    ("filename", "text"),
    [
        ("a.csv", "frequency_hz,threshold_db_hl\n" + "".join(f"{f},{t}\n" for f, t in POINTS)),
        ("b.csv", "\ufeff frequency_hz , threshold_db_hl \n\n" + "".join(f" {f} , {t} \n" for f, t in POINTS)),
        ("c.json", json.dumps({"frequency_hz": [f for f, _ in POINTS], "threshold_db_hl": [t for _, t in POINTS]})),
        ("d.json", json.dumps({str(f): t for f, t in POINTS})),
    ],
    ids=["csv", "csv-bom-spaces", "json-lists", "json-mapping"],
)
def test_audiogram_files_in_every_form_give_the_same_profile(tmp_path: Path, filename: str, text: str) -> None:
    # Ground truth: the same six points, whichever form; 1000 Hz reads 20 dB HL, 4000 Hz 50.
    path = tmp_path / filename
    path.write_text(text, encoding="utf-8")
    profile = load_audiogram(path)
    expected = profile_from_points([f for f, _ in POINTS], [t for _, t in POINTS])
    assert profile == expected
    assert profile.thresholds_db_hl[BAND[1000]] == 20.0 and profile.thresholds_db_hl[BAND[4000]] == 50.0


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("frequency_hz,threshold_db_hl\n1000,20\n", r"1 point\(s\); give at least 2"),
        ("frequency_hz,threshold_db_hl\n1000,20\n500,30\n", r"frequency_hz\[1\]=500 is not above the previous 1000"),
        ("frequency_hz,threshold_db_hl\n500,20\n500,30\n", r"frequency_hz\[1\]=500 is not above"),
        ("frequency_hz,threshold_db_hl\n0,20\n500,30\n", r"frequency_hz\[0\]=0 must be positive"),
        ("frequency_hz,threshold_db_hl\n-250,20\n500,30\n", r"frequency_hz\[0\]=-250 must be positive"),
        ("frequency_hz,threshold_db_hl\n250,20\n500,130\n", r"threshold_db_hl\[1\]=130 at 500 Hz is outside -10..120"),
        ("frequency_hz,threshold_db_hl\n250,-15\n500,30\n", r"threshold_db_hl\[0\]=-15 at 250 Hz is outside"),
        ("frequency_hz,threshold_db_hl\n250,abc\n500,30\n", r"threshold_db_hl\[0\]='abc' is not a number"),
        ("frequency_hz,threshold_db_hl\n250,nan\n500,30\n", r"threshold_db_hl\[0\]='nan' is not a finite number"),
        ("frequency_hz,threshold_db_hl\n250,20,5\n500,30\n", r"row 2 has 3 fields"),
        ("hz,db\n250,20\n500,30\n", r"must start with the header 'frequency_hz,threshold_db_hl' \(found 'hz,db'\)"),
        ("", r"must start with the header"),
        ('{"frequency_hz": [250, 500]}', r"needs both 'frequency_hz' and 'threshold_db_hl'"),
        ('{"frequency_hz": [250, 500], "threshold_db_hl": [10]}', r"2 frequencies but 1 thresholds"),
        ('{"frequency_hz": "250", "threshold_db_hl": [10]}', r"frequency_hz must be a list of numbers"),
        ('{"250": 10, "125": 5}', r"frequency_hz\[1\]=125 is not above the previous 250"),
        ('{"250": 10,', r"not valid JSON"),
        ("[1, 2]", r"audiogram JSON must be an object"),
    ],
    ids=[
        "one-point", "unsorted", "duplicate", "zero-hz", "negative-hz", "too-loud", "too-quiet", "not-a-number",
        "nan", "extra-field", "bad-header", "empty", "json-missing-list", "json-length", "json-not-list",
        "json-mapping-unsorted", "json-broken", "json-array",
    ],
)  # fmt: skip
def test_bad_audiograms_raise_with_the_bad_value(tmp_path: Path, text: str, match: str) -> None:
    path = tmp_path / "audiogram.txt"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(SettingsError, match=match) as info:
        load_audiogram(path)
    assert isinstance(info.value, InputError) and info.value.path == str(path)


def test_unreadable_audiogram_file(tmp_path: Path) -> None:
    with pytest.raises(SettingsError, match="cannot read the audiogram"):
        load_audiogram(tmp_path / "missing.csv")
    latin = tmp_path / "latin.csv"
    latin.write_bytes(b"frequency_hz,threshold_db_hl\n250,20\xb0\n")
    with pytest.raises(SettingsError, match="UTF-8"):
        load_audiogram(latin)


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: hearing_profile("age-90"), r"hearing='age-90' must be one of normal, age-60, age-70, age-80"),
        (lambda: iso7029_median_db(85), r"age_years=85 must be between 18 and 80"),
        (lambda: iso7029_median_db(60, sex="x"), r"sex='x' must be one of"),
        (lambda: HearingProfile("x", (0.0,) * 5), r"has 5 thresholds"),
        (lambda: HearingProfile("x", (float("inf"),) * 18), r"non-finite threshold"),
    ],
    ids=["unknown-preset", "age-out-of-range", "sex", "short-profile", "inf-profile"],
)
def test_bad_profile_requests_raise(call: object, match: str) -> None:
    with pytest.raises(SettingsError, match=match):
        call()  # type: ignore[operator]


def test_parse_audiogram_without_a_file() -> None:
    # Ground truth: the pure parser gives the same profile as a file would.
    profile = parse_audiogram("frequency_hz,threshold_db_hl\n500,10\n4000,40\n", name="left ear")
    assert profile.name == "left ear" and profile.thresholds_db_hl[BAND[4000]] == 40.0
