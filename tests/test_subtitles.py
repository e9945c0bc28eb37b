"""SRT / WebVTT reading and writing against constructed files and the pysrt reference reader.

Ground truth: the fixtures in fixtures/subtitles/ are written by fixtures/make_subtitle_fixtures.py
with its own small writer (not the code under test), and its ``build()`` returns the cues each
file holds. pysrt (a runtime dependency, used here only as an independent reader) checks the
SRT files. The WebVTT syntax checked is the W3C "WebVTT: The Web Video Text Tracks Format"
file syntax (timestamps ``[HH:]MM:SS.mmm``, spaces around ``-->``, STYLE/REGION before cues,
end greater than start).
"""

from __future__ import annotations

import codecs
import dataclasses
import importlib.util
import math
import re
import sys
from pathlib import Path

import pysrt
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.errors import InputError, OutputError, SettingsError, SubtitleInputError
from planner.io import subtitles
from planner.io.subtitles import (
    TOLERANCES,
    format_subtitles,
    output_encoding,
    parse_subtitles,
    read_subtitles,
    write_subtitles,
)
from planner.model import Cue, SubtitleTrack

REPO = Path(__file__).resolve().parent.parent
FIXTURE_DIR = REPO / "fixtures" / "subtitles"


def _load_generator():  # type: ignore[no-untyped-def]
    path = REPO / "fixtures" / "make_subtitle_fixtures.py"
    spec = importlib.util.spec_from_file_location("make_subtitle_fixtures", path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up while building
    spec.loader.exec_module(module)
    return module


GEN = _load_generator()
BUILT = GEN.build()
GOOD = sorted(name for name, (_, cues, _) in BUILT.items() if cues is not None)
BAD = sorted(name for name, (_, cues, _) in BUILT.items() if cues is None)


def _note(key: str) -> str:
    """Regex matching the note of one tolerance (its text from the one table)."""
    return re.escape(TOLERANCES[key])


# --------------------------------------------------------------------------- fixtures on disk


def test_fixtures_are_current_and_listed() -> None:
    # The committed files are exactly what the seeded generator makes, and the README has a line for each.
    on_disk = sorted(p.name for p in FIXTURE_DIR.iterdir() if p.name != "README.md")
    assert on_disk == sorted(BUILT)
    for name, (data, _, _) in BUILT.items():
        assert (FIXTURE_DIR / name).read_bytes() == data, name
    readme = (FIXTURE_DIR / "README.md").read_text(encoding="utf-8")
    assert all(f"`{name}`" in readme for name in BUILT)


# expected encoding, BOM and notes (regexes) of each readable fixture; cues come from the generator
EXPECTED = {
    "utf8.srt": ("utf-8", False, []),
    "utf8_bom.srt": ("utf-8", True, []),
    "utf16le_bom.srt": ("utf-16-le", True, []),
    "utf16be_bom.srt": ("utf-16-be", True, []),
    # the extra cue (7) starts at line 29 of these files: the first non-UTF-8 byte is there
    "cp1252.srt": ("cp1252", False, [r"^not valid UTF-8 \(first at line 29\); read as cp1252$"]),
    "latin1.srt": ("latin-1", False, [r"^not valid UTF-8 \(first at line 29\); read as latin-1$"]),
    "utf8.vtt": ("utf-8", False, []),
    "utf8_bom.vtt": ("utf-8", True, []),
    "utf16le_bom.vtt": ("utf-16-le", True, []),
    "crlf.vtt": ("utf-8", False, []),
    # 6 cues x 4-5 lines = 26 line ends, each CRLF (or CR)
    "crlf.srt": ("utf-8", False, [_note("srt-line-ends") + r" \(26 lines, first at line 1\)"]),
    "cr_only.srt": ("utf-8", False, [_note("srt-line-ends") + r" \(26 lines, first at line 1\)"]),
    "dot_ms.srt": ("utf-8", False, [_note("srt-dot-milliseconds") + r" \(2 lines, first at line 6\)"]),
    "trailing_spaces.srt": ("utf-8", False, [_note("trailing-whitespace") + r" \(3 lines, first at line 2\)"]),
    # ids 1 2 5 4 10 011: positions 3, 5 and 6 are out of sequence (lines 10, 19, 23)
    "numbering.srt": ("utf-8", False, [_note("srt-numbering") + r" \(3 lines, first at line 10\)"]),
    "no_final_blank.srt": ("utf-8", False, [_note("srt-final-blank-line") + r" \(line 25\)"]),
    "extra_blanks.srt": ("utf-8", False, [_note("srt-extra-blank-lines") + r" \(2 lines, first at line 1\)"]),
    "note_between.vtt": ("utf-8", False, [_note("vtt-notes-skipped") + r" \(line 16\)"]),
    "overlap.srt": ("utf-8", False, []),
    "empty_text.srt": ("utf-8", False, []),
}


def test_every_readable_fixture_has_expectations() -> None:
    assert sorted(EXPECTED) == GOOD


@pytest.mark.parametrize("name", GOOD)
def test_fixture_parses_to_constructed_cues(name: str) -> None:
    track = read_subtitles(FIXTURE_DIR / name)
    specs = BUILT[name][1]
    encoding, bom, notes = EXPECTED[name]
    assert track.format == name.rsplit(".", 1)[1]
    assert (track.encoding, track.bom) == (encoding, bom)
    assert len(track.notes) == len(notes)
    for note, pattern in zip(track.notes, notes):
        assert re.search(pattern, note), note
    assert [c.index for c in track.cues] == list(range(1, len(specs) + 1))
    got = [(c.cue_id, c.start_s, c.end_s, c.text, c.settings) for c in track.cues]
    want = [(s.cue_id, s.start_ms / 1000, s.end_ms / 1000, s.text, s.settings) for s in specs]
    assert got == want


def test_webvtt_header_kept_verbatim() -> None:
    # the generator's header: signature line, a STYLE block and a NOTE block before the first cue
    assert read_subtitles(FIXTURE_DIR / "utf8.vtt").header == GEN.VTT_HEADER
    assert read_subtitles(FIXTURE_DIR / "note_between.vtt").header == GEN.VTT_HEADER


def test_overlapping_cues_are_legal() -> None:
    # constructed: cue 3 starts 400 ms before cue 2 ends; overlap is a QC matter, not a read error
    cues = read_subtitles(FIXTURE_DIR / "overlap.srt").cues
    assert cues[2].start_s == pytest.approx(cues[1].end_s - 0.4, abs=1e-9)


@pytest.mark.parametrize("name", [n for n in GOOD if n.endswith(".srt")])
def test_srt_agrees_with_pysrt(name: str) -> None:
    # pysrt 1.1 as an independent reader (errors raised, so it cannot skip a cue silently);
    # it strips trailing blanks from text lines, which these fixtures do not have.
    track = read_subtitles(FIXTURE_DIR / name)
    text = (FIXTURE_DIR / name).read_bytes().decode(track.encoding)
    ref = pysrt.SubRipFile.from_string(text.lstrip("\ufeff"), error_handling=pysrt.SubRipFile.ERROR_RAISE)
    assert len(ref) == len(track.cues)
    for item, cue in zip(ref, track.cues):
        assert (item.start.ordinal, item.end.ordinal) == (round(cue.start_s * 1000), round(cue.end_s * 1000))
        assert (item.index, item.text, item.position) == (int(cue.cue_id), cue.text, cue.settings)


# --------------------------------------------------------------------------- refused files


# (fixture, line or None, message regex); lines as constructed by the generator (see its README)
REFUSED = {
    "empty.srt": (None, r"the file is empty"),
    "blank_only.srt": (None, r"the file is empty"),
    "no_cues.vtt": (None, r"no cues found"),
    "end_before_start.srt": (11, r"line 11: the cue ends before it starts"),
    "negative_time.srt": (6, r"line 6: negative time.*'-00:00:01,000'"),
    "missing_blank.srt": (10, r"line 10: a timing line inside cue text; add the blank line"),
    "missing_timing.srt": (6, r"line 6: expected a timing line 'HH:MM:SS,mmm --> HH:MM:SS,mmm' after cue number 2"),
    "bad_number.srt": (5, r"line 5: expected a cue number \(digits only\) \(found 'two'\)"),
    "missing_number.srt": (5, r"line 5: expected a cue number before the timing line"),
    "one_digit_hours.srt": (2, r"line 2: expected 2 to 5 digits of hours.*'0:00:01,000'"),
    "minutes_75.srt": (2, r"line 2: minutes and seconds of a time must be 00-59"),
    "comma.vtt": (4, r"line 4: WebVTT writes '.' before the milliseconds, not ','"),
    "no_signature.vtt": (1, r"line 1: expected 'WEBVTT'.*'WEB VTT'"),
    "style_after_cue.vtt": (12, r"line 12: a STYLE block after the first cue"),
    "zero_length.vtt": (3, r"line 3: a WebVTT cue must end after it starts"),
    "vtt_missing_blank.vtt": (5, r"line 5: '-->' inside cue text"),
    "arrow_spacing.vtt": (3, r"line 3: WebVTT needs a space before and after '-->'"),
    "mixed_encoding.srt": (17, r"line 17: the file mixes encodings: UTF-8 text at line 3"),
    "undefined_byte.srt": (25, r"line 25: byte 0x81 is neither UTF-8 nor defined in cp1252"),
    "utf16_no_bom.srt": (1, r"line 1: NUL characters.*UTF-16 without a byte-order mark"),
    # the odd byte count cuts the last line end: 26 complete lines before it
    "utf16_truncated.srt": (26, r"line 26: bytes that are not valid utf-16-le after its byte-order mark"),
    "bom_then_cp1252.srt": (25, r"line 25: bytes that are not valid utf-8 after its byte-order mark"),
}


def test_every_refused_fixture_has_expectations() -> None:
    assert sorted(REFUSED) == BAD


@pytest.mark.parametrize("name", BAD)
def test_refused_fixture(name: str) -> None:
    line, pattern = REFUSED[name]
    with pytest.raises(SubtitleInputError, match=pattern) as info:
        read_subtitles(FIXTURE_DIR / name)
    assert info.value.line == line
    assert str(FIXTURE_DIR / name) in str(info.value)


@pytest.mark.parametrize(
    ("text", "fmt", "pattern"),
    [
        ("1\n123456:00:01,000 --> 123456:00:02,000\nHi\n", "srt", r"line 2: expected 2 to 5 digits of hours"),
        ("1\n00:00:01,000 --> 00:00:02,000 --> 00:00:03,000\nHi\n", "srt", r"line 2: expected one '-->'"),
        ("1\n00:00:01,000 -->\nHi\n", "srt", r"line 2: expected an end time after '-->'"),
        ("1\n00:00:01,00 --> 00:00:02,000\nHi\n", "srt", r"line 2: expected a time HH:MM:SS,mmm.*'00:00:01,00'"),
        ("1\n00:00:01,000 --> 00:00:02,000\nHi\n\n2\n", "srt", r"line 6: expected a timing line"),
        ("1\n 00:00:01,000 --> 00:00:02,000\nHi\n", "srt", r"line 2: expected a time HH:MM:SS,mmm"),
        ("1\n00:00:01,000 --> 00:00:02,000\nHi\n\n2\n00:00:03,000 --> -00:00:04,000\nHo\n", "srt",
         r"line 6: negative time"),
        ("WEBVTT\n00:01.000 --> 00:02.000\nHi\n", "vtt", r"line 2: expected a blank line between the WEBVTT header"),
        ("WEBVTTX\n\n00:01.000 --> 00:02.000\nHi\n", "vtt", r"line 1: expected 'WEBVTT'"),
        ("WEBVTT\n\nintro\nHi there\n", "vtt", r"line 4: expected a timing line after the cue identifier"),
        ("WEBVTT\n\nHi there\n", "vtt", r"line 3: expected a cue: a timing line"),
        ("WEBVTT\n\n00:01.000 --> 00:02.000\nHi\n\nREGION\nid:r1\n", "vtt", r"line 6: a REGION block after"),
        ("WEBVTT\n\nNOTE a\nb\n00:01.000 --> 00:02.000\nHi\n", "vtt", r"line 5: '-->' inside a NOTE, STYLE"),
        ("WEBVTT\n\n00:01.000 --> 00:61.000\nHi\n", "vtt", r"line 3: minutes and seconds of a time must be 00-59"),
        ("WEBVTT\n\n1:00:01.000 --> 1:00:02.000\nHi\n", "vtt", r"line 3: expected 2 to 5 digits of hours"),
        ("WEBVTT\n\n00:02.000 --> 00:01.000\nHi\n", "vtt", r"line 3: the cue ends before it starts"),
    ],
    ids=[
        "six-digit-hours", "two-arrows", "no-end", "two-digit-ms", "number-at-eof", "indented-timing",
        "negative-end", "vtt-no-blank-after-header", "vtt-bad-signature", "vtt-id-without-timing",
        "vtt-text-without-timing", "vtt-region-after-cue", "vtt-arrow-in-note", "vtt-seconds-61",
        "vtt-one-digit-hours", "vtt-end-before-start",
    ],
)  # fmt: skip
def test_refused_text(text: str, fmt: str, pattern: str) -> None:
    with pytest.raises(SubtitleInputError, match=pattern):
        parse_subtitles(text.encode(), name=f"case.{fmt}")


def test_format_choice() -> None:
    srt = b"1\n00:00:01,000 --> 00:00:02,000\nHi\n\n"
    with pytest.raises(SubtitleInputError, match=r"line 1: expected 'WEBVTT'"):
        parse_subtitles(srt, name="named.vtt")  # the suffix asks for WebVTT
    assert parse_subtitles(srt, name="named.vtt", fmt="srt").format == "srt"
    vtt = parse_subtitles(b"WEBVTT\n\n00:01.000 --> 00:02.000\nHi\n", name="named.srt")
    assert vtt.format == "vtt" and vtt.notes == ("the file is named .srt but starts with 'WEBVTT'; read as WebVTT",)
    with pytest.raises(SettingsError, match=r"fmt='ass' must be one of srt, vtt"):
        parse_subtitles(srt, fmt="ass")  # type: ignore[arg-type]


def test_read_missing_and_unreadable(tmp_path: Path) -> None:
    with pytest.raises(SubtitleInputError, match=r"file not found; check the path"):
        read_subtitles(tmp_path / "absent.srt")
    with pytest.raises(SubtitleInputError, match=r"cannot read the file"):
        read_subtitles(tmp_path)


# --------------------------------------------------------------------------- writing


@pytest.mark.parametrize("name", GOOD)
def test_read_write_read_round_trip(name: str, tmp_path: Path) -> None:
    track = read_subtitles(FIXTURE_DIR / name)
    out = tmp_path / name
    write_subtitles(out, track, inputs=[FIXTURE_DIR / name])
    again = read_subtitles(out)
    assert again.cues == track.cues
    assert (again.encoding, again.bom, again.header) == (track.encoding, track.bom, track.header)
    # written files are canonical: read back, only what the content itself implies is noted
    # (the assumed single-byte encoding; ids kept out of sequence as written)
    kept = tuple(n for n in track.notes if n.startswith(("not valid UTF-8", TOLERANCES["srt-numbering"])))
    assert again.notes == kept


@pytest.mark.parametrize(
    "name", ["utf8.srt", "utf8_bom.srt", "utf16le_bom.srt", "utf16be_bom.srt", "cp1252.srt", "latin1.srt"]
)
def test_canonical_srt_written_byte_for_byte(name: str) -> None:
    # the generator writes the common SRT layout (LF, a blank line after every cue); so do we
    assert format_subtitles(read_subtitles(FIXTURE_DIR / name)) == (FIXTURE_DIR / name).read_bytes()


def test_write_refuses_to_overwrite_input(tmp_path: Path) -> None:
    src = tmp_path / "in.srt"
    src.write_bytes(BUILT["utf8.srt"][0])
    with pytest.raises(OutputError, match=r"refusing to write over the input"):
        write_subtitles(src, read_subtitles(src), inputs=[src])
    assert src.read_bytes() == BUILT["utf8.srt"][0]


def test_unrepresentable_text_falls_back_to_utf8() -> None:
    track = read_subtitles(FIXTURE_DIR / "latin1.srt")
    cues = list(track.cues)
    cues[0] = dataclasses.replace(cues[0], text="Ohm \u03a9 and euro \u20ac")  # neither is in latin-1
    changed = dataclasses.replace(track, cues=tuple(cues))
    encoding, bom, note = output_encoding(changed)
    assert (encoding, bom) == ("utf-8", False)
    assert note == "latin-1 cannot hold '\u03a9' (output line 3); written as UTF-8"
    assert parse_subtitles(format_subtitles(changed)).cues == changed.cues
    assert output_encoding(track) == ("latin-1", False, "")


def _track(fmt: str, *cues: Cue, header: str = "") -> SubtitleTrack:
    return SubtitleTrack(format=fmt, encoding="utf-8", bom=False, cues=cues, header=header)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("track", "pattern"),
    [
        (_track("srt", Cue(1, "1", -0.5, 1.0, "Hi")), r"cue 1 time -0.5 s cannot be written"),
        (_track("srt", Cue(1, "1", 0.0, math.nan, "Hi")), r"cue 1 time nan s cannot be written"),
        (_track("srt", Cue(1, "1", 0.0, 1.0, "Hi\n\nthere")), r"cue 1 cannot be written as SRT"),
        (_track("srt", Cue(1, "1", 0.0, 1.0, "00:00:01,000 --> 00:00:02,000")), r"cue 1 cannot be written as SRT"),
        (_track("srt", Cue(1, "1", 0.0, 1.0, "Hi"), header="WEBVTT"), r"an SRT track cannot carry a WebVTT header"),
        (_track("vtt", Cue(1, "", 1.0, 1.0, "Hi")), r"cue 1 cannot be written as WebVTT: it must end after it starts"),
        (_track("vtt", Cue(1, "a-->b", 0.0, 1.0, "Hi")), r"'-->' or an empty line"),
        (_track("vtt", Cue(1, "", 0.0, 1.0, "Hi\n")), r"'-->' or an empty line"),
        (_track("vtt", Cue(1, "", 0.0, 1.0, "Hi"), header="SUBTITLES"), r"must start with a 'WEBVTT' line"),
    ],
    ids=["negative", "nan", "blank-line", "timing-in-text", "srt-header", "vtt-zero", "vtt-arrow-id",
         "vtt-trailing-newline", "vtt-bad-header"],
)  # fmt: skip
def test_unwritable_tracks(track: SubtitleTrack, pattern: str) -> None:
    with pytest.raises(SubtitleInputError, match=pattern):
        format_subtitles(track)


