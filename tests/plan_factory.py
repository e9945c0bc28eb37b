"""Hand-built Analysis records for the planning and export tests.

The ground truth is constructed here: each cue gets a speech spectrum (ANSI S3.5 Table 3
normal-effort speech, shifted by a chosen level) and a background spectrum at a chosen
per-band SNR below it, so the speech-to-background loudness difference equals that SNR
(the two spectra have the same shape, hence the same K-weighted loudness difference),
and its SII comes from the reference package ``speech-intelligibility-index`` (never from
the code under test). Speech is detected from ``pad_s`` after the cue's start to ``pad_s``
before its end.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from speech_intelligibility_index import sii as ref

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
    MappingSegment,
    SpeechActivity,
    SubtitleTrack,
    UncoveredSpeech,
)
from planner.settings import AnalysisSettings

#: ANSI S3.5 Table 3, normal vocal effort, dB SPL/Hz (via the reference package).
NORMAL_SPEECH_DB = np.asarray(ref.speech_spectrum("normal"), dtype=np.float64)
#: Band importance for average speech, passed explicitly (the package's name look-up is off by one).
AVERAGE_IMPORTANCE = np.asarray(ref.band_importance(1), dtype=np.float64)
FRAME_S = 0.01
SAMPLE_RATE_HZ = 48000


def reference_sii(speech_db: Sequence[float], noise_db: Sequence[float], threshold_db_hl: Sequence[float] | None = None) -> float:
    """SII from the reference package (ANSI S3.5 clause 4), average-speech importance."""
    t = np.zeros(18) if threshold_db_hl is None else np.asarray(threshold_db_hl, dtype=np.float64)
    return float(ref.sii(np.asarray(speech_db, float), np.asarray(noise_db, float), t, band_importance_function=AVERAGE_IMPORTANCE))


@dataclass(frozen=True)
class CueSpec:
    """One cue to build: span, flat per-band SNR of speech over background, speech level shift."""

    start_s: float
    end_s: float
    snr_db: float | None = 20.0
    speech_shift_db: float = 0.0
    background_shape_db: Sequence[float] = field(default_factory=lambda: (0.0,) * 18)
    text: str = "A line of dialogue."
    pad_s: float = 0.2
    method: str = "stems"
    verdict: str | None = None  # default: from the reference SII (see verdict_for)


def verdict_for(sii_value: float) -> str:
    """The test's own verdict rule: masked below 0.45, at-risk below 0.75 (CHECKS 2.4 rule of thumb)."""
    return "masked" if sii_value < 0.45 else "at-risk" if sii_value < 0.75 else "clear"


def make_score(index: int, spec: CueSpec) -> CueScore:
    """A CueScore with the spec's spectra and its reference SII."""
    speech_s = max(0.0, spec.end_s - spec.start_s - 2 * spec.pad_s)
    if spec.snr_db is None:
        return CueScore(index=index, method="none", speech_s=speech_s, speech_db=None, background_db=None,
                        sbld_lu=None, sii=None, sii_short=None, stoi=None, confidence=0.0, verdict="no-score",
                        reason="no speech")  # fmt: skip
    e = NORMAL_SPEECH_DB + spec.speech_shift_db
    n = e - spec.snr_db + np.asarray(spec.background_shape_db, dtype=np.float64)
    value = reference_sii(e, n)
    speech_lufs = -23.0 + spec.speech_shift_db
    return CueScore(
        index=index,
        method=spec.method,  # type: ignore[arg-type]
        speech_s=round(speech_s, 6),
        speech_db=speech_lufs,
        background_db=speech_lufs - spec.snr_db,
        sbld_lu=spec.snr_db,
        sii=value,
        sii_short=value,
        stoi=None,
        confidence=1.0 if spec.method == "stems" else 0.6,
        verdict=spec.verdict or verdict_for(value),  # type: ignore[arg-type]
        speech_spectrum_db=tuple(float(v) for v in e),
        background_spectrum_db=tuple(float(v) for v in n),
        sii_by_profile={"normal": value},
    )


