"""Read and write subtitle files (SRT and WebVTT), exact to the millisecond.

Reading is strict: a file parses completely or raises :class:`~planner.errors.SubtitleInputError`
naming the 1-based line, what was expected and the text found. Only the deviations listed in
:data:`TOLERANCES` are accepted, each one applied is reported in ``SubtitleTrack.notes``, and
no cue is ever dropped. Cue ids, text (inline tags, ``"\\n"`` between lines) and cue settings
are kept as written; times are stored as ``ms / 1000`` and written as the nearest ms, so
read -> write -> read gives the same track. Encodings: see :mod:`planner.io.text_encoding`.

SRT has no formal specification: the common layout (number, ``HH:MM:SS,mmm --> HH:MM:SS,mmm``
with optional coordinates, text lines, blank line) is read here and written through pysrt.
WebVTT follows the W3C "WebVTT: The Web Video Text Tracks Format" file syntax (signature
line, STYLE/REGION/NOTE blocks, optional cue identifier, ``[HH:]MM:SS.mmm``, cue settings);
the header and the blocks before the first cue are kept verbatim in ``SubtitleTrack.header``,
NOTE blocks between cues are skipped with a note.
"""

from __future__ import annotations

import io
import re
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Literal

import pysrt

from planner.errors import SettingsError, SubtitleInputError
from planner.io.files import atomic_write_bytes
from planner.io.text_encoding import LINE_END, decode_text, encode_text, split_lines
from planner.model import Cue, SubtitleTrack
from planner.units import nearest_int

Format = Literal["srt", "vtt"]

#: The deviations the reader accepts, each reported as this note (with its lines) when applied.
TOLERANCES: dict[str, str] = {
    # SRT has no formal specification and Windows tools write CRLF (old ones CR) line ends;
    # they carry no meaning. (WebVTT allows LF, CRLF and CR, so there they are no deviation.)
    "srt-line-ends": "CRLF or CR line ends read as line breaks, written back as LF",
    # Editors pad lines invisibly; blanks at the end of number, timing and blank lines carry
    # no meaning. Cue text keeps its spaces as written.
    "trailing-whitespace": "spaces or tabs at the end of a number, timing or blank line ignored",
    # Files converted from WebVTT, or typed by hand, use '.' before the milliseconds.
    "srt-dot-milliseconds": "'.' instead of ',' before the milliseconds read as milliseconds",
    # Merged, split or hand-edited files are numbered out of order; the number is kept as the
    # cue id, and file order gives the index.
    "srt-numbering": "cue numbers not in sequence 1, 2, 3 ... kept as cue ids; file order used",
    # Many writers stop after the last text line; the end of the file ends the cue as well.
    "srt-final-blank-line": "last cue not followed by a blank line",
    # More than one blank line between cues (or blank lines before the first) means nothing.
    "srt-extra-blank-lines": "extra blank lines between cues ignored",
    # WebVTT comments between cues have no place in the cue records (the header keeps those
    # before the first cue); they are skipped and not written back.
    "vtt-notes-skipped": "NOTE comment blocks between cues skipped (not written back)",
}

#: A subtitle file of a feature runs to well under 1 MB (common practice); bigger is not subtitles.
_MAX_BYTES = 64 << 20
_SNIPPET_CHARS = 60
_DIGITS = re.compile(r"[0-9]+")
_SRT_TIME = re.compile(r"([0-9]+):([0-9]{2}):([0-9]{2})([,.])([0-9]{3})")
_VTT_TIME = re.compile(r"(?:([0-9]+):)?([0-9]{2}):([0-9]{2})([.,])([0-9]{3})")
_TIMING_LIKE = re.compile(r"[0-9]+:[0-9]{2}:[0-9]{2}[,.][0-9]{3}[ \t]*-->")
_END_AND_SETTINGS = re.compile(r"([^ \t]+)(?:[ \t]+(.*))?")
_VTT_SIGNATURE = re.compile(r"WEBVTT(?:[ \t].*)?")