def test_srt_numbers_from_ids_or_indexes() -> None:
    track = _track("srt", Cue(1, "007", 0.0, 1.0, "A"), Cue(2, "intro", 1.0, 2.0, "B"))
    expected = b"007\n00:00:00,000 --> 00:00:01,000\nA\n\n2\n00:00:01,000 --> 00:00:02,000\nB\n\n"
    assert format_subtitles(track) == expected


def test_times_round_to_nearest_millisecond_halves_up() -> None:
    # constructed: 1.0005 s * 1000 is 1000.5 in float arithmetic -> 1001 ms (planner.units rule, halves
    # up; Python's round() would give 1000); 2.0004 s -> 2000 ms
    track = _track("vtt", Cue(1, "", 1.0005, 2.0004, "A"))
    assert format_subtitles(track) == b"WEBVTT\n\n00:00:01.001 --> 00:00:02.000\nA\n"


# --------------------------------------------------------------------------- properties

_TEXT_CHARS = st.characters(exclude_categories=["Cs"], exclude_characters="\r\n\x00\ufeff")
_LINE = st.text(_TEXT_CHARS, min_size=1, max_size=12).filter(lambda s: s.strip(" \t") and "-->" not in s)


_SETTINGS = r"[a-z]{1,6}:[0-9]{1,3}%?( [a-z]{1,6}:[a-z0-9]{1,4})?"
_HEADERS = ["WEBVTT", "WEBVTT - a title", "WEBVTT\n\nSTYLE\n::cue { color: red }"]


