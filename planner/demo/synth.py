"""Synthesized programmes with known truth, for tests and benchmarks across the project.

A programme is the demo's fixture lines (real synthesized speech) placed at seeded gaps,
over a code-made background scaled to an exact speech-to-background ratio, with the true
speech spans and the cues a careful subtitler would have written. :func:`distort_cues`
then makes the subtitle file as it would arrive out of step.

SNR, as used throughout: ``10*log10(P_d / P_b)`` where ``P_d`` is the mean power of the
dialogue's detection signal and ``P_b`` that of the background's detection signal, both
over the speech-active samples only. The detection signal is the one the speech detector
analyses (``planner.analysis.channels``): the centre channel for 5.1, the mid ``(L+R)/2``
for stereo, the channel itself for mono. The speech-active samples are, for each span
``(start_s, end_s)`` of ``speech_truth``, the samples ``seconds_to_samples(start_s)`` up to
(not including) ``seconds_to_samples(end_s)`` (nearest sample, halves up).
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import soundfile as sf
from scipy.signal import butter, sosfilt

from planner._typing import AudioArray
from planner.demo.backgrounds import BACKGROUND_KINDS, BackgroundKind, make_background
from planner.demo.lines import Line, lines_at_rate, load_lines
from planner.errors import InputError
from planner.io.files import atomic_output
from planner.io.subtitles import write_subtitles
from planner.model import Cue, Layout, SubtitleTrack
from planner.units import nearest_int, seconds_to_samples

__all__ = [
    "BACKGROUND_KINDS",
    "BackgroundKind",
    "Line",
    "SynthProgramme",
    "centre_dialogue",
    "detection_signal",
    "distort_cues",
    "load_lines",
    "make_background",
    "speech_mask",
    "spread_background",
    "synth_programme",
    "truth_cues",
    "write_programme",
]

N_CHANNELS: dict[str, int] = {"mono": 1, "stereo": 2, "5.1": 6}
#: Background in the 5.1 centre relative to each of L R Ls Rs, dB: a little, as in a
#: typical film mix where ambience and music sit mostly off the dialogue channel (common practice).
CENTRE_BACKGROUND_DB = -9.0
#: The 5.1 LFE carries the background's mid low-passed at this frequency (common practice: 120 Hz).
LFE_CUTOFF_HZ = 120.0
#: Cue out-time after the end of speech, seconds: a reading extension (CHECKS.md §6:
#: "up to 12 frames (0.5 s)", common practice).
READING_EXTENSION_S = 0.3
#: Least gap kept between consecutive cues, seconds: 2 frames at 25 fps (common practice).
MIN_CUE_GAP_S = 0.08
#: Text of the cues :func:`distort_cues` adds over no speech, unless told otherwise.
FAKE_CUE_TEXT = "Is anyone still serving?"


@dataclass(frozen=True, eq=False)
class SynthProgramme:
    """A synthesized programme and its truth.

    ``dialogue`` and ``background`` are float32 ``(n_samples, n_channels)`` in the channel
    order of ``layout`` (L R C LFE Ls Rs for 5.1). ``speech_truth`` holds the voiced span
    ``(start_s, end_s)`` of each placed line, in time order; ``cues`` the true cue for each
    (start at speech onset, end at speech end plus :data:`READING_EXTENSION_S`), exact to the
    millisecond; ``line_numbers`` the fixture line each span speaks. ``snr_db`` is the
    ratio defined in the module docstring (``inf`` for ``background="none"``).
    """

    sample_rate_hz: int
    layout: Layout
    dialogue: AudioArray
    background: AudioArray
    speech_truth: tuple[tuple[float, float], ...]
    cues: tuple[Cue, ...]
    snr_db: float
    line_numbers: tuple[int, ...] = ()
    background_kind: str = ""

    @property
    def mix(self) -> AudioArray:
        """Dialogue plus background, float32 ``(n_samples, n_channels)``."""
        return self.dialogue + self.background

    @property
    def n_samples(self) -> int:
        """Length in samples."""
        return int(self.dialogue.shape[0])

    @property
    def duration_s(self) -> float:
        """Length in seconds."""
        return self.n_samples / self.sample_rate_hz


def _check_layout(layout: str) -> None:
    if layout not in N_CHANNELS:
        raise InputError(f"layout={layout!r} must be one of {', '.join(N_CHANNELS)}; pass one of those")


def detection_signal(x: AudioArray, layout: Layout) -> np.ndarray:
    """The signal a speech detector analyses: C for 5.1, (L+R)/2 for stereo, the channel for mono; float64 ``(n,)``."""
    _check_layout(layout)
    if layout == "5.1":
        return x[:, 2].astype(np.float64)
    if layout == "stereo":
        return 0.5 * (x[:, 0].astype(np.float64) + x[:, 1])
    return x[:, 0].astype(np.float64)


def speech_mask(spans: Sequence[tuple[float, float]], n_samples: int, sample_rate_hz: int) -> np.ndarray:
    """Boolean ``(n_samples,)``: True on the speech-active samples of ``spans`` (module docstring rule)."""
    mask = np.zeros(n_samples, dtype=bool)
    for start_s, end_s in spans:
        mask[seconds_to_samples(start_s, sample_rate_hz) : seconds_to_samples(end_s, sample_rate_hz)] = True
    return mask


def centre_dialogue(mono: np.ndarray, layout: Layout) -> AudioArray:
    """Put mono dialogue in the centre: equal in L and R for stereo, in C alone for 5.1; float32 ``(n, ch)``."""
    _check_layout(layout)
    out = np.zeros((mono.shape[0], N_CHANNELS[layout]), dtype=np.float32)
    if layout == "5.1":
        out[:, 2] = mono
    else:
        out[:, :] = mono[:, None]
    return out


def spread_background(kind: BackgroundKind, n_samples: int, sample_rate_hz: int, layout: Layout, *, seed: int) -> AudioArray:
    """Background spread wide: one independently seeded channel each, float32 ``(n, ch)``.

    Stereo: L and R decorrelated (different seeds; for ``music`` the same notes with other
    partial phases). 5.1: L R Ls Rs at the generator's level, C at
    :data:`CENTRE_BACKGROUND_DB`, LFE the mid of L and R low-passed at :data:`LFE_CUTOFF_HZ`.
    """
    _check_layout(layout)
    seeds = np.random.SeedSequence([seed, 0x5EED]).generate_state(6)

    def one(i: int) -> AudioArray:
        return make_background(kind, n_samples, sample_rate_hz, seed=int(seeds[i]))

    if layout == "mono":
        return one(0)[:, None]
    if layout == "stereo":
        return np.stack([one(0), one(1)], axis=1)
    out = np.zeros((n_samples, 6), dtype=np.float32)
    for ch in (0, 1, 4, 5):
        out[:, ch] = one(ch)
    out[:, 2] = one(2) * np.float32(10.0 ** (CENTRE_BACKGROUND_DB / 20.0))
    sos = butter(4, LFE_CUTOFF_HZ, btype="low", fs=sample_rate_hz, output="sos")
    out[:, 3] = sosfilt(sos, 0.5 * (out[:, 0].astype(np.float64) + out[:, 1])).astype(np.float32)
    return out


def truth_cues(
    spans: Sequence[tuple[float, float]], texts: Sequence[str], *, extension_s: float = READING_EXTENSION_S
) -> tuple[Cue, ...]:
    """The cues a careful subtitler writes: in at speech onset, out ``extension_s`` after its end.

    The out-time is pulled back where needed to keep :data:`MIN_CUE_GAP_S` before the next
    onset. Times are rounded to the millisecond (nearest, halves up), as a subtitle file holds them.
    Text is broken into lines of at most :data:`CUE_LINE_CHARS` characters, as subtitlers do.
    """
    cues = []
    for i, ((start_s, end_s), text) in enumerate(zip(spans, texts, strict=True)):
        out_s = end_s + extension_s
        if i + 1 < len(spans):
            out_s = max(min(out_s, spans[i + 1][0] - MIN_CUE_GAP_S), end_s)
        cues.append(Cue(index=i + 1, cue_id=str(i + 1), start_s=_ms(start_s), end_s=_ms(out_s), text=_wrap(text)))
    return tuple(cues)


#: Characters per subtitle line when the builder breaks a cue's text (under the 42 of
#: the default house style; common practice for two-line cues).
CUE_LINE_CHARS = 38


def _wrap(text: str) -> str:
    return "\n".join(textwrap.wrap(text, width=CUE_LINE_CHARS)) if "\n" not in text else text


def _ms(t_s: float) -> float:
    """Round to the millisecond (the project's rounding rule)."""
    return nearest_int(t_s * 1000.0) / 1000.0


def synth_programme(
    *,
    background: BackgroundKind = "pink",
    snr_db: float = 10.0,
    n_lines: int = 8,
    seed: int = 0,
    sample_rate_hz: int = 48000,
    layout: Layout = "stereo",
    gap_s: tuple[float, float] = (0.6, 2.5),
) -> SynthProgramme:
    """A programme of ``n_lines`` fixture lines over one background at an exact SNR.

    Parameters
    ----------
    background : {"pink", "music", "babble", "rain", "none"}
        Background kind (see :func:`make_background`).
    snr_db : float
        Speech-to-background ratio as defined in the module docstring, dB. Ignored for
        ``"none"`` (recorded as ``inf``).
    n_lines : int
        Number of lines; chosen from the script by the seed (without repeats up to the
        script's length).
    seed : int
        Seed for the choice of lines, the gaps and the background.
    sample_rate_hz : int
        Output rate; lines are resampled from 22050 Hz by polyphase filtering.
    layout : {"mono", "stereo", "5.1"}
        Channel layout; dialogue in the centre, background spread wide.
    gap_s : (float, float)
        Range of the uniformly drawn silence before each line and after the last, seconds.

    Returns
    -------
    SynthProgramme
    """
    if background not in BACKGROUND_KINDS:
        raise InputError(f"background={background!r} must be one of {', '.join(BACKGROUND_KINDS)}; pass one of those")
    _check_layout(layout)
    if n_lines < 1:
        raise InputError(f"n_lines={n_lines} must be at least 1; pass a positive number of lines")
    if not 0.0 <= gap_s[0] <= gap_s[1]:
        raise InputError(f"gap_s={gap_s} must be (low, high) with 0 <= low <= high; pass such a range")
    rng = np.random.default_rng([seed, 1])
    script = load_lines()
    audio = lines_at_rate(sample_rate_hz)
    order = rng.choice(len(script), size=n_lines, replace=n_lines > len(script))
    gaps = rng.uniform(gap_s[0], gap_s[1], size=n_lines + 1)
    starts, pos = [], 0
    for i, k in enumerate(order):
        pos += seconds_to_samples(gaps[i], sample_rate_hz)
        starts.append(pos)
        pos += audio[k].size
    n = pos + seconds_to_samples(gaps[-1], sample_rate_hz)
    mono = np.zeros(n, dtype=np.float32)
    spans = []
    for p, k in zip(starts, order):
        mono[p : p + audio[k].size] = audio[k]
        v0, v1 = script[k].voiced_span_s
        spans.append((p / sample_rate_hz + v0, p / sample_rate_hz + v1))
    dialogue = centre_dialogue(mono, layout)
    bg = spread_background(background, n, sample_rate_hz, layout, seed=seed)
    if background == "none":
        snr = math.inf
    else:
        bg = bg * np.float32(_snr_gain(dialogue, bg, layout, speech_mask(spans, n, sample_rate_hz), snr_db))
        snr = float(snr_db)
    return SynthProgramme(
        sample_rate_hz=sample_rate_hz,
        layout=layout,
        dialogue=dialogue,
        background=bg.astype(np.float32),
        speech_truth=tuple(spans),
        cues=truth_cues(spans, [script[k].text for k in order]),
        snr_db=snr,
        line_numbers=tuple(script[k].number for k in order),
        background_kind=background,
    )


def _snr_gain(dialogue: AudioArray, background: AudioArray, layout: Layout, mask: np.ndarray, snr_db: float) -> float:
    """Linear gain that brings ``background`` to ``snr_db`` below ``dialogue`` (module docstring definition)."""
    d = detection_signal(dialogue[mask], layout)
    b = detection_signal(background[mask], layout)
    return math.sqrt(np.mean(d * d) / (np.mean(b * b) * 10.0 ** (snr_db / 10.0)))


def distort_cues(
    cues: Sequence[Cue],
    *,
    offset_s: float = 0.0,
    rate_ratio: float = 1.0,
    edit_at_s: float | None = None,
    edit_len_s: float = 0.0,
    drop: Sequence[int] = (),
    add_fake: Sequence[tuple[float, float]] = (),
    fake_text: str = FAKE_CUE_TEXT,
) -> tuple[Cue, ...]:
    """The subtitle file as it would arrive out of step with the audio.

    Each true cue time ``t`` (audio seconds) becomes the subtitle time
    ``(t' - offset_s) / rate_ratio``, i.e. the audio follows the subtitles by
    ``t_audio = rate_ratio * t_subs + offset_s`` (the mapping :mod:`planner.analysis.align`
    estimates). ``t' = t``, except that the audio may contain a segment of ``edit_len_s``
    seconds inserted at audio time ``edit_at_s`` which the subtitles never saw (negative: a cut):
    cues starting at or after ``edit_at_s`` then have ``t' = t - edit_len_s``.

    Parameters
    ----------
    cues : sequence of Cue
        The true cues in audio time (e.g. ``SynthProgramme.cues``).
    offset_s, rate_ratio : float
        Constant offset (s) and rate ratio of the mapping above.
    edit_at_s, edit_len_s : float
        Audio time (s) and length (s) of an inserted segment; ``None`` for no edit.
    drop : sequence of int
        ``Cue.index`` values of cues to leave out (missing cues).
    add_fake : sequence of (start_s, end_s)
        Audio times of extra cues over no speech, text ``fake_text``; mapped like the others.

    Returns
    -------
    tuple of Cue
        Sorted by start, renumbered 1..n (``cue_id`` the number), times to the millisecond.

    Raises
    ------
    InputError
        If ``rate_ratio`` is not positive or a mapped time would be negative.
    """
    if not rate_ratio > 0.0:
        raise InputError(f"rate_ratio={rate_ratio} must be positive; pass a ratio such as 24/25")
    dropped = set(drop)
    real = [(c.start_s, c.end_s, c.text) for c in cues if c.index not in dropped]
    fake = [(float(a), float(b), fake_text) for a, b in add_fake]
    out = []
    for start_s, end_s, text in sorted(real + fake):
        shift = edit_len_s if edit_at_s is not None and start_s >= edit_at_s else 0.0
        sub_start = (start_s - shift - offset_s) / rate_ratio
        if sub_start < 0.0:
            raise InputError(
                f"the cue at {start_s:.3f} s would start at {sub_start:.3f} s in the subtitle file; "
                "pass a smaller offset_s or place the speech later"
            )
        out.append((_ms(sub_start), _ms((end_s - shift - offset_s) / rate_ratio), text))
    return tuple(Cue(index=i, cue_id=str(i), start_s=a, end_s=b, text=t) for i, (a, b, t) in enumerate(out, start=1))


def write_programme(
    prog: SynthProgramme,
    folder: Path,
    *,
    stems: bool = True,
    subtitles: Sequence[Cue] | None = None,
    fmt: Literal["srt", "vtt"] = "srt",
) -> dict[str, Path]:
    """Write the programme as 24-bit WAV files (and its subtitles) into ``folder``.

    Writes ``mix.wav``, and with ``stems`` also ``dialogue.wav`` and ``background.wav``;
    ``subtitles.srt`` (or ``.vtt``) holds ``subtitles`` (default: the true cues; an empty
    sequence writes no subtitle file) in UTF-8 through :func:`planner.io.subtitles.write_subtitles`.
    Every file is written atomically.

    Returns
    -------
    dict
        Role (``"mix"``, ``"dialogue"``, ``"background"``, ``"subtitles"``) to path.

    Raises
    ------
    InputError
        If a signal would clip in 24-bit PCM (raise ``snr_db`` or lower the background).
    """
    folder = Path(folder)
    signals = {"mix": prog.mix}
    if stems:
        signals |= {"dialogue": prog.dialogue, "background": prog.background}
    paths: dict[str, Path] = {}
    for role, x in signals.items():
        peak = float(np.max(np.abs(x))) if x.size else 0.0
        if peak >= 1.0:
            raise InputError(
                f"the {role} peaks at {20 * math.log10(peak):+.2f} dBFS and would clip in 24-bit PCM; "
                "pass a higher snr_db or a quieter background"
            )
        paths[role] = folder / f"{role}.wav"
        with atomic_output(paths[role]) as tmp:
            sf.write(tmp, x, prog.sample_rate_hz, format="WAV", subtype="PCM_24")
    cues = prog.cues if subtitles is None else tuple(subtitles)
    if cues:
        paths["subtitles"] = folder / f"subtitles.{fmt}"
        write_subtitles(paths["subtitles"], SubtitleTrack(format=fmt, encoding="utf-8", bom=False, cues=cues))
    return paths