class _Notes:
    """Tolerances applied (with their lines) and other reader notes, rendered in a fixed order."""

    def __init__(self, path: str) -> None:
        self.path = path
        self.leading: list[str] = []  # encoding and format notes, reported before the tolerances
        self._hits: dict[str, set[int]] = {}

    def tolerate(self, key: str, line: int) -> None:
        self._hits.setdefault(key, set()).add(line)

    def error(self, message: str, line: int | None, snippet: str | None = None) -> SubtitleInputError:
        if snippet is not None and len(snippet) > _SNIPPET_CHARS:
            snippet = snippet[:_SNIPPET_CHARS] + "..."
        return SubtitleInputError(message, path=self.path, line=line, snippet=snippet)

    def render(self) -> tuple[str, ...]:
        out = list(self.leading)
        for key, text in TOLERANCES.items():  # table order: deterministic
            lines = sorted(self._hits.get(key, ()))
            if lines:
                where = f"line {lines[0]}" if len(lines) == 1 else f"{len(lines)} lines, first at line {lines[0]}"
                out.append(f"{text} ({where})")
        return tuple(out)


def _blocks(lines: list[str], is_blank: Callable[[str], bool]) -> tuple[list[tuple[int, list[str], int]], int]:
    """Runs of non-blank lines as (first line number, lines, blank lines before), plus trailing blanks."""
    blocks: list[tuple[int, list[str], int]] = []
    blanks = 0
    for no, line in enumerate(lines, 1):
        if is_blank(line):
            blanks += 1
        elif blanks or not blocks:
            blocks.append((no, [line], blanks))
            blanks = 0
        else:
            blocks[-1][1].append(line)
    return blocks, blanks


# --------------------------------------------------------------------------- times


def _time_ms(token: str, fmt: Format, line: int, notes: _Notes) -> int:
    """Milliseconds of one timestamp (SRT ``HH:MM:SS,mmm``; WebVTT ``[HH:]MM:SS.mmm``)."""
    shape = "HH:MM:SS,mmm" if fmt == "srt" else "HH:MM:SS.mmm or MM:SS.mmm"
    if token.startswith("-"):
        raise notes.error("negative time; subtitle times count up from 00:00:00, correct the time", line, token)
    m = (_SRT_TIME if fmt == "srt" else _VTT_TIME).fullmatch(token)
    if m is None:
        raise notes.error(f"expected a time {shape}", line, token)
    hours, minutes, seconds, sep, millis = m.groups()
    if hours is not None and not 2 <= len(hours) <= 5:
        raise notes.error(f"expected 2 to 5 digits of hours in a time {shape}", line, token)
    if int(minutes) > 59 or int(seconds) > 59:
        raise notes.error("minutes and seconds of a time must be 00-59", line, token)
    if sep == "." and fmt == "srt":
        notes.tolerate("srt-dot-milliseconds", line)
    elif sep == "," and fmt == "vtt":
        raise notes.error("WebVTT writes '.' before the milliseconds, not ','", line, token)
    return ((int(hours or 0) * 60 + int(minutes)) * 60 + int(seconds)) * 1000 + int(millis)


def _timing(text: str, fmt: Format, line: int, notes: _Notes) -> tuple[int, int, str]:
    """Start ms, end ms and the settings written after the end time, of one timing line."""
    if text.count("-->") != 1:
        raise notes.error("expected one '-->' between the start and end times", line, text)
    left, right = text.split("-->")
    if fmt == "vtt" and not (left.endswith((" ", "\t")) and right.startswith((" ", "\t"))):
        raise notes.error("WebVTT needs a space before and after '-->'", line, text)
    m = _END_AND_SETTINGS.fullmatch(right.lstrip(" \t"))
    if m is None:
        raise notes.error("expected an end time after '-->'", line, text)
    start_ms = _time_ms(left.rstrip(" \t"), fmt, line, notes)
    end_ms = _time_ms(m[1], fmt, line, notes)
    if end_ms < start_ms:
        raise notes.error("the cue ends before it starts; correct the start or end time", line, text)
    if fmt == "vtt" and end_ms == start_ms:  # WebVTT: the end "must be greater than" the start
        raise notes.error("a WebVTT cue must end after it starts; lengthen the cue", line, text)
    return start_ms, end_ms, (m[2] or "").rstrip(" \t")


