"""The pipeline's edge: reads the inputs, runs the pure stages in order, returns records.

Two passes over the audio, both block-wise (memory does not grow with programme length):

1. loudness meter + speech detector on the detection signal (centre, mid, or dialogue stem);
2. after alignment, per-cue scoring on the aligned spans.

Functions here read files; they never print. Writing the analysis folder is
:func:`write_outputs`.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import os
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from planner.analysis.align import align, time_cues
from planner.analysis.channels import detection_signal
from planner.analysis.checks import HouseStyle, load_style
from planner.analysis.loudness import LoudnessMeter
from planner.analysis.masking import score_cues
from planner.analysis.vad import make_detector
from planner.io.audio import Programme, iter_programme, open_programme
from planner.io.parallel import feature_worker, speech_source, speech_worker, use_workers
from planner.errors import PlanFileError
from planner.io.exports import load_plan, plan_json, write_cues_csv, write_exports
from planner.io.files import atomic_write_text, refuse_inputs, sha256_file
from planner.io.subtitles import read_subtitles, write_subtitles
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
    Plan,
    SpeechActivity,
    SubtitleTrack,
    UncoveredSpeech,
)
from planner.progress import Progress, no_progress
from planner.planning.hearing import for_hearing
from planner.planning.scenes import make_plan
from planner.render.renderer import RenderReport, plan_sha256, render
from planner.render.verify import VerifyReport, VerifyRow, verify, write_verify_csv
from planner.report.clips import extract_clips
from planner.report.html import render_html, write_html
from planner.settings import AnalysisSettings, PlanSettings, RenderSettings


@dataclass(frozen=True)
class Inputs:
    """The files of one programme: a mix, or dialogue + background stems, and subtitles."""

    subtitles: Path
    mix: Path | None = None
    dialogue: Path | None = None
    background: Path | None = None

    def audio_paths(self) -> tuple[Path, ...]:
        """Every audio input, in role order."""
        return tuple(p for p in (self.mix, self.dialogue, self.background) if p is not None)

    def all_paths(self) -> tuple[Path, ...]:
        """Every input file (audio then subtitles)."""
        return (*self.audio_paths(), self.subtitles)


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


def _relative(path: Path, out_dir: Path) -> str:
    return Path(os.path.relpath(Path(path).resolve(), Path(out_dir).resolve())).as_posix()


def describe_inputs(inputs: Inputs, out_dir: Path) -> tuple[InputFile, ...]:
    """InputFile records (path relative to the analysis folder, SHA-256) in role order."""
    roles = (("mix", inputs.mix), ("dialogue", inputs.dialogue), ("background", inputs.background), ("subtitles", inputs.subtitles))
    return tuple(
        InputFile(role=role, path=_relative(p, out_dir), sha256=sha256_file(p))  # type: ignore[arg-type]
        for role, p in roles
        if p is not None
    )


def open_inputs(inputs: Inputs) -> tuple[Programme, SubtitleTrack]:
    """Validate and open every input before anything is computed or written."""
    track = read_subtitles(inputs.subtitles)
    programme = open_programme(mix=inputs.mix, dialogue=inputs.dialogue, background=inputs.background)
    return programme, track


def measure(programme: Programme, settings: AnalysisSettings, *, progress: Progress | None = None) -> tuple[SpeechActivity, LoudnessSummary]:
    """Pass 1: programme loudness and the speech track.

    With two or more cores and a programme of at least a minute, the speech detector reads
    the audio in a second process while this one meters the loudness
    (:mod:`planner.io.parallel`); otherwise one read feeds both. The results are the same.
    """
    progress = progress or no_progress
    info = programme.info
    meter = LoudnessMeter(info.sample_rate_hz, info.layout)
    with contextlib.ExitStack() as stack:
        detector = None
        if use_workers(programme):
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
        activity = result() if detector is None else detector.finish()
    return activity, meter.summary(speech_mask=activity.is_speech, frame_s=activity.frame_s)


def align_cues(
    cues: Sequence[Cue],
    activity: SpeechActivity,
    info: AudioInfo,
    settings: AnalysisSettings,
    style: HouseStyle,
) -> tuple[Alignment, tuple[CueTiming, ...], tuple[UncoveredSpeech, ...]]:
    """Map subtitle time onto audio time, snap each cue, and flag every cue problem."""
    alignment = align(cues, activity, max_offset_s=settings.max_offset_s, duration_s=info.duration_s)
    timings, uncovered = time_cues(
        cues, alignment, activity, style, snap_tolerance_s=settings.snap_tolerance_s, fps=settings.fps
    )
    return alignment, timings, uncovered


def programme_warnings(loudness: LoudnessSummary, activity: SpeechActivity, alignment: Alignment) -> tuple[str, ...]:
    """Plain-words warnings about the programme as a whole (silence, clipping, no speech, weak alignment)."""
    out: list[str] = []
    if loudness.integrated_lufs is None:
        out.append("the programme is silent (everything below the -70 LUFS gate); scores are not meaningful")
    if loudness.sample_peak_dbfs >= -0.01:
        out.append(f"the programme reaches full scale ({loudness.sample_peak_dbfs:.2f} dBFS sample peak): it may be clipped")
    if not activity.is_speech.any():
        out.append("no speech was detected anywhere in the programme")
    out.extend(activity.notes)
    out.extend(alignment.notes)
    return tuple(dict.fromkeys(out))


def score_pass(
    programme: Programme,
    timings: Sequence[CueTiming],
    activity: SpeechActivity,
    settings: AnalysisSettings,
    *,
    progress: Progress | None = None,
) -> tuple[CueScore, ...]:
    """Pass 2: per-cue masking scores over the aligned spans."""
    with contextlib.ExitStack() as stack:
        # on two cores: frame features in a second process, the rest here (same scores)
        features = stack.enter_context(feature_worker(programme, activity.frame_s)) if use_workers(programme) else None
        return score_cues(
            iter_programme(programme),
            info=programme.info,
            kind=programme.kind,
            timings=timings,
            activity=activity,
            settings=settings,
            progress=progress,
            features=features,
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
    activity, loudness = measure(programme, settings, progress=progress)
    alignment, timings, uncovered = align_cues(track.cues, activity, programme.info, settings, style)
    scores = score_pass(programme, timings, activity, settings, progress=progress) if score else ()
    return Analysis(
        schema=SCHEMA_VERSION,
        settings=settings.to_dict(),
        inputs=describe_inputs(inputs, out_dir),
        audio=programme.info,
        subtitles=track,
        loudness=loudness,
        activity=activity,
        alignment=alignment,
        timings=timings,
        uncovered=uncovered,
        scores=scores,
        warnings=programme_warnings(loudness, activity, alignment),
    )


def retimed_track(track: SubtitleTrack, timings: Sequence[CueTiming]) -> SubtitleTrack:
    """The subtitle track with each cue moved to its aligned times (to the millisecond)."""
    by_index = {t.index: t for t in timings}
    cues = tuple(
        dataclasses.replace(
            c,
            start_s=round(by_index[c.index].aligned_start_s, 3),
            end_s=round(by_index[c.index].aligned_end_s, 3),
        )
        if c.index in by_index
        else c
        for c in track.cues
    )
    return dataclasses.replace(track, cues=cues)



# ----------------------------------------------------------------------------- the analysis folder

ANALYSIS_FILE = "analysis.json"


def analysis_json(analysis: Analysis) -> str:
    """Canonical JSON text of an analysis (sorted keys, fixed layout, ends with a newline)."""
    data = {"kind": "cueplan-analysis", **analysis.to_dict()}
    return json.dumps(data, sort_keys=True, indent=1, separators=(",", ": "), ensure_ascii=False, allow_nan=False) + "\n"


def load_analysis(out_dir: Path) -> Analysis:
    """Read ``out_dir/analysis.json`` written by :func:`write_outputs`."""
    path = Path(out_dir) / ANALYSIS_FILE
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise PlanFileError(
            "no analysis.json here; run `cueplan analyse AUDIO SUBS --out DIR` first", path=path
        ) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise PlanFileError(f"cannot read the analysis ({exc}); re-run cueplan analyse", path=path) from exc
    if not isinstance(data, dict) or data.pop("kind", None) != "cueplan-analysis":
        raise PlanFileError("not a cueplan analysis file; re-run cueplan analyse", path=path)
    if data.get("schema") != SCHEMA_VERSION:
        raise PlanFileError(
            f"schema version {data.get('schema')!r} is not the version this tool reads ({SCHEMA_VERSION}); "
            "re-run cueplan analyse",
            path=path,
            field="schema",
        )
    return Analysis.from_dict(data, where="analysis")


def input_paths(analysis: Analysis, out_dir: Path) -> Inputs:
    """The input files an analysis names, resolved against its folder."""
    by_role = {f.role: Path(out_dir) / f.path for f in analysis.inputs}
    return Inputs(
        subtitles=by_role["subtitles"],
        mix=by_role.get("mix"),
        dialogue=by_role.get("dialogue"),
        background=by_role.get("background"),
    )


def write_outputs(plan: Plan, out_dir: Path, *, inputs: Sequence[Path] = ()) -> dict[str, Path]:
    """Write the analysis folder: analysis.json, the plan and its exports, the retimed subtitles."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    analysis = plan.analysis
    written = {"analysis": out_dir / ANALYSIS_FILE}
    atomic_write_text(written["analysis"], analysis_json(analysis), inputs=inputs)
    written.update(write_exports(plan, out_dir, inputs=inputs))
    track = retimed_track(analysis.subtitles, analysis.timings)
    written["subtitles"] = out_dir / f"retimed.{track.format}"
    write_subtitles(written["subtitles"], track, inputs=inputs)
    return written


