"""Programme-scale speed and memory of every cueplan command: ``python -m benchmarks`` (``make bench``).

Synthesizes one-hour and two-hour programmes (stereo and 5.1, 48 kHz 24-bit, mix and
stems, about 900 cues per hour; :mod:`benchmarks.programme`) in a temporary folder, one
at a time, and measures each command as a whole process (:mod:`benchmarks.timing`: GNU
``time -v``, else ``os.wait4``):

- ``start-up``: ``cueplan --help``;
- ``floor``: ``python -m benchmarks.floor MIX`` (decode in blocks, mono, one STFT pass);
- ``inspect``: ``cueplan inspect MIX``;
- ``analyse fast|neural mix|stems``: ``cueplan analyse`` with each speech detector, from
  the mix alone and from the stems;
- ``plan``: ``cueplan plan`` from the analysis saved by ``analyse fast mix``;
- ``render stems|mix``: ``cueplan render`` (render, then verify by re-scoring);
- ``render-only stems|mix``: :mod:`benchmarks.render_plan`, the render without the verify
  pass (EBU R 128), comparable with runs made before ``cueplan render`` existed.

The new files are flushed to disk and read once, untimed, so every command reads them from
the operating system's cache. Each command runs ``--runs`` times (default 3), interleaved
with the others, and the table shows the median wall time, seconds per programme hour,
realtime factor, ratio to the floor's median in the same run, median CPU time, peak RSS of the largest process and the
sampled peak Pss of the whole process tree (both the largest over the runs), and the load
average. Then the issue's targets, checked on seconds per programme hour, and the
constant-memory check (peak memory of the longest programme over that of the shortest).
Results go to ``benchmarks/results.json``. ``--quick`` runs 3- and 6-minute stereo
programmes once each, to try the benchmark in about a minute.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from benchmarks.floor import floor_pass
from benchmarks.programme import ProgrammeFiles, write_long_programme
from benchmarks.timing import CommandFailed, Run, have_gnu_time, measure
from planner.io.files import atomic_write_text

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results.json"
SEED = 20260109
_WAV_LIMIT_BYTES = 0xFFFFFFFF

#: Issue targets, seconds per programme hour (one hour of 48 kHz audio), by (command, layout); None: any layout.
WALL_TARGETS_S: dict[tuple[str, str | None], float] = {
    ("start-up", None): 1.0,
    ("analyse fast mix", "stereo"): 10.0,
    ("analyse neural mix", "stereo"): 15.0,
    ("analyse fast mix", "5.1"): 25.0,
    ("analyse neural mix", "5.1"): 25.0,
    ("render stems", "stereo"): 12.0,
    ("render mix", "stereo"): 20.0,
    ("plan", None): 1.0,
}
#: ``analyse fast mix`` on stereo: at most this many times the floor of the same run.
FLOOR_RATIO_TARGET = 4.0
PEAK_RSS_TARGET_MB = 400.0
CONSTANT_MEMORY_TOLERANCE = 0.10
COMMANDS = (
    "start-up",
    "floor",
    "inspect",
    "analyse fast mix",
    "analyse neural mix",
    "analyse fast stems",
    "analyse neural stems",
    "plan",
    "render stems",
    "render mix",
    "render-only stems",
    "render-only mix",
)


#: The analysis folder each command reads (written by that analyse command).
_NEEDS = {
    "plan": "analyse fast mix",
    "render mix": "analyse fast mix",
    "render-only mix": "analyse fast mix",
    "render stems": "analyse fast stems",
    "render-only stems": "analyse fast stems",
}


@dataclass(frozen=True)
class Result:
    """Every run of one command on one programme."""

    programme: str
    layout: str
    duration_s: float
    command: str
    runs: tuple[Run, ...]

    @property
    def wall_s(self) -> float:
        """Median wall time, seconds."""
        return statistics.median(r.wall_s for r in self.runs)

    @property
    def cpu_s(self) -> float:
        """Median CPU time (user + system), seconds."""
        return statistics.median(r.user_s + r.sys_s for r in self.runs)

    @property
    def peak_rss_mb(self) -> float:
        """Largest peak resident memory of one process over the runs, MB."""
        return max(r.peak_rss_mb for r in self.runs)

    @property
    def peak_tree_mb(self) -> float:
        """Largest sampled Pss of the whole process tree over the runs, MB."""
        return max(r.peak_tree_pss_mb for r in self.runs)

    @property
    def peak_mb(self) -> float:
        """Peak memory of the command: the larger of the two figures above, MB."""
        return max(self.peak_rss_mb, self.peak_tree_mb)

    @property
    def per_hour_s(self) -> float:
        """Median wall seconds per programme hour."""
        return self.wall_s * 3600.0 / self.duration_s

    @property
    def target_s(self) -> float:
        """The figure the issue's time target is set on: seconds per programme hour, or the
        plain wall time for ``start-up`` and ``plan`` (which do not scale with the audio)."""
        return self.wall_s if self.command in ("start-up", "plan") else self.per_hour_s


def _cueplan() -> list[str]:
    script = Path(sys.executable).with_name("cueplan")
    return [str(script)] if script.is_file() else [sys.executable, "-m", "planner"]


def _argv(command: str, files: ProgrammeFiles, work: Path) -> list[str] | None:
    """The command line of ``command`` on ``files``; None when it cannot run on them."""
    cue, q = _cueplan(), "--quiet"
    mix_dir, stems_dir = work / "analysis-mix", work / "analysis-stems"
    stems = ["--dialogue", str(files.dialogue), "--background", str(files.background)]
    if command == "start-up":
        return [*cue, "--help"]
    if command == "floor":
        return [sys.executable, "-m", "benchmarks.floor", str(files.mix)]
    if command == "inspect":
        return [*cue, "inspect", str(files.mix), q]
    if command.startswith("analyse"):
        _, vad, source = command.split()
        if source == "mix":
            out = mix_dir if vad == "fast" else work / "analysis-mix-neural"
            return [*cue, "analyse", str(files.mix), str(files.subtitles), "--out", str(out), "--vad", vad, q]
        out = stems_dir if vad == "fast" else work / "analysis-stems-neural"
        return [*cue, "analyse", str(files.subtitles), *stems, "--out", str(out), "--vad", vad, q]
    if command == "plan":
        return [*cue, "plan", str(mix_dir)]
    if command.startswith("render"):
        if files.mix.stat().st_size > _WAV_LIMIT_BYTES:
            return None  # the rendered WAV would pass 4 GiB, which the writer refuses
        folder = stems_dir if command.endswith("stems") else mix_dir
        out = work / "rendered.wav"
        if not command.startswith("render-only"):
            return [*cue, "render", str(folder), "--out", str(out), q]
        return [sys.executable, "-m", "benchmarks.render_plan", str(folder), str(out)]
    raise ValueError(command)


def _bench_programme(
    files: ProgrammeFiles, name: str, commands: list[str], runs: int, gnu_time: bool, work: Path
) -> list[Result]:
    # flush the freshly written files to disk and read them once, untimed: otherwise the first
    # command measured competes with the write-back of gigabytes (seen: a 1 s read taking minutes)
    os.sync()
    for path in (files.mix, files.dialogue, files.background):
        floor_pass(str(path))
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, (str(HERE.parent), os.environ.get("PYTHONPATH"))))}
    # the analyses the plan and render commands read must exist before their first run;
    # one that is not measured itself is run once, untimed
    order = sorted(commands, key=lambda c: (not c.startswith("analyse fast"), COMMANDS.index(c)))
    for needed in sorted({_NEEDS[c] for c in commands if c in _NEEDS} - set(commands)):
        subprocess.run(_argv(needed, files, work), check=True, env=env, capture_output=True)
    measured: dict[str, list[Run]] = {c: [] for c in order}
    for i in range(runs):
        for command in order:
            argv = _argv(command, files, work)
            if argv is None:
                continue
            run = measure(argv, gnu_time=gnu_time, env=env)
            measured[command].append(run)
            (work / "rendered.wav").unlink(missing_ok=True)
            print(
                f"  run {i + 1}/{runs} {command:<22} {run.wall_s:7.2f} s  cpu {run.user_s + run.sys_s:7.2f} s  "
                f"{run.peak_rss_mb:6.1f} MB (tree {run.peak_tree_pss_mb:6.1f})  load {run.load_1min:.2f}",
                flush=True,
            )
    return [Result(name, files.layout, files.duration_s, c, tuple(r)) for c, r in measured.items() if r]


def _floor_of(results: list[Result], r: Result) -> float | None:
    floor = [f for f in results if f.programme == r.programme and f.command == "floor"]
    return r.wall_s / floor[0].wall_s if floor and r.command != "start-up" else None


def _table(results: list[Result]) -> str:
    head = f"{'programme':<16} {'command':<22} {'wall s':>8} {'s/prog h':>9} {'x real':>8} {'/floor':>7} {'cpu s':>8} {'cpu/h':>8} {'RSS MB':>8} {'tree MB':>8} {'load':>5}"
    lines = [head, "-" * len(head)]
    for r in results:
        ratio = _floor_of(results, r)
        realtime = r.duration_s / r.wall_s
        load = statistics.median(x.load_1min for x in r.runs)
        lines.append(
            f"{r.programme:<16} {r.command:<22} {r.wall_s:8.2f} {r.per_hour_s:9.2f} {realtime:8.0f} "
            f"{'' if ratio is None else f'{ratio:.2f}':>7} {r.cpu_s:8.2f} {r.cpu_s * 3600.0 / r.duration_s:8.1f} {r.peak_rss_mb:8.1f} {r.peak_tree_mb:8.1f} {load:5.2f}"
        )
    return "\n".join(lines)


def _checks(results: list[Result]) -> list[dict[str, object]]:
    """Every target of the issue that these results can decide."""
    out: list[dict[str, object]] = []
    shortest = min(r.duration_s for r in results)
    base = [r for r in results if r.duration_s == shortest]
    for r in base:
        limit = WALL_TARGETS_S.get((r.command, r.layout), WALL_TARGETS_S.get((r.command, None)))
        if limit is not None:
            unit = "s" if r.command in ("start-up", "plan") else "s per programme hour"
            out.append({"what": f"{r.command} ({r.layout}) {unit}", "value": r.target_s, "limit": limit, "ok": r.target_s <= limit})
        if r.command == "analyse fast mix" and r.layout == "stereo":
            ratio = _floor_of(results, r)
            if ratio is not None:
                out.append({"what": "analyse fast mix (stereo) / floor", "value": ratio, "limit": FLOOR_RATIO_TARGET, "ok": ratio <= FLOOR_RATIO_TARGET})
    for r in results:
        if r.command != "floor":
            out.append({"what": f"{r.command} ({r.programme}) peak memory MB", "value": r.peak_mb, "limit": PEAK_RSS_TARGET_MB, "ok": r.peak_mb < PEAK_RSS_TARGET_MB})
    longest = max(r.duration_s for r in results)
    if longest > shortest:
        for r in base:
            long = [x for x in results if x.duration_s == longest and x.layout == r.layout and x.command == r.command]
            if long and r.command != "start-up":
                growth = long[0].peak_mb / r.peak_mb - 1.0
                out.append({
                    "what": f"{r.command} ({r.layout}) peak memory growth {shortest / 3600:g} h -> {longest / 3600:g} h",
                    "value": growth, "limit": CONSTANT_MEMORY_TOLERANCE, "ok": growth <= CONSTANT_MEMORY_TOLERANCE,
                })  # fmt: skip
    return out


def main() -> None:
    parser = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=None, help="runs per command (default 3; 1 with --quick)")
    parser.add_argument("--quick", action="store_true", help="3- and 6-minute stereo programmes: about a minute")
    parser.add_argument("--hours", default=None, help="programme lengths in hours, comma-separated (default 1,2)")
    parser.add_argument("--layouts", default=None, help="comma-separated: stereo,5.1 (default both)")
    parser.add_argument("--commands", default=",".join(COMMANDS), help="comma-separated subset of: " + ", ".join(COMMANDS))
    parser.add_argument("--out", type=Path, default=RESULTS, help="JSON results file (default benchmarks/results.json)")
    parser.add_argument("--label", default="", help="free text stored with the results (e.g. 'before')")
    args = parser.parse_args()
    runs = args.runs if args.runs is not None else (1 if args.quick else 3)
    hours = [float(h) for h in (args.hours or ("0.05,0.1" if args.quick else "1,2")).split(",")]
    layouts = (args.layouts or ("stereo" if args.quick else "stereo,5.1")).split(",")
    commands = [c.strip() for c in args.commands.split(",")]
    unknown = sorted(set(commands) - set(COMMANDS))
    if unknown or runs < 1 or any(h <= 0 for h in hours) or set(layouts) - {"stereo", "5.1"}:
        parser.error(f"bad --commands {unknown}, --runs, --hours or --layouts")
    gnu_time = have_gnu_time()
    print(f"measuring with {'GNU time -v' if gnu_time else 'os.wait4 (GNU time not found)'}; load {os.getloadavg()}")
    results: list[Result] = []
    try:
        for h in hours:
            for layout in layouts:
                name = f"{h:g} h {layout}"
                with tempfile.TemporaryDirectory(prefix="cueplan-bench-") as tmp:
                    work = Path(tmp)
                    print(f"{name}: synthesizing...", flush=True)
                    files = write_long_programme(work / "programme", duration_s=h * 3600.0, layout=layout, seed=SEED)  # type: ignore[arg-type]
                    todo = [c for c in commands if c != "start-up" or not results]
                    results += _bench_programme(files, name, todo, runs, gnu_time, work)
                    shutil.rmtree(work / "programme")
    except CommandFailed as exc:
        sys.exit(f"benchmark stopped: {exc}")
    print()
    print(_table(results))
    checks = _checks(results)
    print()
    for c in checks:
        print(f"{'ok  ' if c['ok'] else 'MISS'} {c['what']}: {c['value']:.3g} (limit {c['limit']:g})")
    record = {
        "benchmark": "programme scale (python -m benchmarks)",
        "label": args.label,
        "runs": runs,
        "timing_tool": "GNU time -v" if gnu_time else "os.wait4",
        "load_average_end": list(os.getloadavg()),
        "machine": {"python": platform.python_version(), "numpy": np.__version__, "cpus": os.cpu_count()},
        "results": [
            {
                "programme": r.programme, "layout": r.layout, "duration_s": r.duration_s, "command": r.command,
                "median_wall_s": r.wall_s, "seconds_per_programme_hour": r.per_hour_s, "median_cpu_s": r.cpu_s,
                "cpu_seconds_per_programme_hour": r.cpu_s * 3600.0 / r.duration_s,
                "peak_rss_mb": r.peak_rss_mb, "peak_tree_pss_mb": r.peak_tree_mb, "ratio_to_floor": _floor_of(results, r),
                "runs": [x.to_dict() for x in r.runs],
            }  # fmt: skip
            for r in results
        ],
        "checks": checks,
    }
    atomic_write_text(args.out, json.dumps(record, indent=1, sort_keys=True) + "\n")
    print(f"wrote {args.out}")


if __name__ == "__main__":
    main()
