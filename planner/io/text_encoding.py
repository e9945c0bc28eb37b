"""Bytes to text and back for subtitle files, detecting the encoding and never guessing silently.

Accepted: UTF-8 with or without byte-order mark, UTF-16 LE/BE with a byte-order mark, and
bytes that are not valid UTF-8 read as a Western single-byte encoding: cp1252 when a byte in
0x80-0x9F occurs (curly quotes, dashes, the euro sign), else latin-1 (ISO-8859-1, which reads
every other byte the same as cp1252). Refused, with the line: bytes invalid after a BOM, a file
that mixes UTF-8 with single-byte text (reading it either way would garble part of it), bytes
undefined in cp1252, and NUL characters (binary data, or UTF-16 without its BOM).
"""

from __future__ import annotations

import codecs
import re
from dataclasses import dataclass

from planner.errors import SubtitleInputError

_BOMS = ((codecs.BOM_UTF8, "utf-8"), (codecs.BOM_UTF16_LE, "utf-16-le"), (codecs.BOM_UTF16_BE, "utf-16-be"))
#: Well-formed UTF-8 multi-byte sequences (RFC 3629 section 4, simplified). Their presence in a
#: file that is not valid UTF-8 means it mixes encodings (a single-byte text would need an
#: accented capital followed by a symbol from 0xA0-0xBF to look like one: rare, and refused).
_UTF8_SEQUENCE = re.compile(rb"[\xc2-\xdf][\x80-\xbf]|[\xe0-\xef][\x80-\xbf]{2}|[\xf0-\xf4][\x80-\xbf]{3}")
_C1_BYTES = re.compile(rb"[\x80-\x9f]")
#: The line terminators of both formats (SRT in practice, WebVTT by its syntax): LF, CRLF, CR.
LINE_END = re.compile(r"\r\n|\r|\n")


@dataclass(frozen=True)
class DecodedText:
    """Text of a file and how it was stored. ``note`` says which encoding was assumed, if any."""

    text: str
    encoding: str
    bom: bool
    note: str = ""


def line_number(prefix: str) -> int:
    """1-based line on which the character after ``prefix`` stands (LF, CRLF and CR end lines)."""
    return len(LINE_END.findall(prefix)) + 1


def split_lines(text: str) -> list[str]:
    """Lines split at LF, CRLF or CR only (``str.splitlines`` also splits at form feeds and more)."""
    lines = LINE_END.split(text)
    if lines and lines[-1] == "":
        lines.pop()  # the terminator of the last line does not start another line
    return lines


def _byte_line(data: bytes, offset: int) -> int:
    # latin-1 maps bytes to characters one to one, so line ends are counted as in ASCII text
    return line_number(data[:offset].decode("latin-1"))


def decode_text(data: bytes, *, path: str) -> DecodedText:
    """Decode a subtitle file's bytes (see the module notes for what is accepted).

    Raises
    ------
    SubtitleInputError
        With the line of the first offending byte, for anything that would need a guess.
    """
    for bom, encoding in _BOMS:
        if data.startswith(bom):
            body = data[len(bom) :]
            try:
                decoded = DecodedText(body.decode(encoding), encoding, True)
            except UnicodeDecodeError as exc:
                line = line_number(body[: exc.start].decode(encoding, "replace"))
                message = f"bytes that are not valid {encoding} after its byte-order mark; re-save the file as UTF-8"
                raise SubtitleInputError(message, path=path, line=line) from None
            break
    else:
        decoded = _decode_without_bom(data, path)
    if "\x00" in decoded.text:
        line = line_number(decoded.text[: decoded.text.index("\x00")])
        message = "NUL characters in the text: binary, or UTF-16 without a byte-order mark; re-save as UTF-8"
        raise SubtitleInputError(message, path=path, line=line)
    return decoded


def _decode_without_bom(data: bytes, path: str) -> DecodedText:
    try:
        return DecodedText(data.decode("utf-8"), "utf-8", False)
    except UnicodeDecodeError as exc:
        bad_line = _byte_line(data, exc.start)
    mixed = _UTF8_SEQUENCE.search(data)
    if mixed is not None:
        message = (
            f"the file mixes encodings: UTF-8 text at line {_byte_line(data, mixed.start())} and bytes that are "
            "not UTF-8; re-save the whole file as UTF-8"
        )
        raise SubtitleInputError(message, path=path, line=bad_line)
    try:
        text = data.decode("cp1252")
    except UnicodeDecodeError as exc:
        message = f"byte 0x{data[exc.start]:02X} is neither UTF-8 nor defined in cp1252/latin-1; re-save as UTF-8"
        raise SubtitleInputError(message, path=path, line=_byte_line(data, exc.start)) from None
    encoding = "cp1252" if _C1_BYTES.search(data) else "latin-1"
    return DecodedText(text, encoding, False, f"not valid UTF-8 (first at line {bad_line}); read as {encoding}")


def encode_text(text: str, encoding: str, bom: bool) -> tuple[bytes, str, bool, str]:
    """Bytes of ``text`` in ``encoding`` when it can hold every character, else UTF-8.

    Returns the bytes, the encoding and BOM flag used, and a note (``""`` when the requested
    encoding was kept). UTF-16 is always written with its byte-order mark (without one it
    could not be read back); the single-byte encodings have none.
    """
    try:
        name = codecs.lookup(encoding).name
        data = text.encode(name)
    except LookupError:
        return text.encode("utf-8"), "utf-8", False, f"unknown encoding {encoding!r}; written as UTF-8"
    except UnicodeEncodeError as exc:
        line = line_number(text[: exc.start])
        note = f"{encoding} cannot hold {text[exc.start]!r} (output line {line}); written as UTF-8"
        return text.encode("utf-8"), "utf-8", False, note
    if name == "utf-16-le":
        return codecs.BOM_UTF16_LE + data, encoding, True, ""
    if name == "utf-16-be":
        return codecs.BOM_UTF16_BE + data, encoding, True, ""
    if name == "utf-8" and bom:
        return codecs.BOM_UTF8 + data, encoding, True, ""
    return data, encoding, False, ""
