"""Audio input/output: probe, block reader, programmes (mix or stems), atomic writer, bad input.

Test files are written in ``tmp_path`` with soundfile (libsndfile) itself, the reference
for what a WAV/FLAC file holds; integer sample codes make every PCM round trip exact.
"""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.errors import AudioInputError, OutputError, SettingsError
from planner.io.audio import (
    STEM_LENGTH_TOLERANCE_FRAMES,
    AudioWriter,
    iter_programme,
    open_programme,
    probe,
    probe_peak_dbfs,
    read_blocks,
)

# (container, subtype, bits of the integer codes written, numpy dtype handed to soundfile)
FORMATS = {
    "wav-pcm16": ("WAV", "PCM_16", 16),
    "wav-pcm24": ("WAV", "PCM_24", 24),
    "wav-pcm32": ("WAV", "PCM_32", 24),  # 24 significant bits: exactly representable in float32
    "wav-float": ("WAV", "FLOAT", None),
    "wav-double": ("WAV", "DOUBLE", None),
    "flac-pcm16": ("FLAC", "PCM_16", 16),
    "flac-pcm24": ("FLAC", "PCM_24", 24),
}
BIT_DEPTH = {"PCM_16": 16, "PCM_24": 24, "PCM_32": 32, "FLOAT": None, "DOUBLE": None}


def codes(rng: np.random.Generator, n: int, ch: int, bits: int | None) -> tuple[np.ndarray, np.ndarray]:
    """Samples to hand to soundfile and the float32 values a reader must return for them."""
    if bits is None:
        x = rng.uniform(-1.0, 1.0, size=(n, ch))
        return x, x.astype(np.float32)
    q = rng.integers(-(2 ** (bits - 1)), 2 ** (bits - 1), size=(n, ch))
    if bits == 16:
        return q.astype(np.int16), (q / 2.0**15).astype(np.float32)
    # int32 container: libsndfile keeps the top bits, full scale 2**31
    as_int32 = q.astype(np.int64) << (32 - bits)
    return as_int32.astype(np.int32), (as_int32 / 2.0**31).astype(np.float32)


def write(path: Path, data: np.ndarray, rate: int = 48000, fmt: str = "WAV", subtype: str = "PCM_24") -> Path:
    sf.write(str(path), data, rate, format=fmt, subtype=subtype)
    return path


def read_all(path: Path, **kw) -> np.ndarray:
    return np.concatenate(list(read_blocks(path, **kw)))


# --------------------------------------------------------------------------- reading


@pytest.mark.parametrize("name", sorted(FORMATS), ids=sorted(FORMATS))
@pytest.mark.parametrize("n_channels", [1, 2, 6], ids=["mono", "stereo", "5.1"])
def test_round_trip_every_format(tmp_path, rng, name, n_channels):
    fmt, subtype, bits = FORMATS[name]
    data, expected = codes(rng, 3001, n_channels, bits)
    path = write(tmp_path / f"x.{fmt.lower()}", data, fmt=fmt, subtype=subtype)
    got = read_all(path, block_frames=1000)
    assert got.dtype == np.float32 and got.shape == (3001, n_channels)
    np.testing.assert_array_equal(got, expected)


@pytest.mark.parametrize("name", ["wav-pcm16", "wav-pcm24", "flac-pcm16", "flac-pcm24"])
def test_integer_files_read_as_libsndfile_converts_them(tmp_path, rng, name):
    # Reference: libsndfile's own float32 conversion (soundfile dtype="float32"), extreme codes included.
    fmt, subtype, bits = FORMATS[name]
    data, _ = codes(rng, 3000, 2, bits)
    info = np.iinfo(data.dtype)
    data[:2] = [[info.min, info.max], [info.max, info.min]]
    path = write(tmp_path / f"x.{fmt.lower()}", data, fmt=fmt, subtype=subtype)
    np.testing.assert_array_equal(read_all(path, block_frames=1000), sf.read(str(path), dtype="float32", always_2d=True)[0])


@pytest.mark.parametrize("name", sorted(FORMATS), ids=sorted(FORMATS))
def test_probe_fields(tmp_path, rng, name):
    fmt, subtype, bits = FORMATS[name]
    data, _ = codes(rng, 1234, 6, bits)
    info = probe(write(tmp_path / "x.bin", data, rate=44100, fmt=fmt, subtype=subtype))
    assert (info.sample_rate_hz, info.n_channels, info.n_frames, info.layout) == (44100, 6, 1234, "5.1")
    assert (info.format, info.subtype, info.bit_depth) == (fmt, subtype, BIT_DEPTH[subtype])
    assert info.duration_s == pytest.approx(1234 / 44100)


