"""Memory and speed of the inspect path: probe + block-wise loudness summary of a long programme.

Synthesizes a seeded, invented programme (default one hour, 48 kHz stereo, 24-bit WAV) block
by block in a temporary folder, then measures, in a separate Python process, exactly the
path the CLI takes: ``probe(path)`` and ``measure_loudness(read_blocks(path), ...)``. The
child's peak resident memory comes from ``resource.getrusage(RUSAGE_CHILDREN)`` after it
exits; a second child that only imports the same modules gives the baseline. Prints a table
and writes ``benchmarks/results/inspect.json``.

Usage: ``python benchmarks/bench_inspect.py [--minutes 60] [--out PATH]``.
Target (issue 2): peak memory under 300 MB for one hour.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "inspect.json"
RATE_HZ = 48000
BLOCK_FRAMES = 1 << 16
SEED = 20261202
TARGET_PEAK_MB = 300.0


def synthesize(path: Path, minutes: float) -> float:
    """Write the test programme block by block; returns seconds taken.

    Content (invented): dialogue-like noise bursts with a 4 Hz syllable envelope, on for
    about 60 % of the time, over a three-note music bed, with a new scene level (0 to
    -12 dB) every 45 s. Nothing here depends on the meter.
    """
    from planner.io.audio import AudioWriter

    rng = np.random.default_rng(SEED)
    n_total = int(minutes * 60 * RATE_HZ)
    scene_gain_db = rng.uniform(-12.0, 0.0, size=int(minutes * 60 / 45) + 2)
    talk_on = rng.random(int(minutes * 60 / 3) + 2) < 0.6  # 3 s turns
    notes_hz = np.array([196.0, 246.9, 293.7])
    t0 = time.perf_counter()
    with AudioWriter(path, sample_rate_hz=RATE_HZ, n_channels=2, subtype="PCM_24", description="benchmark programme") as w:
        for start in range(0, n_total, BLOCK_FRAMES):
            n = min(BLOCK_FRAMES, n_total - start)
            t_s = (start + np.arange(n)) / RATE_HZ
            envelope = (0.5 * (1.0 - np.cos(2 * np.pi * 4.0 * t_s))) ** 2 * talk_on[(t_s // 3).astype(int)]
            speech = 0.08 * envelope * rng.standard_normal(n)
            bed = 0.03 * np.sin(2 * np.pi * notes_hz[:, None] * t_s).sum(axis=0) * (1.0 + 0.5 * np.sin(2 * np.pi * t_s / 20))
            gain = 10.0 ** (scene_gain_db[(t_s // 45).astype(int)] / 20.0)
            left = gain * (speech + bed)
            right = gain * (speech + 0.8 * bed + 0.01 * rng.standard_normal(n))
            w.write(np.stack([left, right], axis=1).astype(np.float32))
    return time.perf_counter() - t0


def measure(path: str) -> dict[str, object]:
    """Child process: the inspect path, timed."""
    from planner.analysis.loudness import measure_loudness
    from planner.io.audio import probe, read_blocks

    t0 = time.perf_counter()
    info = probe(path)
    t1 = time.perf_counter()
    cpu0 = _cpu_s()
    summary = measure_loudness(read_blocks(path), info.sample_rate_hz, info.layout)
    t2 = time.perf_counter()
    return {
        "probe_s": t1 - t0,
        "loudness_s": t2 - t1,
        "loudness_cpu_s": _cpu_s() - cpu0,
        "audio_s": info.duration_s,
        "summary": summary.to_dict(),
    }


def _cpu_s() -> float:
    """CPU seconds (user + system) of this process: steadier than wall time on a shared machine."""
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def baseline() -> dict[str, object]:
    """Child process: import the same modules and stop (memory of the interpreter and libraries)."""
    import planner.analysis.loudness  # noqa: F401
    import planner.io.audio  # noqa: F401

    return {}


def _run_child(mode: str, *args: str) -> tuple[dict[str, object], float, float]:
    """Run this script as a child; returns its JSON, its peak RSS in MB and wall seconds."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t0 = time.perf_counter()
    done = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), mode, *args], check=True, capture_output=True, text=True
    )
    wall = time.perf_counter() - t0
    peak_kib = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss  # Linux: KiB, max over waited children
    if peak_kib <= before:
        raise RuntimeError("child peak RSS not above the previous child's; run each measurement in a fresh parent")
    return json.loads(done.stdout), peak_kib / 1024.0, wall


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=60.0, help="programme length (default 60)")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help="JSON results file")
    args = parser.parse_args()

    # baseline first: RUSAGE_CHILDREN keeps the maximum, so the larger child must come second
    _, base_mb, _ = _run_child("--child-baseline")
    with tempfile.TemporaryDirectory(prefix="cueplan-bench-") as folder:
        path = Path(folder) / "programme.wav"
        synth_s = synthesize(path, args.minutes)
        size_mb = path.stat().st_size / 1e6
        result, peak_mb, wall_s = _run_child("--child-measure", str(path))

    audio_s = float(result["audio_s"])  # type: ignore[arg-type]
    loud_s = float(result["loudness_s"])  # type: ignore[arg-type]
    cpu_s = float(result["loudness_cpu_s"])  # type: ignore[arg-type]
    per_hour = 3600.0 / audio_s
    rows = [
        ("programme", f"{audio_s / 60:.1f} min, 48 kHz stereo PCM_24, {size_mb:.0f} MB"),
        ("synthesis (not measured path)", f"{synth_s:.1f} s"),
        ("probe", f"{float(result['probe_s']) * 1000:.1f} ms"),  # type: ignore[arg-type]
        ("read + loudness summary, wall", f"{loud_s:.2f} s ({loud_s * per_hour:.2f} s per programme hour)"),
        ("read + loudness summary, CPU", f"{cpu_s:.2f} s ({cpu_s * per_hour:.2f} s per programme hour)"),
        ("child wall time (incl. start-up)", f"{wall_s:.2f} s"),
        ("child peak RSS", f"{peak_mb:.1f} MB (target < {TARGET_PEAK_MB:.0f} MB)"),
        ("import-only child peak RSS", f"{base_mb:.1f} MB"),
    ]
    width = max(len(k) for k, _ in rows)
    for key, value in rows:
        print(f"{key:<{width}}  {value}")
    print("summary:", json.dumps(result["summary"], sort_keys=True))

    record = {
        "benchmark": "inspect",
        "programme_minutes": audio_s / 60,
        "file_mb": size_mb,
        "probe_s": result["probe_s"],
        "read_and_loudness_s": loud_s,
        "seconds_per_programme_hour": loud_s * per_hour,
        "read_and_loudness_cpu_s": cpu_s,
        "cpu_seconds_per_programme_hour": cpu_s * per_hour,
        "load_average_1min": os.getloadavg()[0],
        "child_wall_s": wall_s,
        "peak_rss_mb": peak_mb,
        "baseline_rss_mb": base_mb,
        "target_peak_rss_mb": TARGET_PEAK_MB,
        "meets_target": peak_mb < TARGET_PEAK_MB,
        "summary": result["summary"],
        "machine": {
            "python": platform.python_version(),
            "numpy": np.__version__,
            "cpus": os.cpu_count(),
        },
    }
    args.out.parent.mkdir(parents=True, exist_ok=True)
    from planner.io.files import atomic_write_text

    atomic_write_text(args.out, json.dumps(record, indent=2, sort_keys=True) + "\n")
    print(f"wrote {args.out}")


if __name__ == "__main__":
    if len(sys.argv) == 3 and sys.argv[1] == "--child-measure":
        print(json.dumps(measure(sys.argv[2])))
    elif len(sys.argv) == 2 and sys.argv[1] == "--child-baseline":
        print(json.dumps(baseline()))
    else:
        main()
