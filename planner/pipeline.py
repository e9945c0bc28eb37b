"""The audio passes: read the inputs, run the pure stages in order, return records.

Two passes over the audio, both block-wise (memory does not grow with programme length):

1. loudness meter + speech detector on the detection signal (centre, mid, or dialogue stem);
2. after alignment, per-cue scoring on the aligned spans.

Functions here read files; they never write or print. Writing the analysis folder is
:mod:`planner.folder` and :mod:`planner.runs`.
"""

from __future__ import annotations

import contextlib
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from planner._typing import FloatArray
from planner.analysis.align import align, time_cues
from planner.analysis.channels import detection_signal
from planner.analysis.checks import MIN_REPORT_CONFIDENCE, HouseStyle, load_style
from planner.analysis.framepower import SignalKPower
from planner.analysis.loudness import LoudnessMeter
from planner.analysis.masking import score_cues
from planner.analysis.vad import make_detector
from planner.folder import Inputs, relative_path
from planner.io.audio import Programme, iter_programme, open_programme
from planner.io.files import sha256_file
from planner.io.parallel import band_worker, peaks_beside_speech, speech_source, speech_worker, use_workers
from planner.io.subtitles import read_subtitles
from planner.model import (
    SCHEMA_VERSION,
    Alignment,
    Analysis,
    AudioInfo,
    Cue,
    CueScore,
    CueTiming,
    InputFile,
    LoudnessSummary,
    SpeechActivity,
    SubtitleTrack,
    UncoveredSpeech,
)
from planner.progress import Progress, no_progress
from planner.settings import AnalysisSettings

