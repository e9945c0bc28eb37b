"""SMPTE ST 12-1 timecode against published values and two reference libraries.

References used only here: the PyPI ``timecode`` package (1.5.x) and OpenTimelineIO's
``opentime``. Check values come from ../shared/CHECKS.md section 5, whose rows name their
source ([calc] = computed from the ST 12-1 drop-frame rule, agreeing with OpenTimelineIO).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import opentimelineio.opentime as otime
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from timecode import Timecode

from planner.errors import InputError, SettingsError
from planner.io.timecode import (
    FrameRate,
    frame_rate,
    frames_to_timecode,
    seconds_to_timecode,
    seconds_to_video_frames,
    timecode_to_frames,
    timecode_to_seconds,
)
from planner.settings import FRAME_RATES

#: Every (name, drop_frame) combination the tool accepts.
ALL_RATES = [(n, False) for n in FRAME_RATES] + [("29.97", True), ("59.94", True)]
RATE_IDS = [f"{n}{'DF' if df else ''}" for n, df in ALL_RATES]

DF2997 = frame_rate("29.97", drop_frame=True)
DF5994 = frame_rate("59.94", drop_frame=True)


def _reference_tc(frames: int, name: str, drop_frame: bool) -> Timecode:
    """The `timecode` package's label for our 0-based frame count.

    That package numbers frames from 1 (``Timecode(r, "00:00:00:00").frames == 1``, read in
    its source ``tc_to_frames`` -> ``frame_number + 1``), so our frame n is its frame n + 1.
    It turns drop-frame on by itself for 29.97/59.94; ``force_non_drop_frame`` turns it off.
    """
    return Timecode(name, frames=frames + 1, force_non_drop_frame=not drop_frame)


# --------------------------------------------------------------------------- published values


@pytest.mark.parametrize(
    ("rate", "frames", "tc"),
    [
        # CHECKS.md s5 "29.97 DF: frame 1799 / 1800 / 1801" [calc] = OpenTimelineIO
        (DF2997, 1799, "00:00:59;29"),
        (DF2997, 1800, "00:01:00;02"),
        (DF2997, 1801, "00:01:00;03"),
        # CHECKS.md s5 "29.97 DF: frame 17981 / 17982" [calc]
        (DF2997, 17981, "00:09:59;29"),
        (DF2997, 17982, "00:10:00;00"),
        # CHECKS.md s5 "frames per 10 min / hour / 24 h: 17982 / 107892 / 2589408" [calc]
        (DF2997, 107892, "01:00:00;00"),
        (DF2997, 2589408 - 1, "23:59:59;29"),
        # CHECKS.md s5 "59.94 DF: frame 3599 / 3600; per 10 min; per hour" [calc] = OpenTimelineIO
        (DF5994, 3599, "00:00:59;59"),
        (DF5994, 3600, "00:01:00;04"),
        (DF5994, 35964, "00:10:00;00"),
        (DF5994, 215784, "01:00:00;00"),
        # CHECKS.md s5 "29.97 NDF 01:00:00:00 = 108000 frames", "23.976 NDF = 86400 frames" [calc]
        (frame_rate("29.97"), 108000, "01:00:00:00"),
        (frame_rate("23.976"), 86400, "01:00:00:00"),
    ],
    ids=[
        "df2997-1799", "df2997-1800", "df2997-1801", "df2997-17981", "df2997-17982", "df2997-hour",
        "df2997-last-of-day", "df5994-3599", "df5994-3600", "df5994-10min", "df5994-hour",
        "ndf2997-hour", "ndf23976-hour",
    ],
)  # fmt: skip
def test_published_frame_labels(rate: FrameRate, frames: int, tc: str) -> None:
    assert frames_to_timecode(frames, rate) == tc
    assert timecode_to_frames(tc, rate) == frames


def test_frames_per_day_drop_frame() -> None:
    # CHECKS.md s5: 29.97 DF has 2589408 frames per 24 h [calc]; 59.94 DF 144 x 35964.
    assert DF2997.frames_per_day == 2589408
    assert DF5994.frames_per_day == 144 * 35964


@pytest.mark.parametrize(
    ("rate", "tc", "seconds"),
    [
        # CHECKS.md s5 "29.97 DF 01:00:00;00 in real time = 107892 x 1001/30000 = 3599.9964 s" [calc]
        (DF2997, "01:00:00;00", 3599.9964),
        # CHECKS.md s5 "29.97 NDF 01:00:00:00 = 3603.6 s real" and "23.976 NDF = 3603.6 s" [calc]
        (frame_rate("29.97"), "01:00:00:00", 3603.6),
        (frame_rate("23.976"), "01:00:00:00", 3603.6),
        (frame_rate("25"), "01:00:00:00", 3600.0),
    ],
    ids=["df2997", "ndf2997", "ndf23976", "25"],
)
def test_hour_of_timecode_in_real_seconds(rate: FrameRate, tc: str, seconds: float) -> None:
    assert timecode_to_seconds(tc, rate) == pytest.approx(seconds, abs=1e-9)


@pytest.mark.parametrize(
    ("name", "frame_ms"),
    # CHECKS.md s5 "Frame durations", tolerance 1 us [calc]
    [("23.976", 41.708), ("24", 41.667), ("25", 40.000), ("29.97", 33.367), ("50", 20.000), ("59.94", 16.683)],
    ids=["23.976", "24", "25", "29.97", "50", "59.94"],
)
def test_frame_durations(name: str, frame_ms: float) -> None:
    assert float(frame_rate(name).frame_s) * 1000.0 == pytest.approx(frame_ms, abs=1e-3)


def test_drift_24_against_23976_after_40_minutes() -> None:
    # CHECKS.md s5 "Drift signatures: 24 vs 23.976 -> 2.40 s after 40 min" [calc]
    slow = timecode_to_seconds("00:40:00:00", frame_rate("23.976"))
    drift = slow - timecode_to_seconds("00:40:00:00", frame_rate("24"))
    assert drift == pytest.approx(2.40, abs=1e-9)


def test_exact_rates() -> None:
    # CHECKS.md s5 "Rates (exact)": 24000/1001, 30000/1001, 60000/1001 (FM, ST 12-1)
    assert frame_rate("23.976").fps == Fraction(24000, 1001)
    assert frame_rate("29.97").fps == Fraction(30000, 1001)
    assert frame_rate("59.94", drop_frame=True).fps == Fraction(60000, 1001)


# --------------------------------------------------------------------------- reference libraries


@pytest.mark.parametrize(("name", "drop_frame"), ALL_RATES, ids=RATE_IDS)
def test_matches_timecode_package_on_random_frames(rng: np.random.Generator, name: str, drop_frame: bool) -> None:
    rate = frame_rate(name, drop_frame)
    # 2000 random counts per rate (18 000 in all) plus the edges of the day; the package's
    # own 24 h roll-over is not used, so every count stays inside one day.
    counts = [0, 1, rate.frames_per_day - 1, *rng.integers(0, rate.frames_per_day, 2000).tolist()]
    for n in counts:
        ref = _reference_tc(n, name, drop_frame)
        tc = frames_to_timecode(n, rate)
        assert tc == str(ref), n
        # reverse direction against the package's parser (again 1-based)
        assert timecode_to_frames(tc, rate) == Timecode(name, tc, force_non_drop_frame=not drop_frame).frames - 1


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(ALL_RATES), st.data())
def test_matches_timecode_package_property(rate_key: tuple[str, bool], data: st.DataObject) -> None:
    name, drop_frame = rate_key
    rate = frame_rate(name, drop_frame)
    n = data.draw(st.integers(0, rate.frames_per_day - 1))
    assert frames_to_timecode(n, rate) == str(_reference_tc(n, name, drop_frame))


@pytest.mark.parametrize("name", ["29.97", "59.94"])
def test_drop_frame_matches_opentimelineio(rng: np.random.Generator, name: str) -> None:
    rate = frame_rate(name, drop_frame=True)
    fps = float(rate.fps)
    # OpenTimelineIO 0.18 wraps at 24 h as well; stay inside one day.
    for n in rng.integers(0, rate.frames_per_day, 2000).tolist():
        tc = frames_to_timecode(n, rate)
        assert tc == otime.to_timecode(otime.RationalTime(n, fps), fps, True), n
        assert timecode_to_frames(tc, rate) == round(otime.from_timecode(tc, fps).value)


def test_start_offset_matches_timecode_package_addition(rng: np.random.Generator) -> None:
    # The programme start is added once: the label k frames after a start equals the
    # reference package's start timecode advanced by k frames.
    for name, drop_frame in ALL_RATES:
        rate = frame_rate(name, drop_frame)
        start = "01:00:00;00" if drop_frame else "10:00:00:00"
        for k in rng.integers(0, 50 * 3600 * rate.nominal // 100, 200).tolist():
            ref = Timecode(name, start, force_non_drop_frame=not drop_frame)
            ref.add_frames(k)
            t_s = Fraction(k) / rate.fps  # exact time of frame k
            assert seconds_to_timecode(t_s, rate, start=start) == str(ref)


# --------------------------------------------------------------------------- properties


@settings(max_examples=400, deadline=None)
@given(st.sampled_from(ALL_RATES), st.data())
def test_frames_timecode_round_trip(rate_key: tuple[str, bool], data: st.DataObject) -> None:
    rate = frame_rate(*rate_key)
    n = data.draw(st.integers(0, rate.frames_per_day - 1))
    tc = frames_to_timecode(n, rate)
    assert timecode_to_frames(tc, rate) == n
    assert tc[8] == (";" if rate.drop_frame else ":")


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(ALL_RATES), st.data())
def test_seconds_of_frame_start_round_trip(rate_key: tuple[str, bool], data: st.DataObject) -> None:
    # Ground truth: frame k starts at k / fps seconds; its float must map back to frame k.
    rate = frame_rate(*rate_key)
    k = data.draw(st.integers(0, 3 * 3600 * rate.nominal))
    start = data.draw(st.sampled_from(["00:00:00:00", "01:00:00:00", "10:00:00:00"]))
    t_s = float(Fraction(k) / rate.fps)
    assert seconds_to_video_frames(t_s, rate) == k
    tc = seconds_to_timecode(t_s, rate, start=start)
    assert timecode_to_seconds(tc, rate, start=start) == t_s
    assert timecode_to_frames(tc, rate) == timecode_to_frames(start, rate) + k


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(["25", "50"]), st.integers(-10_000, 1_000_000))
def test_nearest_frame_halves_round_up(name: str, k: int) -> None:
    # At 25 and 50 fps the midpoint (k + 1/2) / fps is a terminating decimal, so the float
    # written means exactly the half; the project's rule (planner/units.py) rounds it up.
    rate = frame_rate(name)
    mid_s = float(Fraction(2 * k + 1, 2 * rate.nominal))
    assert seconds_to_video_frames(mid_s, rate) == k + 1
    assert seconds_to_video_frames(float(Fraction(k) / rate.fps), rate) == k


@pytest.mark.parametrize(
    ("t_s", "frame"),
    # constructed: 25 fps frames are 40 ms; 20 ms is exactly half a frame
    [(0.0, 0), (0.0199, 0), (0.02, 1), (0.06, 2), (0.0599, 1), (-0.02, 0), (-0.0201, -1)],
    ids=["zero", "below-half", "half", "one-and-half", "below-one-and-half", "minus-half", "below-minus-half"],
)
def test_nearest_frame_examples(t_s: float, frame: int) -> None:
    assert seconds_to_video_frames(t_s, frame_rate("25")) == frame


@pytest.mark.parametrize(
    ("rate", "start", "t_s", "tc"),
    [
        # constructed: an hour of 25 fps after a 10:00:00:00 start
        (frame_rate("25"), "10:00:00:00", 0.0, "10:00:00:00"),
        (frame_rate("25"), "10:00:00:00", 3600.0, "11:00:00:00"),
        (frame_rate("25"), "10:00:00:00", -5.0, "09:59:55:00"),
        # CHECKS.md s5: 29.97 DF one hour = 107892 frames, so 3599.9964 s after 01:00:00;00 is 02:00:00;00
        (DF2997, "01:00:00;00", 3599.9964, "02:00:00;00"),
        # the default start written with ':' is accepted at a drop-frame rate
        (DF2997, "00:00:00:00", 60.06, "00:01:00;02"),
    ],
    ids=["start", "one-hour", "before-start", "df-hour", "df-colon-start"],
)
def test_start_offset(rate: FrameRate, start: str, t_s: float, tc: str) -> None:
    assert seconds_to_timecode(t_s, rate, start=start) == tc
    assert timecode_to_seconds(tc, rate, start=start) == pytest.approx(t_s, abs=1e-9)


# --------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("tc", "rate", "match"),
    [
        ("1:00:00:00", frame_rate("25"), r"not HH:MM:SS:FF"),
        ("01:00:00", frame_rate("25"), r"not HH:MM:SS:FF"),
        ("01:00:00:00 ", frame_rate("25"), r"not HH:MM:SS:FF"),
        ("aa:bb:cc:dd", frame_rate("25"), r"not HH:MM:SS:FF"),
        ("", frame_rate("25"), r"not HH:MM:SS:FF"),
        ("01:00:00.00", frame_rate("25"), r"not HH:MM:SS:FF"),
        ("24:00:00:00", frame_rate("25"), r"out of range"),
        ("00:60:00:00", frame_rate("25"), r"out of range"),
        ("00:00:60:00", frame_rate("25"), r"out of range"),
        ("00:00:00:25", frame_rate("25"), r"frames 25, but 25 fps counts frames 00-24"),
        ("00:00:00:30", DF2997, r"frames 30, but 29.97 fps counts frames 00-29"),
        ("00:00:00;00", frame_rate("25"), r"drop-frame \(';'\) but the rate is 25 non-drop"),
        ("00:01:00;00", DF2997, r"does not exist in drop-frame.*next label is 00:01:00;02"),
        ("00:01:00;01", DF2997, r"does not exist in drop-frame"),
        ("00:01:00:01", DF2997, r"does not exist in drop-frame"),
        ("01:59:00;03", DF5994, r"frame numbers 00-03 are skipped.*01:59:00;04"),
    ],
    ids=[
        "one-digit-hours", "three-fields", "trailing-space", "letters", "empty", "dot-separator",
        "hours-24", "minutes-60", "seconds-60", "frames-25-at-25", "frames-30-at-2997", "semicolon-ndf",
        "dropped-00", "dropped-01", "dropped-with-colon", "dropped-5994",
    ],
)  # fmt: skip
def test_bad_timecodes(tc: str, rate: FrameRate, match: str) -> None:
    with pytest.raises(InputError, match=match):
        timecode_to_frames(tc, rate)


def test_tenth_minute_keeps_frame_00_in_drop_frame() -> None:
    # ST 12-1 drop-frame rule (CHECKS.md s5): minutes 00, 10, 20 ... keep frames 00 and 01.
    assert timecode_to_frames("00:20:00;00", DF2997) == 2 * 17982
    assert timecode_to_frames("00:20:00;01", DF2997) == 2 * 17982 + 1


@pytest.mark.parametrize(
    ("frames", "match"),
    [
        (-1, r"frames=-1 is outside"),
        (2589408, r"frames=2589408 is outside"),
        (1.5, r"whole number"),
        (True, r"whole number"),
    ],
    ids=["negative", "next-day", "float", "bool"],
)
def test_bad_frame_counts(frames: int, match: str) -> None:
    with pytest.raises(InputError, match=match):
        frames_to_timecode(frames, DF2997)


@pytest.mark.parametrize(
    ("t_s", "start", "match"),
    [
        (float("nan"), "00:00:00:00", r"not finite"),
        (float("inf"), "00:00:00:00", r"not finite"),
        (-1.0, "00:00:00:00", r"falls outside"),
        (3 * 3600.0, "22:00:00:00", r"falls outside"),
        (0.0, "10:00:00", r"not HH:MM:SS:FF"),
        ("1.0", "00:00:00:00", r"must be a number of seconds"),
    ],
    ids=["nan", "inf", "before-midnight", "after-midnight", "bad-start", "string"],
)
def test_bad_seconds(t_s: float, start: str, match: str) -> None:
    with pytest.raises(InputError, match=match):
        seconds_to_timecode(t_s, frame_rate("25"), start=start)


@pytest.mark.parametrize(
    ("name", "drop_frame", "match"),
    [
        ("48", False, r"fps='48' must be one of 23.976, 24, 25, 29.97, 30, 50, 59.94"),
        ("29.976", False, r"must be one of"),
        ("25", True, r"drop_frame=True needs fps 29.97 or 59.94, not fps=25"),
        ("23.976", True, r"drop_frame=True needs fps 29.97 or 59.94"),
    ],
    ids=["unknown-48", "typo", "df-at-25", "df-at-23976"],
)
def test_bad_frame_rates(name: str, drop_frame: bool, match: str) -> None:
    with pytest.raises(SettingsError, match=match):
        frame_rate(name, drop_frame)


def test_frame_rate_record_is_validated() -> None:
    with pytest.raises(SettingsError, match=r"exactly 30000/1001"):
        FrameRate(name="29.97", fps=Fraction(2997, 100), drop_frame=True, nominal=30)


def test_every_settings_rate_is_known() -> None:
    # planner.settings.FRAME_RATES is the list users choose from; each must build.
    assert [frame_rate(n).name for n in FRAME_RATES] == list(FRAME_RATES)


def test_frame_rate_record_rejects_unknown_name_and_non_text_timecode() -> None:
    with pytest.raises(SettingsError, match=r"fps='48' must be one of"):
        FrameRate(name="48", fps=Fraction(48), drop_frame=False, nominal=48)
    with pytest.raises(InputError, match=r"must be text such as '01:00:00:00'"):
        timecode_to_frames(3600, frame_rate("25"))  # type: ignore[arg-type]