@st.composite
def _tracks(draw: st.DrawFn) -> SubtitleTrack:
    fmt = draw(st.sampled_from(["srt", "vtt"]))
    encoding, bom = draw(st.sampled_from([("utf-8", False), ("utf-8", True), ("utf-16-le", True), ("utf-16-be", True)]))
    cues = []
    for index in range(1, draw(st.integers(1, 6)) + 1):
        start_ms = draw(st.integers(0, 99 * 3_600_000))
        end_ms = start_ms + draw(st.integers(1 if fmt == "vtt" else 0, 600_000))
        lines = draw(st.lists(_LINE, max_size=3))
        # SRT ids are numbers; WebVTT ids any line without '-->'
        cue_id = str(draw(st.integers(0, 10**30))) if fmt == "srt" else draw(st.one_of(st.just(""), _LINE))
        settings = draw(st.one_of(st.just(""), st.from_regex(_SETTINGS, fullmatch=True)))
        cues.append(Cue(index, cue_id, start_ms / 1000, end_ms / 1000, "\n".join(lines), settings))
    header = draw(st.sampled_from(_HEADERS)) if fmt == "vtt" else ""
    return SubtitleTrack(fmt, encoding, bom, tuple(cues), (), header)  # type: ignore[arg-type]


@settings(max_examples=300, deadline=None)
@given(_tracks())
def test_write_read_round_trip_property(track: SubtitleTrack) -> None:
    # ground truth: the track itself; times exact to the ms survive write -> read unchanged
    again = parse_subtitles(format_subtitles(track), fmt=track.format)
    assert dataclasses.replace(again, notes=()) == track
    assert all(n.startswith(TOLERANCES["srt-numbering"]) for n in again.notes)  # SRT ids kept as generated


