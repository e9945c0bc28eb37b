"""Integer PCM WAV data read straight from the file, for speed.

libsndfile turns 24-bit samples into numbers at about 3 ns each (1.2 s per hour of 48 kHz
stereo, measured); reading the bytes and converting them in one compiled loop takes about
half of that. Only plain little-endian 16- or 24-bit integer PCM in WAV, BWF or RF64 is
read this way (``WAVE_FORMAT_PCM``, or ``WAVE_FORMAT_EXTENSIBLE`` with the PCM sub-format),
and only when three stretches read here (start, middle, end) equal what libsndfile reads
there; any other file, or any doubt, goes through soundfile. The values are those of
libsndfile's 32-bit integer read scaled by 2**-31: every 16- and 24-bit sample is exact in float32.

References
----------
Microsoft, "Multimedia Programming Interface and Data Specifications 1.0" (1991): RIFF
chunks (four-character id, 32-bit little-endian size, bodies padded to even length), the
``fmt `` and ``data`` chunks of WAVE. EBU Tech 3306 (RF64): the same layout with 64-bit
sizes in a ``ds64`` chunk (a 32-bit size of 0xFFFFFFFF points there).
"""

from __future__ import annotations

import os
import struct
from collections.abc import Iterator
from typing import BinaryIO

import numpy as np
import soundfile as sf

from planner._typing import AudioArray
from planner.jit import compiled

#: Bytes per sample of the sample formats read here.
WIDTHS = {"PCM_16": 2, "PCM_24": 3}
_CONTAINERS = ("WAV", "WAVEX", "RF64")
_WAVE_FORMAT_PCM = 1
_WAVE_FORMAT_EXTENSIBLE = 0xFFFE
#: KSDATAFORMAT_SUBTYPE_PCM after its first two bytes (the format tag): 00000001-0000-0010-8000-00aa00389b71.
_PCM_GUID_TAIL = bytes.fromhex("000000001000800000aa00389b71")
_SCALE_24 = np.float32(2.0**-23)
_SCALE_16 = np.float32(2.0**-15)
_SCALE_32 = np.float32(2.0**-31)  # libsndfile's integer read is left-justified in 32 bits
#: Frames compared with libsndfile at each of the three places checked.
_CHECK_FRAMES = 1024


@compiled(nogil=True)
def _pcm24_to_float32(raw, out):  # type: ignore[no-untyped-def]
    """Little-endian 24-bit samples ``raw`` (uint8) into ``out`` (float32, flat), full scale 1.0."""
    for i in range(out.size):
        k = 3 * i
        v = np.int64(raw[k]) | (np.int64(raw[k + 1]) << 8) | (np.int64(raw[k + 2]) << 16)
        if v >= 0x800000:  # two's complement sign
            v -= 0x1000000
        out[i] = np.float32(v) * _SCALE_24


@compiled(nogil=True)
def float_to_pcm24(x, out):  # type: ignore[no-untyped-def]
    """Float samples ``x`` (flat, full scale 1.0) as little-endian 24-bit PCM into ``out`` (uint8);
    returns how many lay beyond full scale (compiled, numba).

    libsndfile's conversion with clipping, reproduced: the sample times 2**31, at or above
    2**31 - 1 the largest code, at or below -2**31 the smallest, else rounded to the nearest
    integer (halves to even) and its top 24 bits kept (an arithmetic shift: a floor).
    """
    n_over = 0
    for i in range(x.size):
        v = np.float64(x[i])
        if abs(v) > 1.0:
            n_over += 1
        scaled = v * 2147483648.0
        if scaled >= 2147483647.0:
            code = np.int64(0x7FFFFF)
        elif scaled <= -2147483648.0:
            code = np.int64(-0x800000)
        else:
            code = np.int64(np.rint(scaled)) >> 8
        out[3 * i] = code & 0xFF
        out[3 * i + 1] = (code >> 8) & 0xFF
        out[3 * i + 2] = (code >> 16) & 0xFF
    return n_over


