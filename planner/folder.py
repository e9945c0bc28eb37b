"""The analysis folder: where an analysis and its plan live, and re-planning from it.

Everything here reads or writes the folder's JSON and exports; nothing reads audio, so
``cueplan plan`` loads no signal-processing module.
"""

from __future__ import annotations

import dataclasses
import json
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from planner.errors import PlanFileError
from planner.io.exports import write_exports
from planner.io.files import atomic_write_text
from planner.io.subtitles import write_subtitles
from planner.model import SCHEMA_VERSION, Analysis, CueTiming, Plan, SubtitleTrack
from planner.planning.hearing import for_hearing
from planner.planning.scenes import make_plan
from planner.settings import PlanSettings


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


def relative_path(path: Path, out_dir: Path) -> str:
    """``path`` relative to ``out_dir`` (POSIX separators), as the analysis folder records it."""
    return Path(os.path.relpath(Path(path).resolve(), Path(out_dir).resolve())).as_posix()



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
    if "subtitles" not in by_role or not ({"mix", "dialogue"} & by_role.keys()):
        raise PlanFileError(
            f"the analysis names inputs {sorted(by_role)}, not a subtitle file and its audio; "
            "re-run cueplan analyse to make a complete analysis folder",
            path=Path(out_dir) / ANALYSIS_FILE,
            field="inputs",
        )
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


def replan(out_dir: Path, plan_settings: PlanSettings, *, hearing: str | None = None) -> RunResult:
    """Plan again from a saved analysis with other settings (and hearing profile), without reading the audio."""
    analysis = load_analysis(out_dir)
    if hearing is not None:
        analysis = for_hearing(analysis, hearing)
    plan = make_plan(analysis, plan_settings)
    inputs = input_paths(analysis, out_dir).all_paths()
    written = write_exports(plan, out_dir, inputs=inputs)
    return RunResult(plan=plan, out_dir=Path(out_dir), written=written)