def _mutate(data: bytes, draw: st.DrawFn) -> bytes:
    kind = draw(st.sampled_from(["truncate", "flip", "insert", "separator", "reencode", "index", "splice"]))
    if kind == "truncate":
        return data[: draw(st.integers(0, len(data)))]
    if kind == "flip":
        i = draw(st.integers(0, max(0, len(data) - 1)))
        return data[:i] + bytes([draw(st.integers(0, 255))]) + data[i + 1 :]
    if kind == "insert":
        i = draw(st.integers(0, len(data)))
        return data[:i] + draw(st.binary(max_size=8)) + data[i:]
    if kind == "separator":
        old, new = draw(st.sampled_from([(b",", b"."), (b".", b","), (b"-->", b"->"), (b":", b";"), (b"\n\n", b"\n"),
                                         (b"\n", b"\r\n"), (b" --> ", b"-->"), (b"\n", b"")]))  # fmt: skip
        return data.replace(old, new, draw(st.integers(1, 3)))
    if kind == "reencode":
        i = draw(st.integers(0, len(data)))
        return data[:i] + draw(st.sampled_from(["\u00e9t\u00e9", "\u20ac", "\u03a9"])).encode(
            draw(st.sampled_from(["utf-8", "cp1252", "utf-16-le", "latin-1"])), "replace") + data[i:]  # fmt: skip
    if kind == "index":
        return data.replace(b"2\n", b"9" * draw(st.integers(20, 6000)) + b"\n", 1)
    return data + draw(st.sampled_from([b for b, c, _ in BUILT.values()]))


