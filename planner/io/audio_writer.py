"""Atomic block-wise writer for WAV/BWF and FLAC, and the channel layouts cueplan supports.

soundfile (0.12-0.14) has no call that writes a BWF ``bext`` chunk (EBU Tech 3285), so
:class:`AudioWriter` appends one itself to the finished WAV. RIFF chunks may follow
``data`` (common practice; libsndfile reads the chunk back there, which the tests check),
so no copy of the audio is needed. A FLAC file gets the description as its Vorbis comment
through soundfile. No sidecar file is written.
"""

from __future__ import annotations

import contextlib
import struct
import sys
from collections.abc import Iterable
from pathlib import Path
from types import TracebackType
from typing import BinaryIO

import numpy as np
import soundfile as sf

from planner._typing import AudioArray
from planner.errors import InputError, OutputError, SettingsError
from planner.io.files import atomic_output, refuse_inputs
from planner.io.pcm import float_to_pcm24, riff_chunks
from planner.model import Layout

#: Layout assumed for each supported channel count (5.1 in the order L R C LFE Ls Rs).
LAYOUTS: dict[int, Layout] = {1: "mono", 2: "stereo", 6: "5.1"}
#: The supported channel counts, as error messages name them.
SUPPORTED_COUNTS = "1 (mono), 2 (stereo) or 6 (5.1, order L R C LFE Ls Rs)"

_WRITE_FORMATS = {".wav": "WAV", ".wave": "WAV", ".bwf": "WAV", ".flac": "FLAC"}
_WRITE_SUBTYPES = {"WAV": ("PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE"), "FLAC": ("PCM_16", "PCM_24")}
_BYTES_PER_SAMPLE = {"PCM_16": 2, "PCM_24": 3, "PCM_32": 4, "FLOAT": 4, "DOUBLE": 8}
#: RIFF sizes are 32-bit (a plain WAV cannot exceed 4 GiB).
_RIFF_LIMIT_BYTES = 0xFFFFFFFF
_BEXT_DESCRIPTION_CHARS = 256


def _bext_chunk(description: str) -> bytes:
    """A version-1 ``bext`` chunk (EBU Tech 3285) carrying only the description.

    Fields (little-endian, packed): Description 256, Originator 32, OriginatorReference 32,
    OriginationDate 10, OriginationTime 8, TimeReference 2 x uint32, Version uint16,
    UMID 64, Reserved 190 bytes, empty CodingHistory (field sizes from memory of Tech 3285;
    libsndfile parses the result, which the tests check). Date and time stay empty so that
    equal inputs give byte-identical files.
    """
    body = b"".join(
        (
            description.encode("ascii").ljust(256, b"\0"),
            b"cueplan".ljust(32, b"\0"),
            bytes(32 + 10 + 8),
            struct.pack("<IIH", 0, 0, 1),
            bytes(64 + 190),
        )
    )
    return b"bext" + struct.pack("<I", len(body)) + body


def _append_bext(path: Path, description: str) -> None:
    chunk = _bext_chunk(description)
    with open(path, "r+b") as fh:
        if fh.read(4) != b"RIFF":
            raise OutputError(f"{path}: written WAV has no RIFF header; cannot add the bext chunk")
        end = fh.seek(0, 2)
        pad = end & 1  # RIFF chunks start on even offsets
        if end + pad + len(chunk) - 8 > _RIFF_LIMIT_BYTES:
            raise OutputError(f"{path}: WAV would exceed 4 GiB with its metadata; write FLAC or a shorter file")
        fh.write(bytes(pad) + chunk)
        fh.seek(4)
        fh.write(struct.pack("<I", end + pad + len(chunk) - 8))


