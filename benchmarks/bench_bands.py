"""Speed of the streaming band analysis and of the SII on its frames.

Run ``python benchmarks/bench_bands.py [--minutes 60] [--json out.json]``: feeds the given
duration of mono noise at several sample rates through :class:`BandAnalyzer` in 10 s blocks
(one noise block reused, so only the analysis is timed), then evaluates the SII on every
10 ms frame of one minute, and prints a table (optionally also written as JSON).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from planner.analysis.bands import BandAnalyzer, band_spectrum_level_db
from planner.analysis.sii import sii

BLOCK_S = 10


def bench_bands(sample_rate_hz: int, minutes: float) -> dict[str, float]:
    rng = np.random.default_rng(0)
    block = (0.1 * rng.standard_normal(BLOCK_S * sample_rate_hz)).astype(np.float32)
    n_blocks = int(minutes * 60 / BLOCK_S)
    analyzer = BandAnalyzer(sample_rate_hz)
    n_frames = 0
    start = time.perf_counter()
    for _ in range(n_blocks):
        n_frames += analyzer.process(block).shape[0]
    n_frames += analyzer.flush().shape[0]
    elapsed = time.perf_counter() - start
    audio_s = n_blocks * BLOCK_S
    return {
        "sample_rate_hz": sample_rate_hz,
        "audio_s": audio_s,
        "frames": n_frames,
        "elapsed_s": elapsed,
        "s_per_audio_hour": elapsed * 3600 / audio_s,
    }


def bench_sii() -> dict[str, float]:
    rng = np.random.default_rng(1)
    x = (0.1 * rng.standard_normal(60 * 48000)).astype(np.float32)
    n = (0.03 * rng.standard_normal(60 * 48000)).astype(np.float32)
    analyzers = (BandAnalyzer(48000), BandAnalyzer(48000))
    speech, noise = (np.concatenate([a.process(s), a.flush()]) for a, s in zip(analyzers, (x, n), strict=True))
    e, d = band_spectrum_level_db(speech, 100.0), band_spectrum_level_db(noise, 100.0)
    start = time.perf_counter()
    values = sii(e, d)
    elapsed = time.perf_counter() - start
    return {"frames": int(np.size(values)), "elapsed_s": elapsed, "us_per_frame": 1e6 * elapsed / np.size(values)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=60.0, help="audio duration per sample rate")
    parser.add_argument("--json", type=Path, default=None, help="also write the results here")
    args = parser.parse_args()
    rows = [bench_bands(fs, args.minutes) for fs in (48000, 44100, 16000)]
    print(f"{'rate Hz':>8} {'audio s':>8} {'frames':>9} {'time s':>8} {'s per audio hour':>17}")
    for r in rows:
        print(
            f"{r['sample_rate_hz']:>8} {r['audio_s']:>8.0f} {r['frames']:>9} "
            f"{r['elapsed_s']:>8.2f} {r['s_per_audio_hour']:>17.2f}"
        )
    s = bench_sii()
    print(f"SII on {s['frames']} frames: {s['elapsed_s']:.3f} s ({s['us_per_frame']:.1f} us per frame)")
    if args.json is not None:
        args.json.write_text(json.dumps({"bands": rows, "sii": s}, indent=2, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()
