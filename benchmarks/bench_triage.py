"""Throughput of archive triage with 1 and 2 local worker processes.

Run ``python benchmarks/bench_triage.py [--episodes 8] [--lines 30] [--vad neural|fast]
[--json benchmarks/results/triage.json]``.

Synthesizes ``--episodes`` invented programmes (:func:`planner.demo.synth.synth_programme`,
``--lines`` fixture lines each, about 2.5 minutes, stereo 48 kHz 24-bit, backgrounds cycling
through pink noise, music, babble and rain at 0-15 dB SNR) into a temporary folder, then
triages the folder into a fresh catalogue once per worker count, timing the whole
:func:`planner.batch.triage.run_triage` call (worker start-up included). Prints, per worker
count: wall time, episodes per hour of wall time, seconds of wall time per programme hour,
the mean per-episode work time recorded in the catalogue, and the speed-up over one worker;
and the 1-minute load average before each run (the machine may be shared, which shows in the
speed-up). Also the CPU time of :func:`planner.batch.triage.triage_episode` run in this
process for each episode (``time.process_time``), which other load on the machine does not
change: CPU seconds per programme hour, the floor for one worker's wall time.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import tempfile
import time
from pathlib import Path

from planner.batch.catalogue import Catalogue
from planner.batch.sources import discover
from planner.batch.triage import TriageSettings, run_triage, triage_episode
from planner.demo.synth import synth_programme, write_programme
from planner.settings import AnalysisSettings

BACKGROUNDS = (("pink", 10.0), ("music", 5.0), ("babble", 0.0), ("rain", 15.0))
WORKER_COUNTS = (1, 2)


def build_archive(folder: Path, episodes: int, lines: int) -> float:
    """Write the invented series into ``folder``; return the total programme duration, seconds."""
    total_s = 0.0
    for i in range(episodes):
        background, snr_db = BACKGROUNDS[i % len(BACKGROUNDS)]
        prog = synth_programme(background=background, snr_db=snr_db, n_lines=lines, seed=100 + i)
        work = folder / f".work{i}"
        work.mkdir()
        paths = write_programme(prog, work, stems=False)
        name = f"lantern_point_s02e{i + 1:02d}"
        paths["mix"].rename(folder / f"{name}.wav")
        paths["subtitles"].rename(folder / f"{name}.srt")
        shutil.rmtree(work)
        total_s += prog.duration_s
    return total_s


def bench(folder: Path, catalog: Path, workers: int, settings: TriageSettings, programme_s: float) -> dict[str, float]:
    load = os.getloadavg()[0]
    start = time.perf_counter()
    summary = run_triage(folder, catalog, workers=workers, settings=settings)
    wall_s = time.perf_counter() - start
    if summary.failed:
        raise SystemExit(f"episodes failed: {summary.failed}")
    with Catalogue(catalog, create=False) as cat:
        work_s = [float(r["elapsed_s"]) for r in cat.episodes()]
    n = len(summary.done)
    return {
        "workers": workers,
        "episodes": n,
        "programme_s": programme_s,
        "wall_s": wall_s,
        "episodes_per_hour": 3600.0 * n / wall_s,
        "s_per_programme_hour": wall_s * 3600.0 / programme_s,
        "mean_episode_work_s": statistics.fmean(work_s),
        "load_average_1min_before": load,
    }


def cpu_per_programme_hour(folder: Path, settings: TriageSettings, programme_s: float) -> float:
    """CPU seconds of triage_episode per programme hour, run serially in this process."""
    start = time.process_time()
    for job in discover(folder).jobs:
        if triage_episode(job, settings).status != "done":
            raise SystemExit(f"episode {job.episode_id} failed")
    return (time.process_time() - start) * 3600.0 / programme_s


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--episodes", type=int, default=8, help="number of synthesized episodes")
    parser.add_argument("--lines", type=int, default=30, help="fixture lines per episode (about 5 s each)")
    parser.add_argument("--vad", choices=("neural", "fast"), default="neural", help="speech detector")
    parser.add_argument("--json", type=Path, default=None, help="also write the results here (merged by --vad)")
    args = parser.parse_args()
    settings = TriageSettings(analysis=AnalysisSettings(vad=args.vad))
    with tempfile.TemporaryDirectory(prefix="bench-triage-") as tmp:
        folder = Path(tmp) / "archive"
        folder.mkdir()
        programme_s = build_archive(folder, args.episodes, args.lines)
        rows = [bench(folder, Path(tmp) / f"w{w}.sqlite", w, settings, programme_s) for w in WORKER_COUNTS]
        cpu = cpu_per_programme_hour(folder, settings, programme_s)
    base = rows[0]["wall_s"]
    for r in rows:
        r["speedup"] = base / r["wall_s"]
    print(f"{args.episodes} episodes, {programme_s / 60:.1f} min of programme, vad={args.vad}, {os.cpu_count()} CPUs")
    print(f"{'workers':>7} {'wall s':>8} {'episodes/h':>11} {'s per prog h':>13} {'work s/ep':>10} {'speed-up':>9} {'load':>5}")
    for r in rows:
        print(
            f"{r['workers']:>7} {r['wall_s']:>8.1f} {r['episodes_per_hour']:>11.0f} {r['s_per_programme_hour']:>13.1f} "
            f"{r['mean_episode_work_s']:>10.1f} {r['speedup']:>9.2f} {r['load_average_1min_before']:>5.1f}"
        )
    print(f"CPU time in one process: {cpu:.1f} s per programme hour")
    if args.json is not None:
        data = json.loads(args.json.read_text()) if args.json.exists() else {"benchmark": "triage", "runs": {}}
        data["runs"][args.vad] = {"episodes": args.episodes, "lines": args.lines, "cpus": os.cpu_count(), "rows": rows,
                                "cpu_s_per_programme_hour": cpu}
        args.json.write_text(json.dumps(data, indent=2, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()
