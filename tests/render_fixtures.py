"""Synthesized programmes on disk and hand-built plans for the render and verify tests.

Ground truth comes from :mod:`planner.demo.synth`: the dialogue and background stems are
known exactly, so is where the speech is. Plans are built by hand here (one
:class:`~planner.model.GainEvent` per chosen line, full gain over the line's true speech),
so the tests do not depend on the planner.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from planner.demo.synth import SynthProgramme, write_programme
from planner.model import (
    SCHEMA_VERSION,
    Alignment,
    Analysis,
    AudioInfo,
    CueScore,
    CueTiming,
    GainEvent,
    LoudnessSummary,
    MappingSegment,
    Plan,
    SpeechActivity,
    SubtitleTrack,
)
from planner.settings import AnalysisSettings

FRAME_S = 0.01


def truth_activity(prog: SynthProgramme) -> SpeechActivity:
    """Speech activity (10 ms frames) marking exactly the programme's true speech spans."""
    n = int(np.ceil(prog.duration_s / FRAME_S))
    mask = np.zeros(n, dtype=bool)
    for a, b in prog.speech_truth:
        mask[int(round(a / FRAME_S)) : int(round(b / FRAME_S))] = True
    return SpeechActivity(
        frame_s=FRAME_S, probability=mask.astype(np.float32), is_speech=mask, backend="fast", source="truth"
    )


def event(index: int, start_s: float, end_s: float, *, cut_db: float = 0.0, lift_db: float = 0.0,
          ramp_in_ms: float = 400.0, ramp_out_ms: float = 600.0, score_before: float = 0.5,
          score_after: float = 0.75, target: float = 0.75) -> GainEvent:  # fmt: skip
    """One hand-made gain event over cue ``index``."""
    return GainEvent(
        event_id=f"E{index:03d}",
        start_s=start_s,
        end_s=end_s,
        ramp_in_ms=ramp_in_ms,
        ramp_out_ms=ramp_out_ms,
        background_gain_db=cut_db,
        dialogue_gain_db=lift_db,
        cue_indices=(index,),
        reason="hand-made test event",
        target_kind="sii",
        target=target,
        score_before=score_before,
        score_after=score_after,
        reachable=True,
    )


def placeholder_score(index: int) -> CueScore:
    """A score record for plans whose render does not look at scores."""
    return CueScore(index=index, method="stems", speech_s=1.0, speech_db=None, background_db=None, sbld_lu=None,
                    sii=None, sii_short=None, stoi=None, confidence=0.0, verdict="no-score", reason="not scored")  # fmt: skip


def make_plan(
    prog: SynthProgramme,
    events: Sequence[GainEvent],
    *,
    scores: Sequence[CueScore] | None = None,
    subtype: str = "PCM_24",
) -> Plan:
    """A plan for ``prog`` whose timings are the true cues and whose activity is the true speech."""
    timings = tuple(
        CueTiming(index=c.index, aligned_start_s=c.start_s, aligned_end_s=c.end_s, onset_error_ms=0.0,
                  offset_error_ms=0.0, speech_s=round(s[1] - s[0], 6), cps=10.0)
        for c, s in zip(prog.cues, prog.speech_truth)
    )  # fmt: skip
    channels = prog.dialogue.shape[1]
    analysis = Analysis(
        schema=SCHEMA_VERSION,
        settings=AnalysisSettings(vad="fast").to_dict(),
        inputs=(),
        audio=AudioInfo(sample_rate_hz=prog.sample_rate_hz, n_channels=channels, n_frames=prog.n_samples,
                        layout=prog.layout, format="WAV", subtype=subtype, bit_depth=24),  # fmt: skip
        subtitles=SubtitleTrack(format="srt", encoding="utf-8", bom=False, cues=prog.cues),
        loudness=LoudnessSummary(integrated_lufs=None, loudness_range_lu=None, true_peak_dbtp=-10.0,
                                 sample_peak_dbfs=-10.0, max_momentary_lufs=None, max_short_term_lufs=None),  # fmt: skip
        activity=truth_activity(prog),
        alignment=Alignment(segments=(MappingSegment(0.0, prog.duration_s, 1.0, 0.0),), confidence=1.0, rate_name="1"),
        timings=timings,
        uncovered=(),
        scores=tuple(scores) if scores is not None else tuple(placeholder_score(c.index) for c in prog.cues),
    )
    return Plan(schema=SCHEMA_VERSION, settings={}, analysis=analysis, events=tuple(events), scenes=())


@dataclass(frozen=True)
class OnDisk:
    """A synthesized programme written as 24-bit WAV files."""

    prog: SynthProgramme
    mix: Path
    dialogue: Path
    background: Path


def write(prog: SynthProgramme, folder: Path) -> OnDisk:
    """Write mix, dialogue and background of ``prog`` into ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = write_programme(prog, folder, stems=True, subtitles=())
    return OnDisk(prog, paths["mix"], paths["dialogue"], paths["background"])


def si_sdr_db(reference: np.ndarray, estimate: np.ndarray) -> float:
    """Scale-invariant SDR (Le Roux et al., ICASSP 2019, eq. 1-2), dB, over all samples and channels."""
    s = reference.astype(np.float64).ravel()
    e = estimate.astype(np.float64).ravel()
    alpha = (e @ s) / (s @ s)
    target = alpha * s
    return float(10.0 * np.log10((target @ target) / np.sum((e - target) ** 2)))


def reduce_in_blocks(reducer, mix: np.ndarray, parts: np.ndarray, block: int) -> tuple[np.ndarray, np.ndarray]:
    """A MixReducer run over ``mix`` (and its known ``parts``) in blocks of ``block`` frames, flushed."""
    outs, comps = [], []
    for a in range(0, mix.shape[0], block):
        o, c = reducer.process(mix[a : a + block], parts[:, a : a + block])
        outs.append(o)
        comps.append(c)
    o, c = reducer.flush(2)
    return np.concatenate([*outs, o]), np.concatenate([*comps, c], axis=1)


def untouched(fs: int, events: Sequence[GainEvent], n: int) -> np.ndarray:
    """Samples outside every event's ramps, from the GainEvent contract (planner/model.py), with 1 sample slack."""
    t = np.arange(n) / fs
    keep = np.ones(n, dtype=bool)
    for ev in events:
        keep &= ~((t >= ev.start_s - ev.ramp_in_ms / 1000.0 - 1.0 / fs) & (t <= ev.end_s + ev.ramp_out_ms / 1000.0 + 1.0 / fs))
    return keep


def cut_and_si_sdr(prog: SynthProgramme, parts: np.ndarray, events: Sequence[GainEvent]) -> tuple[float, list[float]]:
    """Attenuation of the true background over the events (dB, from the reduced ``parts``) and
    each event's dialogue SI-SDR (dB) against the true dialogue."""
    fs = prog.sample_rate_hz
    bg_in = bg_out = 0.0
    sdr = []
    for ev in events:
        a, b = int(ev.start_s * fs), int(ev.end_s * fs)
        bg_in += float(np.sum(prog.background[a:b].astype(np.float64) ** 2))
        bg_out += float(np.sum(parts[1, a:b].astype(np.float64) ** 2))
        sdr.append(si_sdr_db(prog.dialogue[a:b], parts[0, a:b]))
    return 10.0 * np.log10(bg_out / bg_in), sdr