@pytest.mark.parametrize("rate", [8000, 22050, 44100, 96000, 192000], ids=lambda r: f"{r}Hz")
def test_any_rate(tmp_path, rate):
    path = write(tmp_path / "x.wav", np.zeros((rate // 10, 2), np.float32), rate=rate)
    assert probe(path).sample_rate_hz == rate


def test_layout_from_channel_count(tmp_path):
    layouts = {n: probe(write(tmp_path / f"{n}.wav", np.zeros((10, n), np.float32))).layout for n in (1, 2, 6)}
    assert layouts == {1: "mono", 2: "stereo", 6: "5.1"}


def test_probe_peak(tmp_path):
    # A single sample of code -16384 in 16-bit is -6.0206 dBFS (20 log10 0.5)
    data = np.zeros((100000, 2), np.int16)
    data[77777, 1] = -16384
    path = write(tmp_path / "p.wav", data, subtype="PCM_16")
    assert probe_peak_dbfs(path, block_frames=4096) == pytest.approx(20 * np.log10(0.5), abs=1e-9)
    silent = write(tmp_path / "s.wav", np.zeros((100, 1), np.int16), subtype="PCM_16")
    assert probe_peak_dbfs(silent) == -200.0


@pytest.fixture(scope="module")
def ramp_file(tmp_path_factory) -> Path:
    """1000 frames whose value is the frame index (16-bit codes), two channels."""
    idx = np.arange(1000, dtype=np.int16)
    return write(tmp_path_factory.mktemp("ramp") / "ramp.wav", np.stack([idx, -idx], axis=1), subtype="PCM_16")


@settings(max_examples=60, deadline=None)
@given(
    block=st.integers(min_value=1, max_value=1200),
    start=st.integers(min_value=0, max_value=1000),
    length=st.integers(min_value=0, max_value=1000),
)
def test_blocks_cover_every_frame_once(ramp_file, block, start, length):
    stop = min(1000, start + length)
    blocks = list(read_blocks(ramp_file, block_frames=block, start_frame=start, stop_frame=stop))
    assert all(0 < b.shape[0] <= block for b in blocks)
    frames = np.concatenate([b[:, 0] for b in blocks]) * 2**15 if blocks else np.zeros(0)
    np.testing.assert_array_equal(frames, np.arange(start, stop))


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"block_frames": 0}, r"block_frames=0 must be a positive whole number"),
        ({"start_frame": 10, "stop_frame": 5}, r"start_frame=10, stop_frame=5 must satisfy"),
        ({"stop_frame": 1001}, r"<= 1000 \(the length in frames\)"),
    ],
    ids=["zero-block", "reversed", "past-end"],
)
def test_bad_read_range(ramp_file, kwargs, match):
    with pytest.raises(SettingsError, match=match):
        read_blocks(ramp_file, **kwargs)


# --------------------------------------------------------------------------- bad input