def _ms(cue: Cue) -> tuple[int, int]:
    """Start and end of a cue as the nearest milliseconds (halves up, as planner.units)."""
    for t_s in (cue.start_s, cue.end_s):
        if not 0.0 <= t_s < float("inf"):
            raise SubtitleInputError(f"cue {cue.index} time {t_s!r} s cannot be written; times must be finite, >= 0")
    return nearest_int(cue.start_s * 1000.0), nearest_int(cue.end_s * 1000.0)


def _vtt_stamp(ms: int) -> str:
    hh, rest = divmod(ms, 3_600_000)
    mm, rest = divmod(rest, 60_000)
    return f"{hh:02d}:{mm:02d}:{rest // 1000:02d}.{rest % 1000:03d}"


# --------------------------------------------------------------------------- SRT


def _structural(text: str, line: int, notes: _Notes) -> str:
    """A number or timing line without trailing blanks (a tolerated deviation)."""
    stripped = text.rstrip(" \t")
    if stripped != text:
        notes.tolerate("trailing-whitespace", line)
    return stripped


def _parse_srt(lines: list[str], notes: _Notes) -> list[Cue]:
    for no, text in enumerate(lines, 1):
        if text and not text.strip(" \t"):
            notes.tolerate("trailing-whitespace", no)
    blocks, trailing = _blocks(lines, lambda s: not s.strip(" \t"))
    cues: list[Cue] = []
    for index, (first, block, blanks) in enumerate(blocks, 1):
        if blanks != (0 if index == 1 else 1):
            notes.tolerate("srt-extra-blank-lines", first - 1)
        number = _structural(block[0], first, notes)
        if _DIGITS.fullmatch(number) is None:
            what = "a cue number before the timing line" if "-->" in number else "a cue number (digits only)"
            raise notes.error(f"expected {what}", first, block[0])
        if (number.lstrip("0") or "0") != str(index):
            notes.tolerate("srt-numbering", first)
        if len(block) < 2 or "-->" not in block[1]:
            found = block[1] if len(block) > 1 else (lines[first] if first < len(lines) else None)
            message = f"expected a timing line 'HH:MM:SS,mmm --> HH:MM:SS,mmm' after cue number {number[:20]}"
            raise notes.error(message, first + 1, found)
        start_ms, end_ms, settings = _timing(_structural(block[1], first + 1, notes), "srt", first + 1, notes)
        for offset, text in enumerate(block[2:], 2):
            if _TIMING_LIKE.match(text):
                message = "a timing line inside cue text; add the blank line that ends the cue before it"
                raise notes.error(message, first + offset, text)
        cues.append(Cue(index, number, start_ms / 1000, end_ms / 1000, "\n".join(block[2:]), settings))
    if blocks and trailing == 0:
        notes.tolerate("srt-final-blank-line", len(lines))
    elif trailing > 1:
        notes.tolerate("srt-extra-blank-lines", len(lines))
    return cues


def _format_srt(track: SubtitleTrack) -> str:
    if track.header:
        raise SubtitleInputError("an SRT track cannot carry a WebVTT header; pass the track with header=''")
    items = []
    for cue in track.cues:
        lines = cue.text.split("\n") if cue.text else []
        bad = [s for s in lines if not s.strip(" \t") or _TIMING_LIKE.match(s)]
        if bad or "\n" in cue.settings or "-->" in cue.settings:
            raise SubtitleInputError(
                f"cue {cue.index} cannot be written as SRT: a blank or timing-like text line, or a line break "
                f"or '-->' in its settings ({(bad or [cue.settings])[0]!r}); remove it"
            )
        start_ms, end_ms = _ms(cue)
        start, end = pysrt.SubRipTime.from_ordinal(start_ms), pysrt.SubRipTime.from_ordinal(end_ms)
        item = pysrt.SubRipItem(0, start=start, end=end, text=cue.text, position=cue.settings)
        # SRT numbers: the id as written (leading zeros too) when it is a number, else the index.
        item.index = cue.cue_id if _DIGITS.fullmatch(cue.cue_id) else str(cue.index)
        items.append(item)
    out = io.StringIO()
    pysrt.SubRipFile(items, eol="\n").write_into(out)
    return out.getvalue()


# --------------------------------------------------------------------------- WebVTT