@st.composite
def _files(draw: st.DrawFn) -> bytes:
    if draw(st.integers(0, 4)) == 0:
        return draw(st.binary(max_size=200))
    data = draw(st.sampled_from([b for b, _, _ in BUILT.values()]))
    for _ in range(draw(st.integers(1, 3))):
        data = _mutate(data, draw)
    return data


@settings(max_examples=2000, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_files(), st.sampled_from(["f.srt", "f.vtt", "<bytes>"]))
def test_mutated_files_parse_or_raise_input_error(data: bytes, name: str) -> None:
    try:
        track = parse_subtitles(data, name=name)
    except InputError as exc:
        assert str(exc)  # a message, never an empty error
        return
    assert track.cues
    for cue in track.cues:
        assert 0.0 <= cue.start_s <= cue.end_s


def test_bom_detection_table() -> None:
    # the byte-order marks of the Unicode standard (codecs module constants)
    text = "1\n00:00:01,000 --> 00:00:02,000\n\u00e9\n\n"
    boms = [(codecs.BOM_UTF8, "utf-8"), (codecs.BOM_UTF16_LE, "utf-16-le"), (codecs.BOM_UTF16_BE, "utf-16-be")]
    for bom, encoding in boms:
        track = parse_subtitles(bom + text.encode(encoding))
        assert (track.encoding, track.bom, track.cues[0].text) == (encoding, True, "\u00e9")


def test_oversized_file_refused(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(subtitles, "_MAX_BYTES", 16)
    big = tmp_path / "big.srt"
    big.write_bytes(BUILT["utf8.srt"][0])
    with pytest.raises(SubtitleInputError, match=r"too large to be subtitles"):
        read_subtitles(big)


def test_more_tolerances() -> None:
    # constructed: two blank lines after the last cue (SRT); a line of spaces between WebVTT cues
    srt = parse_subtitles(b"1\n00:00:01,000 --> 00:00:02,000\nHi\n\n\n")
    assert srt.notes == (TOLERANCES["srt-extra-blank-lines"] + " (line 5)",)
    vtt = parse_subtitles(b"WEBVTT\n\n00:01.000 --> 00:02.000\nHi\n\n  \n\n00:03.000 --> 00:04.000\nHo\n")
    assert len(vtt.cues) == 2 and vtt.notes == (TOLERANCES["trailing-whitespace"] + " (line 6)",)


def test_unknown_encoding_written_as_utf8() -> None:
    track = dataclasses.replace(_track("srt", Cue(1, "1", 0.0, 1.0, "Hi")), encoding="klingon-8")
    assert output_encoding(track) == ("utf-8", False, "unknown encoding 'klingon-8'; written as UTF-8")
