"""The command runs: analyse, align, render, verify and report, each from files to files.

Each function reads its inputs, runs the stages (:mod:`planner.pipeline` for the audio
passes) and writes the analysis folder's outputs atomically; none of them prints.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import partial
from pathlib import Path

from planner.analysis.framepower import SignalKPower
from planner.folder import RunResult, input_paths, relative_path, retimed_track, write_outputs
from planner.io.audio import Programme, open_programme
from planner.io.exports import check_audio, load_plan, plan_json, write_cues_csv
from planner.io.files import atomic_write_text, refuse_inputs
from planner.io.subtitles import write_subtitles
from planner.model import SCHEMA_VERSION, Plan
from planner.pipeline import Inputs, analyse
from planner.planning.scenes import make_plan
from planner.progress import Progress
from planner.render.renderer import RenderReport, plan_sha256, render
from planner.render.verify import VerifyReport, VerifyRow, verify, verifying_stems, write_verify_csv
from planner.report.clips import extract_clips
from planner.report.html import render_html, write_html
from planner.settings import AnalysisSettings, PlanSettings, RenderSettings


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


def _plan_and_programme(out_dir: Path) -> tuple[Plan, Inputs, Programme, Callable[[], None]]:
    """The folder's plan, its inputs and programme, and the check (for the caller to make) that
    the audio is what the plan was made from (its SHA-256; raises PlanFileError)."""
    path = Path(out_dir) / "plan.json"
    plan = load_plan(path)
    inputs = input_paths(plan.analysis, out_dir)
    roles = {"mix": inputs.mix, "dialogue": inputs.dialogue, "background": inputs.background}
    programme = open_programme(mix=inputs.mix, dialogue=inputs.dialogue, background=inputs.background)
    audio_check = partial(check_audio, plan, {k: v for k, v in roles.items() if v is not None}, path)
    return plan, inputs, programme, audio_check


def run_render(
    out_dir: Path,
    out_path: Path,
    settings: RenderSettings,
    *,
    stems_out: Path | None = None,
    progress: Progress | None = None,
) -> RenderRun:
    """Render the plan in ``out_dir`` to ``out_path``, then verify it (``cueplan render``).

    The processed stems of a stems programme are verified exactly, scored beside the render
    (:func:`~planner.render.verify.verifying_stems`; written to ``stems_out`` only when
    given); a mix's output is read back and verified as a mix. The inputs' SHA-256 is
    checked in a thread beside the measuring pass, before anything is written.
    """
    out_dir = Path(out_dir)
    plan, inputs, programme, audio_check = _plan_and_programme(out_dir)
    guard = inputs.all_paths()
    refuse_inputs(out_path, guard)
    from_stems = verifying_stems(plan, programme) if programme.kind == "stems" else contextlib.nullcontext(None)
    # a mix's output is K-weighted once, by the render's output meter, for its verify
    levels = SignalKPower(programme.info) if programme.kind == "mix" else None
    with from_stems as stems_report, ThreadPoolExecutor(1, thread_name_prefix="cueplan-hash") as pool:
        hashed = pool.submit(audio_check)
        report = render(
            plan, programme, out_path, settings, stems_out=stems_out, progress=progress, before_writing=hashed.result,
            k_frames=levels,
        )  # fmt: skip
        if stems_report is not None:
            checked = stems_report(report.gain_applied_db)
    if levels is not None:
        rendered = open_programme(mix=out_path)
        checked = verify(plan, rendered, progress=progress, level_gain_db=report.gain_applied_db, k_power=levels.result())
    # The record names the output relative to the analysis folder, like the inputs.
    report = dataclasses.replace(report, output_path=relative_path(Path(out_path), out_dir))
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
    plan, inputs, _, audio_check = _plan_and_programme(out_dir)
    audio_check()
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