@dataclass(frozen=True)
class RunResult:
    """A finished run: the plan (with its analysis) and the files written, by name."""

    plan: Plan
    out_dir: Path
    written: dict[str, Path]


def run_analysis(
    inputs: Inputs,
    out_dir: Path,
    settings: AnalysisSettings,
    plan_settings: PlanSettings | None = None,
    *,
    style_path: Path | None = None,
    progress: Progress | None = None,
) -> RunResult:
    """Analyse, plan, and write the whole analysis folder (``cueplan analyse``)."""
    analysis = analyse(inputs, out_dir, settings, style_path=style_path, progress=progress)
    plan = make_plan(analysis, plan_settings or PlanSettings())
    written = write_outputs(plan, out_dir, inputs=inputs.all_paths())
    written.update(write_report_html(out_dir, ReportInputs(plan=plan, verify=None)))
    return RunResult(plan=plan, out_dir=Path(out_dir), written=written)


def replan(out_dir: Path, plan_settings: PlanSettings, *, hearing: str | None = None) -> RunResult:
    """Plan again from a saved analysis with other settings (and hearing profile), without reading the audio."""
    analysis = load_analysis(out_dir)
    if hearing is not None:
        analysis = for_hearing(analysis, hearing)
    plan = make_plan(analysis, plan_settings)
    inputs = input_paths(analysis, out_dir).all_paths()
    written = write_exports(plan, out_dir, inputs=inputs)
    return RunResult(plan=plan, out_dir=Path(out_dir), written=written)


