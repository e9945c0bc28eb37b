"""Long synthesized programmes for the benchmarks, written block by block in constant memory.

A programme is the demo's fixture lines (:func:`planner.demo.lines.lines_at_rate`) placed
back to back with seeded gaps (about 900 lines per hour, as a dialogue-heavy drama), over
scenes of seeded length, background kind and level. Each scene's background loops a short
seeded tile made once per kind (:func:`planner.demo.synth.spread_background`), so the
generator holds a few tiles and one block, never the programme. The subtitles are the true
cues (:func:`planner.demo.synth.truth_cues`) moved by a constant offset, so alignment has
work to do. Content and scenario are invented.

Files: ``mix.wav``, ``dialogue.wav``, ``background.wav`` (24-bit PCM; RF64 when a file
would pass the 4 GiB limit of a RIFF WAV) and ``subtitles.srt``.
"""

from __future__ import annotations

import bisect
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import soundfile as sf

from planner.demo.lines import lines_at_rate, load_lines
from planner.demo.synth import N_CHANNELS, centre_dialogue, distort_cues, spread_background, truth_cues
from planner.io.subtitles import write_subtitles
from planner.model import Layout, SubtitleTrack

RATE_HZ = 48000
BLOCK_FRAMES = 1 << 16
#: Silence before each line, seconds (uniform): with lines of 3.1 s on average, about 900 lines per hour.
GAP_S = (0.4, 1.5)
#: Scene length, seconds (uniform), and the speech-to-background ratio of a scene, dB (uniform).
SCENE_S = (20.0, 90.0)
SNR_DB = (-3.0, 15.0)
#: Background kinds and how often a scene gets each (babble is rare: it is speech to any detector).
KINDS = ("pink", "music", "rain", "babble")
KIND_WEIGHTS = (0.3, 0.4, 0.2, 0.1)
#: Length of each background tile, seconds (not a divisor of the scene lengths: no visible loop).
TILE_S = 23.3
#: The subtitles run this much ahead of the audio (a constant sync error), seconds.
SUBTITLE_OFFSET_S = 0.3
#: Largest data size written as a RIFF WAV (32-bit sizes, with room for the header), bytes.
_RIFF_LIMIT_BYTES = 0xFFFFFFFF - 1024


@dataclass(frozen=True)
class ProgrammeFiles:
    """The files of one benchmark programme and what they hold."""

    mix: Path
    dialogue: Path
    background: Path
    subtitles: Path
    layout: Layout
    duration_s: float
    n_cues: int


def _schedule(n_frames: int, rng: np.random.Generator) -> tuple[list[int], list[int]]:
    """Start sample and line number of every line that fits in ``n_frames``."""
    audio = lines_at_rate(RATE_HZ)
    starts, which, pos = [], [], 0
    while True:
        pos += int(round(rng.uniform(*GAP_S) * RATE_HZ))
        k = int(rng.integers(len(audio)))
        if pos + audio[k].size > n_frames:
            return starts, which
        starts.append(pos)
        which.append(k)
        pos += audio[k].size


def _scenes(n_frames: int, rng: np.random.Generator) -> tuple[list[int], list[int], list[float], list[int]]:
    """Start sample, background kind index, linear background gain and tile offset of every scene."""
    starts, kinds, gains, offsets, pos = [], [], [], [], 0
    tile = int(TILE_S * RATE_HZ)
    while pos < n_frames:
        starts.append(pos)
        kinds.append(int(rng.choice(len(KINDS), p=KIND_WEIGHTS)))
        gains.append(float(10.0 ** (-rng.uniform(*SNR_DB) / 20.0)))
        offsets.append(int(rng.integers(tile)))
        pos += int(round(rng.uniform(*SCENE_S) * RATE_HZ))
    return starts, kinds, gains, offsets


def _open(path: Path, n_frames: int, n_channels: int) -> sf.SoundFile:
    big = n_frames * n_channels * 3 > _RIFF_LIMIT_BYTES
    return sf.SoundFile(
        str(path), "w", samplerate=RATE_HZ, channels=n_channels, subtype="PCM_24", format="RF64" if big else "WAV"
    )


def write_long_programme(folder: Path, *, duration_s: float, layout: Layout, seed: int) -> ProgrammeFiles:
    """Write a programme of ``duration_s`` seconds in ``layout`` into ``folder``, block by block.

    Peak background sample stays below full scale: tiles are -26 dBFS RMS and the loudest
    scene sits 3 dB above the dialogue's RMS level.
    """
    folder.mkdir(parents=True, exist_ok=True)
    n_frames = int(round(duration_s * RATE_HZ))
    rng = np.random.default_rng([seed, 9])
    lines = lines_at_rate(RATE_HZ)
    script = load_lines()
    line_starts, line_ids = _schedule(n_frames, rng)
    scene_starts, scene_kinds, scene_gains, scene_offsets = _scenes(n_frames, rng)
    tile_n = int(TILE_S * RATE_HZ)
    tiles = [spread_background(kind, tile_n, RATE_HZ, layout, seed=seed + i) for i, kind in enumerate(KINDS)]
    n_ch = N_CHANNELS[layout]
    paths = {role: folder / f"{role}.wav" for role in ("mix", "dialogue", "background")}
    writers = {role: _open(p, n_frames, n_ch) for role, p in paths.items()}
    try:
        for b0 in range(0, n_frames, BLOCK_FRAMES):
            b1 = min(b0 + BLOCK_FRAMES, n_frames)
            mono = np.zeros(b1 - b0, dtype=np.float32)
            i = max(bisect.bisect_right(line_starts, b0) - 1, 0)
            while i < len(line_starts) and line_starts[i] < b1:
                x = lines[line_ids[i]]
                s = line_starts[i]
                lo, hi = max(s, b0), min(s + x.size, b1)
                if lo < hi:
                    mono[lo - b0 : hi - b0] += x[lo - s : hi - s]
                i += 1
            background = np.empty((b1 - b0, n_ch), dtype=np.float32)
            j = bisect.bisect_right(scene_starts, b0) - 1
            pos = b0
            while pos < b1:
                end = min(b1, scene_starts[j + 1] if j + 1 < len(scene_starts) else b1)
                idx = (np.arange(pos, end) + scene_offsets[j]) % tile_n
                background[pos - b0 : end - b0] = tiles[scene_kinds[j]][idx] * np.float32(scene_gains[j])
                pos, j = end, j + 1
            dialogue = centre_dialogue(mono, layout)
            writers["dialogue"].write(dialogue)
            writers["background"].write(background)
            writers["mix"].write(dialogue + background)
    finally:
        for w in writers.values():
            w.close()
    spans = []
    for s, k in zip(line_starts, line_ids):
        v0, v1 = script[k].voiced_span_s
        spans.append((s / RATE_HZ + v0, s / RATE_HZ + v1))
    cues = distort_cues(truth_cues(spans, [script[k].text for k in line_ids]), offset_s=SUBTITLE_OFFSET_S)
    subtitles = folder / "subtitles.srt"
    write_subtitles(subtitles, SubtitleTrack(format="srt", encoding="utf-8", bom=False, cues=cues))
    return ProgrammeFiles(
        mix=paths["mix"],
        dialogue=paths["dialogue"],
        background=paths["background"],
        subtitles=subtitles,
        layout=layout,
        duration_s=n_frames / RATE_HZ,
        n_cues=len(cues),
    )