class AudioWriter:
    """Write a WAV/BWF or FLAC file block by block, atomically and never over an input.

    The audio goes to a temporary file in the target folder, renamed onto ``path`` only
    when the ``with`` block ends without an exception; on any exception the temporary
    file is removed and nothing appears under ``path``. Integer formats clip samples to
    full scale (libsndfile); ``n_clipped`` counts the samples beyond full scale.

    Parameters
    ----------
    path : str or Path
        Output file; ``.wav``/``.wave``/``.bwf`` (6 channels as WAVE_FORMAT_EXTENSIBLE with
        the 5.1 channel mask) or ``.flac``.
    sample_rate_hz, n_channels : int
        Rate and channel count (1, 2 or 6).
    subtype : str
        ``PCM_16``, ``PCM_24``, ``PCM_32``, ``FLOAT`` or ``DOUBLE`` (FLAC: 16/24-bit only).
    inputs : iterable of paths
        Files that must not be overwritten.
    description : str
        ASCII text of at most 256 characters: the BWF ``bext`` Description for WAV, the
        Vorbis comment for FLAC; empty writes no metadata.

    Raises
    ------
    SettingsError
        Unknown suffix, subtype, channel count or a description that does not fit.
    OutputError
        ``path`` is one of ``inputs`` or its folder does not exist.
    """

    def __init__(
        self,
        path: str | Path,
        *,
        sample_rate_hz: int,
        n_channels: int,
        subtype: str = "PCM_24",
        inputs: Iterable[str | Path] = (),
        description: str = "",
    ) -> None:
        self.path = Path(path)
        fmt = _WRITE_FORMATS.get(self.path.suffix.lower())
        if fmt is None:
            raise SettingsError(
                f"output {self.path.name!r} has an unsupported suffix; use one of {', '.join(_WRITE_FORMATS)}"
            )
        if subtype not in _WRITE_SUBTYPES[fmt]:
            raise SettingsError(f"subtype={subtype!r} cannot be written as {fmt}; pass one of {', '.join(_WRITE_SUBTYPES[fmt])}")
        if n_channels not in LAYOUTS:
            raise SettingsError(f"n_channels={n_channels} is not supported; pass {SUPPORTED_COUNTS}")
        if sample_rate_hz < 1:
            raise SettingsError(f"sample_rate_hz={sample_rate_hz} must be positive; pass the programme's rate")
        if not description.isascii() or len(description) > _BEXT_DESCRIPTION_CHARS:
            raise SettingsError(
                f"description must be ASCII text of at most {_BEXT_DESCRIPTION_CHARS} characters "
                "(the BWF bext Description field); shorten it"
            )
        self._inputs = tuple(inputs)
        refuse_inputs(self.path, self._inputs)
        self._format = "WAVEX" if fmt == "WAV" and n_channels > 2 else fmt
        self.sample_rate_hz, self.n_channels, self.subtype = sample_rate_hz, n_channels, subtype
        self.description = description
        self.n_frames = 0
        self.n_clipped = 0
        self._pcm = subtype.startswith("PCM")
        self._bytes_per_frame = n_channels * _BYTES_PER_SAMPLE[subtype]
        self._stack: contextlib.ExitStack | None = None
        self._file: sf.SoundFile | None = None
        self._tmp: Path | None = None
        # 24-bit WAV: libsndfile writes the header, the samples are encoded here (the same
        # bytes, several times faster: planner.io.pcm.float_to_pcm24) and the sizes patched at the end
        self._direct = self._format in ("WAV", "WAVEX") and subtype == "PCM_24"
        self._raw: BinaryIO | None = None
        self._chunks: dict[bytes, int] = {}  # body offsets of the header's chunks
        self._buffer = np.zeros(0, dtype=np.uint8)

    def __enter__(self) -> AudioWriter:
        stack = contextlib.ExitStack()
        self._tmp = stack.enter_context(atomic_output(self.path, inputs=self._inputs))
        try:
            self._file = sf.SoundFile(
                str(self._tmp), "w", samplerate=self.sample_rate_hz, channels=self.n_channels,
                subtype=self.subtype, format=self._format,
            )
            if self.description and self._format == "FLAC":
                self._file.comment = self.description  # libsndfile: strings before the first frame
            if self._direct:
                self._file.close()  # the header alone, sizes 0
                self._raw = stack.enter_context(open(self._tmp, "r+b"))
                size = self._raw.seek(0, 2)
                self._chunks = {chunk_id: body for chunk_id, body, _ in riff_chunks(self._raw, size)}
                if b"data" not in self._chunks:
                    raise OutputError(f"{self.path}: the WAV header has no data chunk; write FLAC instead")
                self._raw.seek(self._chunks[b"data"])
        except BaseException:
            stack.__exit__(*sys.exc_info())
            raise
        self._stack = stack
        return self

    def write(self, block: AudioArray) -> None:
        """Append float samples of shape ``(n, n_channels)``, full scale 1.0."""
        if self._file is None:
            raise OutputError(f"{self.path}: AudioWriter.write called outside its with-block; open it with 'with'")
        x = np.asarray(block)
        if x.ndim != 2 or x.shape[1] != self.n_channels:
            raise InputError(f"block shape {x.shape} does not match n_channels={self.n_channels}; pass (n, {self.n_channels})")
        if not np.isfinite(x).all():
            raise InputError("block contains NaN or infinite samples; check the processing before writing")
        if self._format != "FLAC" and (self.n_frames + x.shape[0]) * self._bytes_per_frame > _RIFF_LIMIT_BYTES - 4096:
            raise OutputError(f"{self.path}: a WAV file cannot hold more than 4 GiB; write FLAC or a shorter range")
        if self._raw is not None:
            n_bytes = x.size * 3
            if self._buffer.size < n_bytes:
                self._buffer = np.zeros(n_bytes, dtype=np.uint8)
            self.n_clipped += int(float_to_pcm24(np.ascontiguousarray(x).reshape(-1), self._buffer))
            self._raw.write(self._buffer.data[:n_bytes])
        else:
            if self._pcm:  # soundfile turns on libsndfile's clipping (SFC_SET_CLIPPING); count what it clips
                self.n_clipped += int(np.count_nonzero(np.abs(x) > 1.0))
            self._file.write(x)
        self.n_frames += int(x.shape[0])

    def _finish_direct(self, raw: BinaryIO) -> None:
        """Pad the data to even length and write the sizes libsndfile writes on closing."""
        data_bytes = self.n_frames * self._bytes_per_frame
        end = raw.seek(0, 2)
        if data_bytes & 1:
            raw.write(b"\0")
            end += 1
        raw.seek(self._chunks[b"data"] - 4)
        raw.write(struct.pack("<I", data_bytes))
        if b"fact" in self._chunks:  # WAVE_FORMAT_EXTENSIBLE: the length in frames
            raw.seek(self._chunks[b"fact"])
            raw.write(struct.pack("<I", self.n_frames))
        raw.seek(4)
        raw.write(struct.pack("<I", end - 8))
        raw.close()

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> bool:
        stack, fh, tmp = self._stack, self._file, self._tmp
        self._stack = self._file = self._tmp = None
        assert stack is not None and fh is not None and tmp is not None
        try:
            fh.close()
            if self._raw is not None:
                if exc is None:
                    self._finish_direct(self._raw)
                self._raw = None
            if exc is None and self.description and self._format != "FLAC":
                _append_bext(tmp, self.description)
        except BaseException:
            stack.__exit__(*sys.exc_info())
            raise
        return bool(stack.__exit__(exc_type, exc, tb))
