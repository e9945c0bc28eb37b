"""Audio files in and out, block by block: probe, block reader, programme (mix or stems), writer.

Every reader yields float32 arrays of shape ``(n_frames, n_channels)`` (always 2-D) and
never holds more than one block, so memory does not grow with programme length. Lengths
are frames. Supported inputs: WAV/BWF (also WAVE_FORMAT_EXTENSIBLE and RF64) and FLAC, in
16/24/32-bit integer or 32/64-bit float, at any sample rate, with 1 (mono), 2 (stereo) or
6 channels (5.1 in the order L R C LFE Ls Rs).

:class:`AudioWriter` (from :mod:`planner.io.audio_writer`) writes atomically and puts the
description into a BWF ``bext`` chunk (WAV) or the Vorbis comment (FLAC).
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Literal

import numpy as np
import soundfile as sf

from planner._typing import AudioArray
from planner.errors import AudioInputError, SettingsError
from planner.io.audio_writer import LAYOUTS, SUPPORTED_COUNTS, AudioWriter
from planner.io.pcm import pcm_reader
from planner.model import AudioInfo

#: Frames per block read (about 2.7 s at 48 kHz: 1 MB of float32 stereo). Every stage
#: pays a fixed cost per block; one hour of stereo analysed 7 % faster with these blocks
#: than with half as long ones, at the same peak memory (measured; benchmarks/README.md).
DEFAULT_BLOCK_FRAMES = 1 << 17
#: Largest difference in length between a dialogue and a background stem, frames (about
#: 1.4 s at 48 kHz: stems exported over the same range differ by a few frames at most).
STEM_LENGTH_TOLERANCE_FRAMES = 1 << 16

#: Bit depth of each supported sample format (``None`` for floating point).
BIT_DEPTHS: dict[str, int | None] = {"PCM_16": 16, "PCM_24": 24, "PCM_32": 32, "FLOAT": None, "DOUBLE": None}

_READ_FORMATS = ("WAV", "WAVEX", "RF64", "FLAC")
#: libsndfile's header log line for a WAV data chunk longer than the file ("data : 60000 (should be 29978)").
_TRUNCATED = re.compile(r"^data\s*:\s*(\d+)\s*\(should be (\d+)\)", re.MULTILINE)
_PEAK_FLOOR_DBFS = -200.0


def _existing_file(path: str | Path) -> Path:
    p = Path(path)
    if not p.exists():
        raise AudioInputError("file not found; check the path and the file name", path=p)
    if not p.is_file():
        raise AudioInputError("is not a file; pass the path of a WAV/BWF or FLAC file", path=p)
    if p.stat().st_size == 0:
        raise AudioInputError("file is empty (0 bytes); export the audio again", path=p)
    return p


def probe(path: str | Path) -> AudioInfo:
    """Read the header of an audio file and check that cueplan can use it.

    Parameters
    ----------
    path : str or Path
        A WAV/BWF or FLAC file.

    Returns
    -------
    AudioInfo
        Rate (Hz), channel count, length (frames), assumed layout, container and sample
        format, bit depth (``None`` for float formats).

    Raises
    ------
    AudioInputError
        Missing, empty or unreadable file, unsupported container or sample format, zero
        frames, or a channel count other than 1, 2 or 6.
    """
    p = _existing_file(path)
    try:
        info = sf.info(str(p))
    except RuntimeError as exc:  # soundfile.LibsndfileError derives from RuntimeError
        raise AudioInputError(
            f"cannot read the audio header ({exc}); check that it is a complete WAV/BWF or FLAC file, or export it again",
            path=p,
        ) from None
    if info.format not in _READ_FORMATS:
        raise AudioInputError(
            f"container {info.format} is not supported; convert it to WAV/BWF or FLAC", path=p
        )
    if info.subtype not in BIT_DEPTHS:
        raise AudioInputError(
            f"sample format {info.subtype} is not supported; use 16/24/32-bit PCM or 32/64-bit float",
            path=p,
        )
    short = _TRUNCATED.search(info.extra_info or "")
    if short and int(short.group(2)) < int(short.group(1)):
        raise AudioInputError(
            f"is truncated: its header promises {short.group(1)} bytes of audio but the file holds "
            f"{short.group(2)}; copy or export the file again",
            path=p,
        )
    if info.frames <= 0:
        raise AudioInputError("contains no audio (zero frames); export the programme again", path=p)
    if info.channels not in LAYOUTS:
        raise AudioInputError(
            f"has {info.channels} channels; supported channel counts are {SUPPORTED_COUNTS}: "
            "export the programme as mono, stereo or 5.1, or as separate stems",
            path=p,
        )
    return AudioInfo(
        sample_rate_hz=int(info.samplerate),
        n_channels=int(info.channels),
        n_frames=int(info.frames),
        layout=LAYOUTS[info.channels],
        format=str(info.format),
        subtype=str(info.subtype),
        bit_depth=BIT_DEPTHS[info.subtype],
    )


def _check_range(info: AudioInfo, block_frames: int, start_frame: int, stop_frame: int | None) -> int:
    if isinstance(block_frames, bool) or not isinstance(block_frames, int) or block_frames < 1:
        raise SettingsError(f"block_frames={block_frames!r} must be a positive whole number; pass e.g. 65536")
    stop = info.n_frames if stop_frame is None else stop_frame
    if not (0 <= start_frame <= stop <= info.n_frames):
        raise SettingsError(
            f"start_frame={start_frame}, stop_frame={stop_frame} must satisfy 0 <= start <= stop <= "
            f"{info.n_frames} (the length in frames); pass a range inside the audio"
        )
    return stop


#: Integer formats read as int32 and scaled here: every 16- or 24-bit sample is exact in
#: float32, and scaling by 2**-31 is exact, so the values are those of libsndfile's float
#: conversion, which costs more (about 0.8 s per hour of 48 kHz stereo, measured).
_EXACT_INT_SUBTYPES = frozenset({"PCM_16", "PCM_24"})
_INT32_SCALE = np.float32(2.0**-31)


def _read_float32(fh: sf.SoundFile, n: int, as_int: bool) -> AudioArray:
    """The next ``n`` frames of ``fh`` as float32 ``(n, channels)``, full scale 1.0."""
    if not as_int:
        return fh.read(n, dtype="float32", always_2d=True)
    out = fh.read(n, dtype="int32", always_2d=True).astype(np.float32)
    out *= _INT32_SCALE
    return out


def _blocks(
    path: Path, n_file: int, n_channels: int, start: int, stop: int, block_frames: int
) -> Iterator[AudioArray]:
    """Blocks of ``[start, stop)``; frames past ``n_file`` (the file's length) are zeros.

    Integer PCM WAV is read directly (:mod:`planner.io.pcm`, the same values, faster);
    everything else through soundfile.
    """
    with sf.SoundFile(str(path)) as fh, open(path, "rb") as raw:
        direct = pcm_reader(fh, raw)
        if start < n_file and direct is None:
            fh.seek(start)
        as_int = fh.subtype in _EXACT_INT_SUBTYPES
        pos = start
        while pos < stop:
            n = min(block_frames, stop - pos)
            n_real = max(0, min(n, n_file - pos))
            try:
                data = _read_float32(fh, n_real, as_int) if direct is None else direct.read(raw, pos, n_real)
            except RuntimeError as exc:
                raise AudioInputError(
                    f"read failed in frames {pos}-{pos + n_real} ({exc}); the file is damaged: export it again",
                    path=path,
                ) from None
            if data.shape[0] < n_real:
                raise AudioInputError(
                    f"ends at frame {pos + data.shape[0]} although its header promises {n_file} frames; "
                    "the file is truncated: export it again",
                    path=path,
                )
            if n_real < n:
                data = np.concatenate([data, np.zeros((n - n_real, n_channels), dtype=np.float32)])
            yield data
            pos += n


def read_blocks(
    path: str | Path,
    *,
    block_frames: int = DEFAULT_BLOCK_FRAMES,
    start_frame: int = 0,
    stop_frame: int | None = None,
) -> Iterator[AudioArray]:
    """Read frames ``[start_frame, stop_frame)`` of an audio file in blocks.

    Parameters
    ----------
    path : str or Path
        A file that :func:`probe` accepts (checked before the first block).
    block_frames : int
        Frames per block; the last block may be shorter.
    start_frame, stop_frame : int
        Range to read; ``stop_frame=None`` reads to the end.

    Returns
    -------
    Iterator of ndarray
        float32 blocks of shape ``(n, n_channels)``, full scale = 1.0.

    Raises
    ------
    AudioInputError
        As :func:`probe`, or when the file turns out truncated or damaged while reading.
    SettingsError
        When the block size or range is invalid.
    """
    info = probe(path)
    stop = _check_range(info, block_frames, start_frame, stop_frame)
    return _blocks(Path(path), info.n_frames, info.n_channels, start_frame, stop, block_frames)


def probe_peak_dbfs(path: str | Path, *, block_frames: int = DEFAULT_BLOCK_FRAMES) -> float:
    """Sample peak of a whole file in dBFS (full scale 1.0), read block by block.

    Digital silence gives -200 dBFS, the floor used by :func:`planner.units.power_to_db`.
    """
    peak = 0.0
    for block in read_blocks(path, block_frames=block_frames):
        peak = max(peak, float(np.max(np.abs(block))))
    return 20.0 * np.log10(peak) if peak > 0.0 else _PEAK_FLOOR_DBFS


# --------------------------------------------------------------------------- programmes


@dataclass(frozen=True)
class Programme:
    """A programme's audio: one mix, or a dialogue stem plus a background stem.

    ``info`` describes the mix, or the dialogue stem with ``n_frames`` set to the longer
    of the two stems (the shorter one is read with trailing zeros).
    """

    kind: Literal["mix", "stems"]
    mix: Path | None
    dialogue: Path | None
    background: Path | None
    info: AudioInfo


@dataclass(frozen=True, eq=False)
class ProgrammeBlock:
    """One block of a programme starting at frame ``start_frame``.

    ``mix`` is always set (for stems it is ``dialogue + background``); ``dialogue`` and
    ``background`` are set for stems only. All are float32 ``(n, n_channels)``.
    """

    start_frame: int
    mix: AudioArray
    dialogue: AudioArray | None
    background: AudioArray | None

    @property
    def n_frames(self) -> int:
        """Frames in this block."""
        return int(self.mix.shape[0])


def open_programme(
    *,
    mix: str | Path | None = None,
    dialogue: str | Path | None = None,
    background: str | Path | None = None,
) -> Programme:
    """Check the programme's files and describe them.

    Pass either ``mix`` alone, or ``dialogue`` and ``background`` together. Stems must
    share sample rate and channel count, and their lengths may differ by at most
    :data:`STEM_LENGTH_TOLERANCE_FRAMES` frames.

    Raises
    ------
    AudioInputError
        Wrong combination of files, any file that :func:`probe` rejects, or stems that do
        not match (the message says what differs).
    """
    if mix is not None:
        if dialogue is not None or background is not None:
            raise AudioInputError("both a mix and stems were given; pass either a mix or a dialogue and a background stem")
        return Programme(kind="mix", mix=Path(mix), dialogue=None, background=None, info=probe(mix))
    if dialogue is None or background is None:
        if dialogue is None and background is None:
            raise AudioInputError("no audio was given; pass a mix, or a dialogue and a background stem")
        missing = "background" if background is None else "dialogue"
        raise AudioInputError(f"the {missing} stem is missing; pass both stems, or pass a mix instead")
    d_path, b_path = Path(dialogue), Path(background)
    d, b = probe(d_path), probe(b_path)
    if d_path.resolve() == b_path.resolve():
        raise AudioInputError("dialogue and background are the same file; pass two different stems", path=d_path)
    if d.sample_rate_hz != b.sample_rate_hz:
        raise AudioInputError(
            f"stems differ in sample rate: dialogue {d.sample_rate_hz} Hz, background {b.sample_rate_hz} Hz; "
            "resample one stem so both have the same rate"
        )
    if d.n_channels != b.n_channels:
        raise AudioInputError(
            f"stems differ in channel count: dialogue {d.n_channels} ({d.layout}), background "
            f"{b.n_channels} ({b.layout}); export both stems with the same layout"
        )
    diff = abs(d.n_frames - b.n_frames)
    if diff > STEM_LENGTH_TOLERANCE_FRAMES:
        raise AudioInputError(
            f"stems differ in length by {diff} frames ({diff / d.sample_rate_hz:.3f} s): dialogue "
            f"{d.duration_s:.3f} s, background {b.duration_s:.3f} s, more than "
            f"{STEM_LENGTH_TOLERANCE_FRAMES} frames; export both stems over the same time range"
        )
    info = replace(d, n_frames=max(d.n_frames, b.n_frames))
    return Programme(kind="stems", mix=None, dialogue=d_path, background=b_path, info=info)


def iter_programme(
    programme: Programme,
    *,
    block_frames: int = DEFAULT_BLOCK_FRAMES,
    start_frame: int = 0,
    stop_frame: int | None = None,
) -> Iterator[ProgrammeBlock]:
    """Read a programme block by block over frames ``[start_frame, stop_frame)``.

    For stems both files are read in step; the shorter stem is padded with zeros up to
    ``programme.info.n_frames``, and ``mix`` is their sum. The files and the range are
    checked before the first block.
    """
    stop = _check_range(programme.info, block_frames, start_frame, stop_frame)
    paths = [p for p in (programme.mix, programme.dialogue, programme.background) if p is not None]
    readers = [
        _blocks(p, probe(p).n_frames, programme.info.n_channels, start_frame, stop, block_frames) for p in paths
    ]
    return _programme_blocks(programme.kind, readers, start_frame, block_frames)


def _programme_blocks(
    kind: str, readers: list[Iterator[AudioArray]], start_frame: int, block_frames: int
) -> Iterator[ProgrammeBlock]:
    for i, blocks in enumerate(zip(*readers)):
        start = start_frame + i * block_frames
        if kind == "mix":
            yield ProgrammeBlock(start, blocks[0], None, None)
        else:
            d, b = blocks
            yield ProgrammeBlock(start, d + b, d, b)


__all__ = [
    "BIT_DEPTHS",
    "DEFAULT_BLOCK_FRAMES",
    "LAYOUTS",
    "STEM_LENGTH_TOLERANCE_FRAMES",
    "AudioWriter",
    "Programme",
    "ProgrammeBlock",
    "iter_programme",
    "open_programme",
    "probe",
    "probe_peak_dbfs",
    "read_blocks",
]