def _parse_vtt(lines: list[str], notes: _Notes) -> tuple[list[Cue], str]:
    if not lines or _VTT_SIGNATURE.fullmatch(lines[0]) is None or "-->" in lines[0]:
        found = lines[0] if lines else ""
        raise notes.error("expected 'WEBVTT' (optionally followed by a space and text) on the first line", 1, found)
    blocks, _ = _blocks(lines, lambda s: s == "")  # WebVTT: only an empty line ends a block
    header = ["\n".join(blocks[0][1])]
    for offset, text in enumerate(blocks[0][1][1:], 2):
        if "-->" in text:
            raise notes.error("expected a blank line between the WEBVTT header and the first cue", offset, text)
    cues: list[Cue] = []
    for first, block, _ in blocks[1:]:
        if "-->" in block[0] or (len(block) > 1 and "-->" in block[1]):
            cue_id, at = ("", 0) if "-->" in block[0] else (block[0], 1)
            start_ms, end_ms, settings = _timing(block[at], "vtt", first + at, notes)
            payload = block[at + 1 :]
            for offset, text in enumerate(payload, first + at + 1):
                if "-->" in text:
                    message = "'-->' inside cue text; add the blank line that ends the cue before it"
                    raise notes.error(message, offset, text)
            cues.append(Cue(len(cues) + 1, cue_id, start_ms / 1000, end_ms / 1000, "\n".join(payload), settings))
            continue
        keyword = block[0].rstrip(" \t")
        arrow = next((offset for offset, text in enumerate(block) if "-->" in text), None)
        if all(not s.strip(" \t") for s in block):
            notes.tolerate("trailing-whitespace", first)
        elif arrow is not None:
            # a NOTE/STYLE/REGION block may not hold '-->' (W3C WebVTT syntax); here it means a
            # cue follows without the blank line that would end the block
            message = "'-->' inside a NOTE, STYLE or REGION block; add a blank line before the cue"
            raise notes.error(message, first + arrow, block[arrow])
        elif block[0] == "NOTE" or block[0].startswith(("NOTE ", "NOTE\t")):
            if cues:
                notes.tolerate("vtt-notes-skipped", first)
            else:
                header.append("\n".join(block))
        elif keyword in ("STYLE", "REGION"):
            if cues:
                message = f"a {keyword} block after the first cue; WebVTT allows {keyword} only before the cues"
                raise notes.error(f"{message}, move it up", first, block[0])
            header.append("\n".join(block))
        elif len(block) == 1:
            raise notes.error("expected a cue: a timing line '[HH:]MM:SS.mmm --> [HH:]MM:SS.mmm'", first, block[0])
        else:
            raise notes.error("expected a timing line after the cue identifier", first + 1, block[1])
    return cues, "\n\n".join(header)


def _format_vtt(track: SubtitleTrack) -> str:
    header = track.header or "WEBVTT"
    if _VTT_SIGNATURE.fullmatch(header.split("\n", 1)[0]) is None or "-->" in header or "\n\n\n" in header:
        raise SubtitleInputError("a WebVTT header must start with a 'WEBVTT' line and hold no '-->'; fix the header")
    blocks = [header]
    for cue in track.cues:
        text_lines = cue.text.split("\n") if cue.text else []
        if any("-->" in s for s in (cue.cue_id, cue.settings, *text_lines)) or "" in text_lines or \
                "\n" in cue.cue_id + cue.settings:
            raise SubtitleInputError(
                f"cue {cue.index} cannot be written as WebVTT: '-->' or an empty line in its id, settings or text; "
                "remove it"
            )
        start_ms, end_ms = _ms(cue)
        if end_ms <= start_ms:
            raise SubtitleInputError(f"cue {cue.index} cannot be written as WebVTT: it must end after it starts")
        timing = f"{_vtt_stamp(start_ms)} --> {_vtt_stamp(end_ms)}"
        lines = ([cue.cue_id] if cue.cue_id else []) + [f"{timing} {cue.settings}" if cue.settings else timing]
        blocks.append("\n".join(lines + ([cue.text] if cue.text else [])))
    return "\n\n".join(blocks) + "\n"


# --------------------------------------------------------------------------- public API