def _broken(tmp_path: Path, kind: str) -> Path:
    path = tmp_path / f"{kind}.wav"
    good = tmp_path / "good.wav"
    write(good, np.full((2000, 2), 0.25, np.float32))
    raw = bytearray(good.read_bytes())
    if kind == "empty":
        path.write_bytes(b"")
    elif kind == "text":
        path.write_text("not audio at all\n")
    elif kind == "header":
        raw[12:16] = b"xxxx"  # the fmt chunk id
        path.write_bytes(bytes(raw))
    elif kind == "truncated":
        path.write_bytes(bytes(raw[: len(raw) // 2]))
    elif kind == "zero-length":
        write(path, np.zeros((0, 2), np.float32))
    elif kind == "three-channels":
        write(path, np.zeros((10, 3), np.float32))
    elif kind == "eight-channels":
        write(path, np.zeros((10, 8), np.float32))
    elif kind == "aiff":
        write(path, np.zeros((10, 2), np.float32), fmt="AIFF", subtype="PCM_16")
    elif kind == "8-bit":
        write(path, np.zeros((10, 2), np.float32), subtype="PCM_U8")
    return path


BAD_INPUTS = {
    "missing": r"file not found; check the path",
    "empty": r"file is empty \(0 bytes\); export the audio again",
    "text": r"cannot read the audio header .*; check that it is a complete WAV/BWF or FLAC file",
    "header": r"cannot read the audio header .*; check that it is a complete WAV/BWF or FLAC file",
    "truncated": r"is truncated: its header promises 12000 bytes .*; copy or export the file again",
    "zero-length": r"contains no audio \(zero frames\); export the programme again",
    "three-channels": r"has 3 channels; supported channel counts are 1 \(mono\), 2 \(stereo\) or 6 \(5\.1",
    "eight-channels": r"has 8 channels; supported channel counts are .*export the programme as mono, stereo or 5\.1",
    "aiff": r"container AIFF is not supported; convert it to WAV/BWF or FLAC",
    "8-bit": r"sample format PCM_U8 is not supported; use 16/24/32-bit PCM or 32/64-bit float",
}


@pytest.mark.parametrize("kind", sorted(BAD_INPUTS), ids=sorted(BAD_INPUTS))
def test_bad_input(tmp_path, kind):
    path = tmp_path / "missing.wav" if kind == "missing" else _broken(tmp_path, kind)
    with pytest.raises(AudioInputError, match=BAD_INPUTS[kind]):
        probe(path)
    with pytest.raises(AudioInputError, match=BAD_INPUTS[kind]):
        read_blocks(path)
    with pytest.raises(AudioInputError, match=BAD_INPUTS[kind]):
        open_programme(mix=path)


def test_directory_is_not_a_file(tmp_path):
    with pytest.raises(AudioInputError, match=r"is not a file; pass the path of a WAV/BWF or FLAC file"):
        probe(tmp_path)


def test_damaged_flac_while_reading(tmp_path, rng):
    good = write(tmp_path / "g.flac", rng.uniform(-0.5, 0.5, (100000, 2)), fmt="FLAC", subtype="PCM_24")
    bad = tmp_path / "b.flac"
    bad.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    with pytest.raises(AudioInputError, match=r"read failed in frames 0-65536 .*the file is damaged: export it again"):
        read_all(bad, block_frames=65536)


# --------------------------------------------------------------------------- programmes


def test_mix_programme(tmp_path, rng):
    data, expected = codes(rng, 5000, 2, 24)
    prog = open_programme(mix=write(tmp_path / "mix.wav", data))
    assert (prog.kind, prog.dialogue, prog.background, prog.info.n_frames) == ("mix", None, None, 5000)
    blocks = list(iter_programme(prog, block_frames=1024))
    assert [b.start_frame for b in blocks] == [0, 1024, 2048, 3072, 4096]
    assert all(b.dialogue is None and b.background is None for b in blocks)
    np.testing.assert_array_equal(np.concatenate([b.mix for b in blocks]), expected)


def test_stems_programme_sums_and_pads(tmp_path, rng):
    d_data, d = codes(rng, 5000, 2, 16)
    b_data, b = codes(rng, 4000, 2, 16)
    prog = open_programme(
        dialogue=write(tmp_path / "d.wav", d_data, subtype="PCM_16"),
        background=write(tmp_path / "b.wav", b_data, subtype="PCM_16"),
    )
    assert prog.kind == "stems" and prog.mix is None and prog.info.n_frames == 5000
    blocks = list(iter_programme(prog, block_frames=700, start_frame=300))
    assert blocks[0].start_frame == 300 and sum(x.n_frames for x in blocks) == 4700
    dia = np.concatenate([x.dialogue for x in blocks])
    bkg = np.concatenate([x.background for x in blocks])
    np.testing.assert_array_equal(dia, d[300:])
    np.testing.assert_array_equal(bkg, np.concatenate([b[300:], np.zeros((1000, 2), np.float32)]))
    np.testing.assert_array_equal(np.concatenate([x.mix for x in blocks]), dia + bkg)


def test_stems_within_the_length_tolerance_are_accepted(tmp_path):
    d = write(tmp_path / "d.wav", np.zeros((STEM_LENGTH_TOLERANCE_FRAMES + 10, 1), np.float32))
    b = write(tmp_path / "b.wav", np.zeros((10, 1), np.float32))
    assert open_programme(dialogue=d, background=b).info.n_frames == STEM_LENGTH_TOLERANCE_FRAMES + 10


@pytest.mark.parametrize(
    ("dialogue", "background", "match"),
    [
        ((48000, 2, 4800), (44100, 2, 4800), r"stems differ in sample rate: dialogue 48000 Hz, background 44100 Hz; resample"),
        ((48000, 2, 4800), (48000, 6, 4800), r"stems differ in channel count: dialogue 2 \(stereo\), background 6 \(5\.1\)"),
        ((48000, 1, 200000), (48000, 1, 100000), r"stems differ in length by 100000 frames \(2\.083 s\).*same time range"),
    ],
    ids=["rate", "channels", "length"],
)
def test_stems_that_do_not_match(tmp_path, dialogue, background, match):
    paths = []
    for name, (rate, ch, n) in (("d", dialogue), ("b", background)):
        paths.append(write(tmp_path / f"{name}.wav", np.zeros((n, ch), np.float32), rate=rate))
    with pytest.raises(AudioInputError, match=match):
        open_programme(dialogue=paths[0], background=paths[1])


def test_programme_arguments(tmp_path):
    path = write(tmp_path / "x.wav", np.zeros((10, 2), np.float32))
    with pytest.raises(AudioInputError, match=r"no audio was given; pass a mix"):
        open_programme()
    with pytest.raises(AudioInputError, match=r"both a mix and stems were given"):
        open_programme(mix=path, dialogue=path)
    with pytest.raises(AudioInputError, match=r"the background stem is missing; pass both stems"):
        open_programme(dialogue=path)
    with pytest.raises(AudioInputError, match=r"the dialogue stem is missing"):
        open_programme(background=path)
    with pytest.raises(AudioInputError, match=r"dialogue and background are the same file"):
        open_programme(dialogue=path, background=tmp_path / "." / "x.wav")


# --------------------------------------------------------------------------- writer


def _bext_description(path: Path) -> bytes | None:
    """The bext Description as libsndfile reads it (SFC_GET_BROADCAST_INFO = 0x10F0, sndfile.h).

    soundfile does not wrap this command; its cffi handle is used here, in a test only.
    """
    from soundfile import _ffi, _snd

    with sf.SoundFile(str(path)) as fh:
        size = 1024
        buf = _ffi.new("char[]", size)
        if not _snd.sf_command(fh._file, 0x10F0, buf, size):
            return None
        return bytes(_ffi.buffer(buf)[:256]).rstrip(b"\0")


@pytest.mark.parametrize("n_channels", [1, 2, 6], ids=["mono", "stereo", "5.1"])
def test_writer_round_trip_with_bext(tmp_path, rng, n_channels):
    _, expected = codes(rng, 10001, n_channels, 24)
    target = tmp_path / "out.wav"
    with AudioWriter(target, sample_rate_hz=48000, n_channels=n_channels, description="invented scene, pass 2") as w:
        for i in range(0, 10001, 4096):
            w.write(expected[i : i + 4096])
    np.testing.assert_array_equal(sf.read(str(target), dtype="float32", always_2d=True)[0], expected)
    assert _bext_description(target) == b"invented scene, pass 2"
    info = probe(target)  # our own reader accepts the bext after the audio
    assert (info.n_frames, info.format) == (10001, "WAVEX" if n_channels == 6 else "WAV")
    assert target.stat().st_size % 2 == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.wav"]


def test_writer_flac_comment(tmp_path, rng):
    _, expected = codes(rng, 3000, 2, 16)
    target = tmp_path / "out.flac"
    with AudioWriter(target, sample_rate_hz=44100, n_channels=2, subtype="PCM_16", description="scene 4") as w:
        w.write(expected)
    with sf.SoundFile(str(target)) as fh:
        assert fh.comment == "scene 4"
        np.testing.assert_array_equal(fh.read(dtype="float32", always_2d=True), expected)


def test_writer_without_description_writes_no_bext(tmp_path):
    target = tmp_path / "plain.wav"
    with AudioWriter(target, sample_rate_hz=48000, n_channels=1) as w:
        w.write(np.zeros((10, 1), np.float32))
    assert _bext_description(target) is None


def test_writer_is_deterministic(tmp_path, rng):
    data = rng.uniform(-0.5, 0.5, (5000, 2)).astype(np.float32)
    outs = []
    for name in ("a.wav", "b.wav"):
        with AudioWriter(tmp_path / name, sample_rate_hz=48000, n_channels=2, description="same") as w:
            w.write(data)
        outs.append((tmp_path / name).read_bytes())
    assert outs[0] == outs[1]


def test_writer_clips_pcm_and_counts(tmp_path):
    target = tmp_path / "clip.wav"
    with AudioWriter(target, sample_rate_hz=48000, n_channels=1, subtype="PCM_16") as w:
        w.write(np.array([[1.5], [-2.0], [0.5], [1.0]], np.float32))
    assert w.n_clipped == 2 and w.n_frames == 4
    # libsndfile 1.2 clips to the 16-bit code range; 0.5 is code 16384
    got, _ = sf.read(str(target), dtype="int16")
    np.testing.assert_array_equal(got, [32767, -32768, 16384, 32767])


def test_writer_pcm32_full_scale_does_not_wrap(tmp_path):
    target = tmp_path / "fs.wav"
    with AudioWriter(target, sample_rate_hz=48000, n_channels=1, subtype="PCM_32") as w:
        w.write(np.array([[1.0], [-1.0]], np.float32))
    got, _ = sf.read(str(target), dtype="int32")
    assert (got[0], got[1]) == (2**31 - 1, -(2**31))


def test_writer_exception_leaves_nothing(tmp_path):
    target = tmp_path / "out.wav"
    with pytest.raises(RuntimeError, match="stop here"):
        with AudioWriter(target, sample_rate_hz=48000, n_channels=2, description="x") as w:
            w.write(np.zeros((1000, 2), np.float32))
            raise RuntimeError("stop here")
    assert list(tmp_path.iterdir()) == []


def test_writer_keeps_an_existing_file_on_failure(tmp_path):
    target = tmp_path / "out.wav"
    target.write_bytes(b"previous version")
    with pytest.raises(KeyboardInterrupt):
        with AudioWriter(target, sample_rate_hz=48000, n_channels=1) as w:
            w.write(np.zeros((10, 1), np.float32))
            raise KeyboardInterrupt
    assert target.read_bytes() == b"previous version"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.wav"]


def test_writer_refuses_to_overwrite_an_input(tmp_path):
    source = write(tmp_path / "mix.wav", np.full((100, 2), 0.1, np.float32))
    before = source.read_bytes()
    with pytest.raises(OutputError, match=r"refusing to write over the input file"):
        AudioWriter(tmp_path / "." / "mix.wav", sample_rate_hz=48000, n_channels=2, inputs=[source])
    assert source.read_bytes() == before


def test_writer_missing_folder(tmp_path):
    with pytest.raises(OutputError, match=r"output folder does not exist"):
        with AudioWriter(tmp_path / "nope" / "x.wav", sample_rate_hz=48000, n_channels=2):
            pass


@pytest.mark.parametrize(
    ("name", "kwargs", "match"),
    [
        ("x.mp3", {}, r"unsupported suffix; use one of \.wav"),
        ("x.flac", {"subtype": "FLOAT"}, r"subtype='FLOAT' cannot be written as FLAC; pass one of PCM_16, PCM_24"),
        ("x.wav", {"n_channels": 4}, r"n_channels=4 is not supported"),
        ("x.wav", {"description": "caf\u00e9"}, r"description must be ASCII text of at most 256 characters"),
        ("x.wav", {"description": "a" * 257}, r"description must be ASCII"),
    ],
    ids=["suffix", "flac-float", "channels", "non-ascii", "too-long"],
)
def test_writer_bad_settings(tmp_path, name, kwargs, match):
    args = {"sample_rate_hz": 48000, "n_channels": 2} | kwargs
    with pytest.raises(SettingsError, match=match):
        AudioWriter(tmp_path / name, **args)


def test_writer_rejects_wrong_blocks(tmp_path):
    with AudioWriter(tmp_path / "x.wav", sample_rate_hz=48000, n_channels=2) as w:
        with pytest.raises(ValueError, match=r"block shape \(10, 1\) does not match n_channels=2"):
            w.write(np.zeros((10, 1), np.float32))
        with pytest.raises(ValueError, match=r"NaN or infinite"):
            w.write(np.full((10, 2), np.nan, np.float32))


def test_bext_chunk_layout(tmp_path):
    # EBU Tech 3285: the chunk id 'bext', then Description (256 bytes) first; RIFF size = file size - 8
    target = tmp_path / "x.wav"
    with AudioWriter(target, sample_rate_hz=48000, n_channels=1, description="cue 12") as w:
        w.write(np.zeros((3, 1), np.float32))
    raw = target.read_bytes()
    assert struct.unpack("<I", raw[4:8])[0] == len(raw) - 8
    at = raw.index(b"bext")
    assert raw[at + 8 : at + 14] == b"cue 12"