def riff_chunks(fh: BinaryIO, size: int) -> Iterator[tuple[bytes, int, int]]:
    """The chunks of a RIFF/RF64 WAVE file open in ``fh`` of ``size`` bytes: (id, offset of
    the body, length of the body), until the ``data`` chunk (the last one given)."""
    fh.seek(0)
    head = fh.read(12)
    if len(head) < 12 or head[:4] not in (b"RIFF", b"RF64") or head[8:12] != b"WAVE":
        return
    pos = 12
    while pos + 8 <= size:
        fh.seek(pos)
        chunk_id, chunk_size = struct.unpack("<4sI", fh.read(8))
        yield chunk_id, pos + 8, chunk_size
        if chunk_id == b"data" or chunk_size == 0xFFFFFFFF:
            return
        pos += 8 + chunk_size + (chunk_size & 1)


def _data_offset(raw: BinaryIO, n_channels: int, width: int) -> int | None:
    """Byte offset of the first sample frame of a WAV/RF64 integer PCM file open in ``raw``, or None if it is not one."""
    fmt_ok = False
    for chunk_id, body, chunk_size in riff_chunks(raw, os.fstat(raw.fileno()).st_size):
        if chunk_id == b"fmt ":
            raw.seek(body)
            fmt = raw.read(min(chunk_size, 40))
            if len(fmt) < 16:
                return None
            tag, channels, _, _, align, bits = struct.unpack("<HHIIHH", fmt[:16])
            if tag == _WAVE_FORMAT_EXTENSIBLE and len(fmt) >= 40 and fmt[26:40] == _PCM_GUID_TAIL:
                tag = int.from_bytes(fmt[24:26], "little")
            fmt_ok = tag == _WAVE_FORMAT_PCM and channels == n_channels and bits == 8 * width and align == n_channels * width
        elif chunk_id == b"data":
            return body if fmt_ok else None
    return None


class PcmReader:
    """Reads frames of one integer PCM WAV file as float32 ``(n, n_channels)``; make it with :func:`pcm_reader`."""

    def __init__(self, offset: int, n_channels: int, width: int) -> None:
        self.offset = offset
        self.n_channels = n_channels
        self.width = width
        self.frame_bytes = n_channels * width
        self._raw = np.empty(0, dtype=np.uint8)  # reused: fresh megabyte buffers cost page faults

    def read(self, raw: BinaryIO, start: int, n: int) -> AudioArray:
        """Frames ``[start, start + n)`` from the file open in ``raw``; fewer if the file ends first."""
        if self._raw.size < n * self.frame_bytes:
            self._raw = np.empty(n * self.frame_bytes, dtype=np.uint8)
        buffer = self._raw[: n * self.frame_bytes]
        view = buffer.data
        raw.seek(self.offset + start * self.frame_bytes)
        got = 0
        while got < buffer.size:
            k = raw.readinto(view[got:])  # type: ignore[attr-defined]
            if not k:
                break
            got += k
        n_read = got // self.frame_bytes
        out = np.empty((n_read, self.n_channels), dtype=np.float32)
        if self.width == 3:
            _pcm24_to_float32(buffer[: n_read * self.frame_bytes], out.reshape(-1))
        else:
            np.multiply(buffer[: n_read * self.frame_bytes].view("<i2").reshape(n_read, self.n_channels), _SCALE_16, out=out)
        return out


def pcm_reader(fh: sf.SoundFile, raw: BinaryIO) -> PcmReader | None:
    """A direct reader of one file, open as ``fh`` (soundfile) and ``raw`` (binary), if it is
    integer PCM WAV that reads the same as through libsndfile, else None.

    The check reads through ``fh``, which is left at no particular frame.
    """
    width = WIDTHS.get(str(fh.subtype))
    if width is None or fh.format not in _CONTAINERS or fh.endian not in ("FILE", "LITTLE"):
        return None
    try:
        offset = _data_offset(raw, int(fh.channels), width)
    except (OSError, struct.error):
        return None
    if offset is None:
        return None
    reader = PcmReader(offset, int(fh.channels), width)
    n_frames = int(fh.frames)
    n = min(_CHECK_FRAMES, n_frames)
    for start in sorted({0, (n_frames - n) // 2, n_frames - n}):
        fh.seek(start)
        expected = fh.read(n, dtype="int32", always_2d=True).astype(np.float32)
        expected *= _SCALE_32
        if not np.array_equal(reader.read(raw, start, n), expected):
            return None
    return reader
