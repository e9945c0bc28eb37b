"""Short listening clips of the worst lines, for the HTML report (original and rendered).

Each clip is the aligned span of one cue plus ``pad_s`` either side, read with only the
frames it needs (:func:`planner.io.audio.read_blocks` with ``start_frame``/``stop_frame``),
folded to mono, resampled to 16 kHz (soxr) and encoded as 16-bit PCM WAV in memory, small
enough to embed in the page as a ``data:`` URI (about 32 kB per second).
"""

from __future__ import annotations

import io
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import soundfile as sf
import soxr

from planner.analysis.channels import fold_down_stereo
from planner.io.audio import Programme, iter_programme, probe, read_blocks
from planner.model import Plan
from planner.report.figures import score_kind, worst_cues
from planner.units import seconds_to_samples

#: Sample rate of the embedded clips, Hz: speech bandwidth to 8 kHz, the top SII band.
CLIP_RATE_HZ = 16000
#: Longest clip, seconds (a cue is at most a few seconds; this bounds a pathological one).
MAX_CLIP_S = 20.0


@dataclass(frozen=True)
class Clip:
    """One cue's clip: ``original_wav`` / ``rendered_wav`` are complete WAV files (mono, 16 kHz, 16-bit)."""

    cue_index: int
    label: str
    original_wav: bytes
    rendered_wav: bytes | None = None


def _blocks(source: str | Path | Programme, start: int, stop: int) -> Iterator[np.ndarray]:
    if isinstance(source, Programme):
        return (b.mix for b in iter_programme(source, start_frame=start, stop_frame=stop))
    return read_blocks(source, start_frame=start, stop_frame=stop)


def _mono(block: np.ndarray) -> np.ndarray:
    """Fold to mono: 5.1 through the ITU-R BS.775 stereo fold-down, then (L+R)/2."""
    if block.shape[1] == 6:
        block = fold_down_stereo(block)
    return block.mean(axis=1, dtype=np.float32) if block.shape[1] > 1 else block[:, 0]


def encode_clip(source: str | Path | Programme, start_s: float, end_s: float) -> bytes:
    """Frames ``[start_s, end_s)`` of an audio file or programme as a mono 16 kHz 16-bit WAV.

    Parameters
    ----------
    source : str, Path or Programme
        An audio file, or a programme (its mix; for stems dialogue + background).
    start_s, end_s : float
        Span in seconds, clipped to the audio and to :data:`MAX_CLIP_S`.
    """
    info = source.info if isinstance(source, Programme) else probe(source)
    rate = info.sample_rate_hz
    start = min(max(0, seconds_to_samples(start_s, rate)), info.n_frames)
    stop = min(info.n_frames, max(start, seconds_to_samples(min(end_s, start_s + MAX_CLIP_S), rate)))
    parts = [_mono(b) for b in _blocks(source, start, stop)]
    x = np.concatenate(parts) if parts else np.zeros(0, dtype=np.float32)
    y = soxr.resample(x, rate, CLIP_RATE_HZ) if rate != CLIP_RATE_HZ and x.size else x
    buf = io.BytesIO()
    # Clip to full scale before the integer format: libsndfile would otherwise wrap.
    sf.write(buf, np.clip(y, -1.0, 1.0), CLIP_RATE_HZ, format="WAV", subtype="PCM_16")
    return buf.getvalue()


def extract_clips(
    plan: Plan,
    audio_path: str | Path | Programme,
    *,
    rendered_path: str | Path | None = None,
    top: int = 5,
    pad_s: float = 0.5,
) -> tuple[Clip, ...]:
    """Clips of the ``top`` worst at-risk and masked cues (masked first, lowest score first).

    Parameters
    ----------
    plan : Plan
        The plan whose analysis gives the cues, their aligned spans and their scores.
    audio_path : str, Path or Programme
        The programme's audio as analysed (a mix file, or the opened stems programme).
    rendered_path : str or Path, optional
        The rendered version; when given each clip also holds the same span from it.
    top : int
        How many cues.
    pad_s : float
        Seconds added before and after each cue's aligned span.
    """
    clips = []
    for row in worst_cues(plan.analysis, score_kind(plan), top):
        a, b = row.start_s - pad_s, row.end_s + pad_s
        clips.append(Clip(
            cue_index=row.index, label=f"cue {row.index} at {row.tc_in}", original_wav=encode_clip(audio_path, a, b),
            rendered_wav=None if rendered_path is None else encode_clip(rendered_path, a, b),
        ))  # fmt: skip
    return tuple(clips)