def parse_subtitles(data: bytes, *, name: str = "<bytes>", fmt: Format | None = None) -> SubtitleTrack:
    """Parse the bytes of an SRT or WebVTT file.

    Parameters
    ----------
    data : bytes
        The whole file.
    name : str
        Shown in error messages; its suffix (``.srt`` / ``.vtt``) helps choose the format.
    fmt : {"srt", "vtt"}, optional
        The format; by default WebVTT when the text starts with ``WEBVTT`` or the name ends in
        ``.vtt``, else SRT.

    Returns
    -------
    SubtitleTrack
        Cues in file order (times in seconds, exact to the ms), encoding, BOM flag, every
        note, and the WebVTT header.

    Raises
    ------
    SubtitleInputError
        For an empty file, undecodable bytes, a syntax error (with its line), no cues, a
        negative time or a cue that ends before it starts. Overlapping cues are legal.
    """
    notes = _Notes(name)
    if fmt not in (None, "srt", "vtt"):
        raise SettingsError(f"fmt={fmt!r} must be one of srt, vtt; pass one of those or None")
    decoded = decode_text(bytes(data), path=name)
    text = decoded.text
    if decoded.note:
        notes.leading.append(decoded.note)
    if not text.strip():
        raise notes.error("the file is empty; pass a subtitle file with cues", None)
    suffix = Path(name).suffix.lower()
    chosen: Format = fmt or ("vtt" if text.startswith("WEBVTT") or suffix == ".vtt" else "srt")
    if fmt is None and chosen == "vtt" and suffix == ".srt":
        notes.leading.append("the file is named .srt but starts with 'WEBVTT'; read as WebVTT")
    if chosen == "srt" and "\r" in text:
        for no, end in enumerate(LINE_END.finditer(text), 1):
            if end.group() != "\n":
                notes.tolerate("srt-line-ends", no)
    lines = split_lines(text)
    if chosen == "srt":
        cues, header = _parse_srt(lines, notes), ""
    else:
        cues, header = _parse_vtt(lines, notes)
    if not cues:
        raise notes.error("no cues found; pass a subtitle file that has at least one timed cue", None)
    return SubtitleTrack(chosen, decoded.encoding, decoded.bom, tuple(cues), notes.render(), header)


def read_subtitles(path: str | Path) -> SubtitleTrack:
    """Read an SRT or WebVTT file (see :func:`parse_subtitles`).

    Raises
    ------
    SubtitleInputError
        If the file is missing, unreadable, too large to be subtitles, or malformed.
    """
    p = Path(path)
    try:
        if p.stat().st_size > _MAX_BYTES:
            raise SubtitleInputError(f"over {_MAX_BYTES >> 20} MB, too large to be subtitles; check the path", path=p)
        data = p.read_bytes()
    except FileNotFoundError:
        raise SubtitleInputError("file not found; check the path", path=p) from None
    except OSError as exc:
        message = f"cannot read the file ({exc.strerror or exc}); check the path and permissions"
        raise SubtitleInputError(message, path=p) from None
    return parse_subtitles(data, name=str(p))


def _encode(track: SubtitleTrack) -> tuple[bytes, str, bool, str]:
    return encode_text(_format_srt(track) if track.format == "srt" else _format_vtt(track), track.encoding, track.bom)


def format_subtitles(track: SubtitleTrack) -> bytes:
    """The file bytes of a track, in ``track.format``, LF line ends, times to the nearest ms.

    Kept from the input: encoding and BOM (UTF-16 always with its BOM) when the encoding can
    hold every character, else UTF-8 (see :func:`output_encoding` for the note). SRT numbers
    are the cue ids when they are numbers, else the indexes.

    Raises
    ------
    SubtitleInputError
        If a cue cannot be written in the format (negative time, an empty line or ``-->`` in
        its text, a WebVTT cue that does not end after it starts) or an SRT track has a header.
    """
    return _encode(track)[0]


def output_encoding(track: SubtitleTrack) -> tuple[str, bool, str]:
    """Encoding name, BOM flag and note (``""`` when the input encoding is kept) that
    :func:`format_subtitles` will use for this track."""
    _, encoding, bom, note = _encode(track)
    return encoding, bom, note


def write_subtitles(path: str | Path, track: SubtitleTrack, *, inputs: Iterable[str | Path] = ()) -> None:
    """Write a track atomically (temporary file, then rename), never over one of ``inputs``."""
    atomic_write_bytes(path, format_subtitles(track), inputs=inputs)
