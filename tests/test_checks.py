"""House-style profile loading and the subtitle-check arithmetic.

Default values are checked against CHECKS.md section 6 (public subtitle style guides,
common practice; the 1.5 s sync bound as quoted in the W3C note "Requirements for Media
Timed Events"). Counting rules are checked on hand-made text and with Hypothesis.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from planner.analysis.checks import (
    FLAGS,
    HouseStyle,
    cps,
    default_style,
    load_style,
    pair_flags,
    reading_chars,
    style_from_toml,
    visible_lines,
)
from planner.errors import SettingsError

PROFILE = Path(__file__).resolve().parent.parent / "planner" / "profiles" / "default.toml"


def test_default_profile_holds_the_published_values() -> None:
    style = load_style(None)
    assert style.max_cps == 17.0  # adults, public streaming style guides (CP, CHECKS §6)
    assert style.max_chars_per_line == 42  # CP, CHECKS §6
    assert style.max_lines == 2  # public broadcaster guideline summaries, CHECKS §6
    assert style.min_gap_frames == 2  # CP, CHECKS §6
    assert style.min_duration_s == pytest.approx(5 / 6, abs=1e-3)  # 20 frames at 24 fps, CHECKS §6
    assert style.max_duration_s == 7.0  # CP, CHECKS §6
    assert style.late_in_s == style.early_out_s == 1.5  # W3C Media Timed Events note quote, CHECKS §6
    # The dataclass defaults and the packaged file say the same thing.
    assert style == HouseStyle() == load_style(PROFILE)


def test_every_default_has_a_source_comment() -> None:
    # House rule: a comment beside each default saying where it comes from.
    text = PROFILE.read_text(encoding="utf-8").splitlines()
    for i, line in enumerate(text):
        if "=" in line and not line.startswith("#"):
            above = " ".join(text[max(i - 5, 0) : i]).lower()
            assert any(w in above for w in ("common practice", "w3c", "guideline", "from memory")), line


def test_a_partial_profile_keeps_the_other_defaults() -> None:
    style = style_from_toml("max_cps = 13.0  # children's programmes (CP)\n")
    assert style.max_cps == 13.0
    assert style.max_lines == default_style().max_lines


@pytest.mark.parametrize(
    "text, match",
    [
        ("max_cps = [", "not valid TOML"),
        ("max_cpss = 15", "unknown key 'max_cpss'"),
        ("max_cps = 0.5", "max_cps=0.5 must be between 1.0 and 60.0"),
        ("max_lines = 2.5", "max_lines=2.5 must be a whole number"),
        ('late_in_s = "soon"', "late_in_s='soon' must be a number"),
        ("min_duration_s = 8.0", "min_duration_s=8.0 must not exceed max_duration_s=7.0"),
        ("max_lines = true", "max_lines=True must be a whole number"),
    ],
    ids=["syntax", "unknown", "range", "not-whole", "not-number", "min-over-max", "bool"],
)
def test_bad_profiles_name_the_key(text: str, match: str) -> None:
    with pytest.raises(SettingsError, match=match):
        style_from_toml(text, source="house.toml")


def test_profile_file_errors_name_the_file(tmp_path: Path) -> None:
    bad = tmp_path / "house.toml"
    bad.write_text("max_chars_per_line = 500\n", encoding="utf-8")
    with pytest.raises(SettingsError, match=r"house\.toml: max_chars_per_line=500"):
        load_style(bad)
    with pytest.raises(SettingsError, match="cannot read the profile"):
        load_style(tmp_path / "missing.toml")


def test_markup_is_not_read() -> None:
    # HTML-like tags (SRT/WebVTT) and brace override codes are not shown on screen.
    text = "<i>Hello,</i> Maren.\n{\\an8}<font color=\"#ffff00\">Coffee?</font>"
    assert visible_lines(text) == ["Hello, Maren.", "Coffee?"]
    assert reading_chars(text) == 13 + 7


def test_cps_is_characters_over_seconds() -> None:
    assert cps("x" * 34, 2.0) == 17.0
    assert cps("abc", 0.0) == 300.0  # durations floored at 10 ms


@given(st.lists(st.text(alphabet="abc ,.?!'", min_size=1, max_size=30).map(str.strip).filter(bool), min_size=1, max_size=4))
def test_reading_chars_adds_up_over_lines(lines: list[str]) -> None:
    assert reading_chars("\n".join(lines)) == sum(len(line) for line in lines)
    assert visible_lines("\n".join(lines)) == lines


@given(st.lists(st.tuples(st.integers(0, 500), st.integers(1, 100)), min_size=1, max_size=8))
def test_pair_flags_agree_with_a_direct_pairwise_check(raw: list[tuple[int, int]]) -> None:
    # Slow oracle: overlap of any two spans, gap between consecutive spans (tenths of a second).
    spans = sorted((a / 10, (a + d) / 10) for a, d in raw)
    got = pair_flags(spans, 0.08)
    for i, (a, b) in enumerate(spans):
        overlaps = any(j != i and a < spans[j][1] and spans[j][0] < b for j in range(len(spans)))
        assert ("overlap" in got[i]) == overlaps
    assert set().union(*got) <= set(FLAGS)