def run_alignment(
    inputs: Inputs,
    out_dir: Path,
    settings: AnalysisSettings,
    *,
    style_path: Path | None = None,
    progress: Progress | None = None,
) -> RunResult:
    """Speech detection and alignment only (``cueplan align``): retimed subtitles, cues.csv, alignment.json.

    The returned plan has no scores, events or scenes; its cues.csv carries the timing columns.
    """
    analysis = analyse(inputs, out_dir, settings, style_path=style_path, progress=progress, score=False)
    track, timings, uncovered, alignment = analysis.subtitles, analysis.timings, analysis.uncovered, analysis.alignment
    plan = Plan(schema=SCHEMA_VERSION, settings=PlanSettings().to_dict(), analysis=analysis, events=(), scenes=())
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    guard = inputs.all_paths()
    written = {"alignment": out_dir / "alignment.json", "cues": out_dir / "cues.csv", "plan": out_dir / "plan.json"}
    summary = {
        "kind": "cueplan-alignment",
        "schema": SCHEMA_VERSION,
        "alignment": alignment.to_dict(),
        "timings": [t.to_dict() for t in timings],
        "uncovered": [u.to_dict() for u in uncovered],
        "speech_source": analysis.activity.source,
        "vad": analysis.activity.backend,
        "warnings": list(analysis.warnings),
    }
    atomic_write_text(written["alignment"], json.dumps(summary, sort_keys=True, indent=1) + "\n", inputs=guard)
    write_cues_csv(plan, written["cues"], inputs=guard)
    atomic_write_text(written["plan"], plan_json(plan), inputs=guard)  # for `cueplan report`
    retimed = retimed_track(track, timings)
    written["subtitles"] = out_dir / f"retimed.{retimed.format}"
    write_subtitles(written["subtitles"], retimed, inputs=guard)
    return RunResult(plan=plan, out_dir=out_dir, written=written)