@dataclass(frozen=True)
class Inspection:
    """What ``cueplan inspect`` reports about an audio file and, optionally, its subtitles."""

    path: str
    audio: AudioInfo
    loudness: LoudnessSummary
    subtitles: SubtitleTrack | None
    subtitles_path: str | None

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary."""
        out: dict[str, Any] = {
            "path": self.path,
            "audio": {**self.audio.to_dict(), "duration_s": self.audio.duration_s},
            "loudness": self.loudness.to_dict(),
        }
        if self.subtitles is not None:
            cues = self.subtitles.cues
            out["subtitles"] = {
                "path": self.subtitles_path,
                "format": self.subtitles.format,
                "encoding": self.subtitles.encoding,
                "bom": self.subtitles.bom,
                "cue_count": len(cues),
                "first_start_s": cues[0].start_s if cues else None,
                "last_end_s": max(c.end_s for c in cues) if cues else None,
                "notes": list(self.subtitles.notes),
            }
        return out


def inspect(audio: Path, subtitles: Path | None = None, *, progress: Progress | None = None) -> Inspection:
    """Probe an audio file (layout, duration, loudness, true peak) and optionally read its subtitles."""
    progress = progress or no_progress
    track = read_subtitles(subtitles) if subtitles is not None else None
    programme = open_programme(mix=audio)
    meter = LoudnessMeter(programme.info.sample_rate_hz, programme.info.layout)
    total = programme.info.duration_s
    for block in iter_programme(programme):
        meter.feed(block.mix)
        progress("loudness", (block.start_frame + block.mix.shape[0]) / programme.info.sample_rate_hz, total)
    return Inspection(
        path=str(audio),
        audio=programme.info,
        loudness=meter.summary(),
        subtitles=track,
        subtitles_path=None if subtitles is None else str(subtitles),
    )


def describe_inputs(inputs: Inputs, out_dir: Path) -> tuple[InputFile, ...]:
    """InputFile records (path relative to the analysis folder, SHA-256) in role order."""
    roles = (("mix", inputs.mix), ("dialogue", inputs.dialogue), ("background", inputs.background), ("subtitles", inputs.subtitles))
    return tuple(
        InputFile(role=role, path=relative_path(p, out_dir), sha256=sha256_file(p))  # type: ignore[arg-type]
        for role, p in roles
        if p is not None
    )


def open_inputs(inputs: Inputs) -> tuple[Programme, SubtitleTrack]:
    """Validate and open every input before anything is computed or written."""
    track = read_subtitles(inputs.subtitles)
    programme = open_programme(mix=inputs.mix, dialogue=inputs.dialogue, background=inputs.background)
    return programme, track


def measure(
    programme: Programme,
    settings: AnalysisSettings,
    *,
    progress: Progress | None = None,
    k_frames: SignalKPower | None = None,
) -> tuple[SpeechActivity, LoudnessSummary]:
    """Pass 1: programme loudness and the speech track.

    With two or more cores and a programme of at least a minute, the speech detector reads
    the audio in a second process (metering a mix's true peak there too with the fast
    detector) while this one meters the loudness (:mod:`planner.io.parallel`); otherwise
    one read feeds both. The results are the same. ``k_frames`` (a mix only) is fed the
    meter's K-weighted channels; its result is the scoring pass's ``k_power``.
    """
    progress = progress or no_progress
    info = programme.info
    workers = use_workers(programme.info)
    # the worker may meter the true peak to even out the load
    meter = LoudnessMeter(
        info.sample_rate_hz, info.layout, true_peak=not (workers and peaks_beside_speech(programme, settings)),
        on_weighted=None if k_frames is None else k_frames.feed,
    )  # fmt: skip
    with contextlib.ExitStack() as stack:
        detector = None
        if workers:
            result = stack.enter_context(speech_worker(programme, settings))
        else:
            detector = make_detector(
                settings.vad, info.sample_rate_hz, aggressiveness=settings.vad_aggressiveness,
                source=speech_source(programme),
            )  # fmt: skip
        for block in iter_programme(programme):
            meter.feed(block.mix)
            if detector is not None:
                speech = block.dialogue if block.dialogue is not None else block.mix
                detector.feed(detection_signal(speech, info.layout))
            progress("speech detection", (block.start_frame + block.n_frames) / info.sample_rate_hz, info.duration_s)
        activity, peaks = result() if detector is None else (detector.finish(), None)
    return activity, meter.summary(speech_mask=activity.is_speech, frame_s=activity.frame_s, peaks=peaks)


def align_cues(
    cues: Sequence[Cue],
    activity: SpeechActivity,
    info: AudioInfo,
    settings: AnalysisSettings,
    style: HouseStyle,
) -> tuple[Alignment, tuple[CueTiming, ...], tuple[UncoveredSpeech, ...], tuple[UncoveredSpeech, ...]]:
    """Map subtitle time onto audio time, snap each cue, and flag every cue problem.

    Returns the alignment, the cue timings, the uncovered speech to report and the uncovered
    speech judged likely background (confidence under ``MIN_REPORT_CONFIDENCE``), which
    only a warning mentions.
    """
    alignment = align(cues, activity, max_offset_s=settings.max_offset_s, duration_s=info.duration_s)
    timings, every_run = time_cues(
        cues, alignment, activity, style, snap_tolerance_s=settings.snap_tolerance_s, fps=settings.fps,
        min_confidence=0.0,
    )  # fmt: skip
    reported = tuple(u for u in every_run if u.confidence >= MIN_REPORT_CONFIDENCE)
    background_like = tuple(u for u in every_run if u.confidence < MIN_REPORT_CONFIDENCE)
    return alignment, timings, reported, background_like


def programme_warnings(
    loudness: LoudnessSummary,
    activity: SpeechActivity,
    alignment: Alignment,
    background_like: Sequence[UncoveredSpeech] = (),
) -> tuple[str, ...]:
    """Plain-words warnings about the programme as a whole (silence, clipping, no speech, weak
    alignment, speech without cues judged likely background)."""
    out: list[str] = []
    if loudness.integrated_lufs is None:
        out.append("the programme is silent (everything below the -70 LUFS gate); scores are not meaningful")
    if loudness.sample_peak_dbfs >= -0.01:
        out.append(f"the programme reaches full scale ({loudness.sample_peak_dbfs:.2f} dBFS sample peak): it may be clipped")
    if not activity.is_speech.any():
        out.append("no speech was detected anywhere in the programme")
    out.extend(activity.notes)
    out.extend(alignment.notes)
    if background_like:
        total_s = sum(u.end_s - u.start_s for u in background_like)
        starts = ", ".join(f"{u.start_s:.1f} s" for u in background_like[:3]) + (", ..." if len(background_like) > 3 else "")
        out.append(
            f"{len(background_like)} stretch(es) of speech with no cue ({total_s:.0f} s in all, from {starts}) "
            "sounded like background (well under the dialogue's level, or crowd-like) and are not listed as "
            "missing cues; listen to them if a line may be missing"
        )
    return tuple(dict.fromkeys(out))


def score_pass(
    programme: Programme,
    timings: Sequence[CueTiming],
    activity: SpeechActivity,
    settings: AnalysisSettings,
    *,
    progress: Progress | None = None,
    k_power: FloatArray | None = None,
) -> tuple[CueScore, ...]:
    """Pass 2: per-cue masking scores over the aligned spans (``k_power``: a mix's frame
    K-weighted powers from pass 1, :class:`~planner.analysis.framepower.SignalKPower`)."""
    with contextlib.ExitStack() as stack:
        # on two cores: frame features in a second process, the rest here (same scores)
        bands = stack.enter_context(band_worker(programme, activity.frame_s, k_power)) if use_workers(programme.info) else None
        return score_cues(
            iter_programme(programme),
            info=programme.info,
            kind=programme.kind,
            timings=timings,
            activity=activity,
            settings=settings,
            progress=progress,
            bands=bands,
            k_power=k_power,
        )


def analyse(
    inputs: Inputs,
    out_dir: Path,
    settings: AnalysisSettings,
    *,
    style_path: Path | None = None,
    progress: Progress | None = None,
    score: bool = True,
) -> Analysis:
    """Run speech detection, alignment and (unless ``score`` is False) per-cue scoring."""
    progress = progress or no_progress
    programme, track = open_inputs(inputs)
    style = load_style(style_path)  # a bad profile fails before the long work
    # the inputs' SHA-256 in a thread beside the passes (hashlib and file reads release the
    # interpreter lock), so that it fills the moments a core waits
    with ThreadPoolExecutor(1, thread_name_prefix="cueplan-hash") as pool:
        described = pool.submit(describe_inputs, inputs, out_dir)
        # a mix's signals are K-weighted once, by the loudness meter (linear filters)
        levels = SignalKPower(programme.info) if score and programme.kind == "mix" else None
        activity, loudness = measure(programme, settings, progress=progress, k_frames=levels)
        alignment, timings, uncovered, background_like = align_cues(track.cues, activity, programme.info, settings, style)
        k_power = None if levels is None else levels.result()
        scores = score_pass(programme, timings, activity, settings, progress=progress, k_power=k_power) if score else ()
        files = described.result()
    return Analysis(
        schema=SCHEMA_VERSION,
        settings=settings.to_dict(),
        inputs=files,
        audio=programme.info,
        subtitles=track,
        loudness=loudness,
        activity=activity,
        alignment=alignment,
        timings=timings,
        uncovered=uncovered,
        scores=scores,
        warnings=programme_warnings(loudness, activity, alignment, background_like),
    )
