"""Direct integer PCM reading (planner.io.pcm) against libsndfile, the reference reader.

Files are written by soundfile (libsndfile) or built chunk by chunk here; every read is
compared with soundfile's own float32 read of the same file.
"""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from planner.io import pcm
from planner.io.audio import read_blocks

# (container, subtype) read directly
DIRECT = {
    "wav-pcm16": ("WAV", "PCM_16"),
    "wav-pcm24": ("WAV", "PCM_24"),
    "wavex-pcm24": ("WAVEX", "PCM_24"),
    "rf64-pcm24": ("RF64", "PCM_24"),
}
# formats that go through soundfile
INDIRECT = {
    "wav-pcm32": ("WAV", "PCM_32"),
    "wav-float": ("WAV", "FLOAT"),
    "flac-pcm24": ("FLAC", "PCM_24"),
}


def _write(path: Path, rng: np.random.Generator, fmt: str, subtype: str, n: int = 5003, ch: int = 2) -> np.ndarray:
    x = rng.uniform(-1.0, 1.0, size=(n, ch))
    x[0], x[1] = -1.0, 1.0 - 2.0**-23  # the extreme codes
    sf.write(str(path), x, 48000, format=fmt, subtype=subtype)
    return sf.read(str(path), dtype="float32", always_2d=True)[0]


def _read_all(path: Path, block_frames: int) -> np.ndarray:
    return np.concatenate(list(read_blocks(path, block_frames=block_frames)))


@pytest.mark.parametrize("name", sorted(DIRECT), ids=sorted(DIRECT))
@pytest.mark.parametrize("ch", [1, 2, 6], ids=["mono", "stereo", "5.1"])
def test_integer_wav_is_read_directly_with_libsndfiles_values(tmp_path, rng, name, ch):
    # Reference: soundfile's float32 read of the same file (libsndfile's conversion).
    fmt, subtype = DIRECT[name]
    path = tmp_path / "x.wav"
    expected = _write(path, rng, fmt, subtype, ch=ch)
    with sf.SoundFile(str(path)) as fh, open(path, "rb") as raw:
        assert pcm.pcm_reader(fh, raw) is not None
    for block_frames in (1000, 4096, 65536):
        np.testing.assert_array_equal(_read_all(path, block_frames), expected)


@pytest.mark.parametrize("name", sorted(INDIRECT), ids=sorted(INDIRECT))
def test_other_formats_go_through_soundfile(tmp_path, rng, name):
    fmt, subtype = INDIRECT[name]
    path = tmp_path / f"x.{fmt.lower()}"
    _write(path, rng, fmt, subtype)
    with sf.SoundFile(str(path)) as fh, open(path, "rb") as raw:
        assert pcm.pcm_reader(fh, raw) is None


def _chunk(chunk_id: bytes, body: bytes) -> bytes:
    return chunk_id + struct.pack("<I", len(body)) + body + (b"\0" if len(body) % 2 else b"")


def test_chunks_before_the_data_are_skipped_with_their_padding(tmp_path, rng):
    # Ground truth: a RIFF file built here with an odd-sized chunk (padded to even, RIFF
    # rule) and a bext-like chunk between fmt and data; libsndfile reads the same samples.
    codes = rng.integers(-(2**23), 2**23, size=(777, 2))
    data = b"".join(int(v).to_bytes(3, "little", signed=True) for v in codes.ravel())
    fmt = struct.pack("<HHIIHH", 1, 2, 48000, 48000 * 6, 6, 24)
    body = b"WAVE" + _chunk(b"fmt ", fmt) + _chunk(b"LIST", b"odd") + _chunk(b"bext", bytes(602)) + _chunk(b"data", data)
    path = tmp_path / "chunks.wav"
    path.write_bytes(b"RIFF" + struct.pack("<I", len(body)) + body)
    expected = sf.read(str(path), dtype="float32", always_2d=True)[0]
    np.testing.assert_array_equal(expected, (codes / 2.0**23).astype(np.float32))
    with sf.SoundFile(str(path)) as fh, open(path, "rb") as raw:
        assert pcm.pcm_reader(fh, raw) is not None
    np.testing.assert_array_equal(_read_all(path, 100), expected)


def test_a_wrong_data_offset_is_caught_by_the_check_against_libsndfile(tmp_path, rng, monkeypatch):
    # Ground truth: three bytes off is one sample off, which the comparison with libsndfile sees.
    path = tmp_path / "x.wav"
    expected = _write(path, rng, "WAV", "PCM_24")
    real = pcm._data_offset
    monkeypatch.setattr(pcm, "_data_offset", lambda *a: real(*a) + 3)
    with sf.SoundFile(str(path)) as fh, open(path, "rb") as raw:
        assert pcm.pcm_reader(fh, raw) is None
    np.testing.assert_array_equal(_read_all(path, 1000), expected)


def test_a_header_that_is_not_riff_is_left_to_soundfile(tmp_path):
    path = tmp_path / "x.wav"
    path.write_bytes(b"RIFX" + bytes(40))
    with open(path, "rb") as raw:
        assert pcm._data_offset(raw, 2, 3) is None


@pytest.mark.parametrize("ch", [1, 2, 6], ids=["mono", "stereo", "5.1"])
def test_24_bit_wav_written_directly_is_libsndfiles_file_byte_for_byte(tmp_path, rng, ch):
    # Reference: the same samples written by soundfile (libsndfile's float to 24-bit conversion,
    # with clipping); an odd frame count so that a mono file needs its pad byte.
    from planner.io.audio_writer import AudioWriter

    x = (rng.standard_normal((4001, ch)) * 0.3).astype(np.float32)
    x[:6, 0] = [1.5, -1.5, 1.0, -1.0, 1.0 - 2.0**-24, 2.0**-24]  # beyond, at and next to full scale, tiny
    x[6:9, 0] = np.array([0.5, 1.5, -2.5], dtype=np.float32) * 2.0**-23  # halves of the last bit
    reference = tmp_path / "reference.wav"
    sf.write(str(reference), x, 48000, subtype="PCM_24", format="WAVEX" if ch > 2 else "WAV")
    writer = AudioWriter(tmp_path / "direct.wav", sample_rate_hz=48000, n_channels=ch)
    with writer:
        for start in range(0, 4001, 1500):
            writer.write(x[start : start + 1500])
    assert (tmp_path / "direct.wav").read_bytes() == reference.read_bytes()
    assert writer.n_clipped == np.count_nonzero(np.abs(x) > 1.0)  # Ground truth: the samples beyond full scale