@dataclass(frozen=True)
class ReportInputs:
    """What a report needs from an analysis folder: the plan and, after a verify, its rows."""

    plan: Plan
    verify: tuple[VerifyRow, ...] | None


def _render_is_current(out_dir: Path, plan: Plan) -> bool:
    """Whether render.json was made from this very plan (a re-plan makes verify rows stale)."""
    path = Path(out_dir) / RENDER_FILE
    if not path.is_file():
        return False
    return bool(json.loads(path.read_text(encoding="utf-8")).get("plan_sha256") == plan_sha256(plan))


def load_report_inputs(out_dir: Path) -> ReportInputs:
    """Load ``plan.json`` (checked) and ``verify.json`` when a render has been verified."""
    plan = load_plan(Path(out_dir) / "plan.json")
    path = Path(out_dir) / VERIFY_FILE
    rows: tuple[VerifyRow, ...] | None = None
    if path.is_file():
        data = json.loads(path.read_text(encoding="utf-8"))
        data.pop("file", None)
        if _render_is_current(out_dir, plan):
            rows = VerifyReport.from_dict(data, where="verify").rows
    return ReportInputs(plan=plan, verify=rows)


# ----------------------------------------------------------------------------- render, verify, report

RENDER_FILE = "render.json"
VERIFY_FILE = "verify.json"


def _record_json(kind: str, record: RenderReport | VerifyReport) -> str:
    data = {"file": kind, **record.to_dict()}
    return json.dumps(data, sort_keys=True, indent=1, ensure_ascii=False, allow_nan=False) + "\n"


@dataclass(frozen=True)
class RenderRun:
    """A finished render: what it did, the re-scoring of its cues, and the files written."""

    render: RenderReport
    verify: VerifyReport
    written: dict[str, Path]


def _plan_and_programme(out_dir: Path) -> tuple[Plan, Inputs, Programme]:
    plan = load_plan(Path(out_dir) / "plan.json")
    inputs = input_paths(plan.analysis, out_dir)
    roles = {"mix": inputs.mix, "dialogue": inputs.dialogue, "background": inputs.background}
    plan = load_plan(Path(out_dir) / "plan.json", audio_paths={k: v for k, v in roles.items() if v is not None})
    programme = open_programme(mix=inputs.mix, dialogue=inputs.dialogue, background=inputs.background)
    return plan, inputs, programme