def make_analysis(
    specs: Sequence[CueSpec],
    *,
    duration_s: float | None = None,
    true_peak_dbtp: float = -10.0,
    fps: str = "25",
    drop_frame: bool = False,
    programme_start: str = "00:00:00:00",
    hearing: str = "normal",
    audiogram: Sequence[tuple[float, float]] = (),
    uncovered: Sequence[tuple[float, float]] = (),
    inputs: Sequence[InputFile] | None = None,
) -> Analysis:
    """An Analysis whose cues, timings, speech activity and scores follow ``specs``."""
    end = max([s.end_s for s in specs] + [b for _, b in uncovered] + [1.0])
    duration_s = duration_s if duration_s is not None else end + 5.0
    n_frames = int(round(duration_s / FRAME_S))
    speech = np.zeros(n_frames, dtype=bool)
    cues, timings, scores = [], [], []
    for i, spec in enumerate(specs, start=1):
        a = int(round((spec.start_s + spec.pad_s) / FRAME_S))
        b = int(round((spec.end_s - spec.pad_s) / FRAME_S))
        if spec.snr_db is not None:
            speech[a:b] = True
        cues.append(Cue(index=i, cue_id=str(i), start_s=spec.start_s, end_s=spec.end_s, text=spec.text))
        speech_s = max(0.0, (b - a) * FRAME_S) if spec.snr_db is not None else 0.0
        timings.append(CueTiming(
            index=i, aligned_start_s=spec.start_s, aligned_end_s=spec.end_s,
            onset_error_ms=-1000.0 * spec.pad_s, offset_error_ms=1000.0 * spec.pad_s,
            speech_s=round(speech_s, 6), cps=round(len(spec.text) / (spec.end_s - spec.start_s), 3),
        ))  # fmt: skip
        scores.append(make_score(i, spec))
    for a_s, b_s in uncovered:
        speech[int(round(a_s / FRAME_S)) : int(round(b_s / FRAME_S))] = True
    activity = SpeechActivity(
        frame_s=FRAME_S, probability=speech.astype(np.float32), is_speech=speech, backend="fast", source="dialogue stem"
    )
    settings = AnalysisSettings(
        fps=fps,
        drop_frame=drop_frame,
        programme_start=programme_start,
        hearing=hearing,
        audiogram_hz=tuple(float(f) for f, _ in audiogram),
        audiogram_db_hl=tuple(float(t) for _, t in audiogram),
    )
    if inputs is None:
        inputs = (
            InputFile(role="dialogue", path="dialogue.wav", sha256=hashlib.sha256(b"dialogue").hexdigest()),
            InputFile(role="background", path="background.wav", sha256=hashlib.sha256(b"background").hexdigest()),
            InputFile(role="subtitles", path="subs.srt", sha256=hashlib.sha256(b"subs").hexdigest()),
        )
    return Analysis(
        schema=SCHEMA_VERSION,
        settings=settings.to_dict(),
        inputs=tuple(inputs),
        audio=AudioInfo(sample_rate_hz=SAMPLE_RATE_HZ, n_channels=2, n_frames=int(round(duration_s * SAMPLE_RATE_HZ)),
                        layout="stereo", format="WAV", subtype="PCM_24", bit_depth=24),  # fmt: skip
        subtitles=SubtitleTrack(format="srt", encoding="utf-8", bom=False, cues=tuple(cues)),
        loudness=LoudnessSummary(integrated_lufs=-23.0, loudness_range_lu=8.0, true_peak_dbtp=true_peak_dbtp,
                                 sample_peak_dbfs=true_peak_dbtp - 0.3, max_momentary_lufs=-15.0,
                                 max_short_term_lufs=-18.0),  # fmt: skip
        activity=activity,
        alignment=Alignment(segments=(MappingSegment(0.0, duration_s, 1.0, 0.0),), confidence=1.0, rate_name="1"),
        timings=tuple(timings),
        uncovered=tuple(UncoveredSpeech(start_s=a, end_s=b, confidence=0.9) for a, b in uncovered),
        scores=tuple(scores),
    )


def brute_force_cut_db(spec: CueSpec, target: float, *, max_db: float = 40.0, threshold_db_hl: Sequence[float] | None = None) -> float | None:
    """Smallest background cut in 0.1 dB steps reaching ``target`` by the reference SII (None if none)."""
    e = NORMAL_SPEECH_DB + spec.speech_shift_db
    n = e - (spec.snr_db or 0.0) + np.asarray(spec.background_shape_db, dtype=np.float64)
    for tenths in range(int(round(max_db * 10)) + 1):
        if reference_sii(e, n - tenths / 10.0, threshold_db_hl) >= target:
            return tenths / 10.0
    return None