def run_render(
    out_dir: Path,
    out_path: Path,
    settings: RenderSettings,
    *,
    stems_out: Path | None = None,
    progress: Progress | None = None,
) -> RenderRun:
    """Render the plan in ``out_dir`` to ``out_path``, then verify it (``cueplan render``).

    With stems, the processed stems are verified exactly (written to ``stems_out`` when
    given, else to a temporary folder that is removed afterwards).
    """
    out_dir = Path(out_dir)
    plan, inputs, programme = _plan_and_programme(out_dir)
    guard = inputs.all_paths()
    refuse_inputs(out_path, guard)
    with tempfile.TemporaryDirectory(dir=out_dir, prefix=".stems-") as scratch:
        stems_dir = stems_out if stems_out is not None else (Path(scratch) if programme.kind == "stems" else None)
        report = render(plan, programme, out_path, settings, stems_out=stems_dir, progress=progress)
        processed = None
        if stems_dir is not None and programme.kind == "stems":
            processed = open_programme(dialogue=stems_dir / "dialogue.wav", background=stems_dir / "background.wav")
        checked = verify(
            plan,
            open_programme(mix=out_path),
            processed_stems=processed,
            progress=progress,
            level_gain_db=report.gain_applied_db,
        )
    # The record names the output relative to the analysis folder, like the inputs.
    report = dataclasses.replace(report, output_path=_relative(Path(out_path), out_dir))
    written = {"rendered": Path(out_path), "render": out_dir / RENDER_FILE}
    atomic_write_text(written["render"], _record_json("cueplan-render", report), inputs=guard)
    written.update(_write_verify(checked, out_dir, guard))
    if stems_out is not None:
        written["stems"] = Path(stems_out)
    written.update(write_report_html(out_dir, ReportInputs(plan=plan, verify=checked.rows), rendered=Path(out_path)))
    return RenderRun(render=report, verify=checked, written=written)


def _write_verify(checked: VerifyReport, out_dir: Path, guard: Sequence[Path]) -> dict[str, Path]:
    written = {"verify": out_dir / "verify.csv", "verify-json": out_dir / VERIFY_FILE}
    write_verify_csv(checked, written["verify"], inputs=tuple(guard))
    atomic_write_text(written["verify-json"], _record_json("cueplan-verify", checked), inputs=guard)
    return written


def run_verify(out_dir: Path, rendered: Path, *, progress: Progress | None = None) -> tuple[VerifyReport, dict[str, Path]]:
    """Re-score the planned cues on a rendered file (``cueplan verify``), scored as a mix."""
    out_dir = Path(out_dir)
    plan, inputs, _ = _plan_and_programme(out_dir)
    guard = inputs.all_paths()
    level_gain_db = 0.0
    render_path = out_dir / RENDER_FILE
    if render_path.is_file():
        data = json.loads(render_path.read_text(encoding="utf-8"))
        if (out_dir / data.get("output_path", "")).resolve() == Path(rendered).resolve():
            level_gain_db = float(data.get("gain_applied_db", 0.0))
    checked = verify(plan, open_programme(mix=rendered), progress=progress, level_gain_db=level_gain_db)
    return checked, _write_verify(checked, out_dir, guard)


def write_report_html(out_dir: Path, loaded: ReportInputs, *, rendered: Path | None = None) -> dict[str, Path]:
    """Write ``out_dir/report.html`` with clips of the worst lines (and of the render, when there is one)."""
    out_dir = Path(out_dir)
    inputs = input_paths(loaded.plan.analysis, out_dir)
    if rendered is None and (out_dir / RENDER_FILE).is_file():
        candidate = out_dir / json.loads((out_dir / RENDER_FILE).read_text(encoding="utf-8")).get("output_path", "")
        rendered = candidate if candidate.is_file() else None
    programme = open_programme(mix=inputs.mix, dialogue=inputs.dialogue, background=inputs.background)
    clips = extract_clips(loaded.plan, programme, rendered_path=rendered, top=5)
    page = render_html(loaded.plan, clips=clips, verify_rows=loaded.verify)
    path = out_dir / "report.html"
    write_html(path, page, inputs=inputs.all_paths())
    return {"report": path}
