"""Accuracy of the mix-only cue scores against the stems scores of the same programmes.

Run ``python benchmarks/bench_masking.py [--layouts stereo,5.1,mono] [--seeds 2] [--lines 10]``.
For each layout, background (stationary pink noise, tonal music bed, crowd babble) and SNR
(+20, +10, +5, 0, -5 dB, the synthesizer's definition on the detection signal), it builds
synthesized programmes (``planner.demo.synth``) and scores every cue twice: from the stems
(the truth, since the dialogue and background are known) and from the mix alone. The
background rides by a per-line gain drawn from -6, -3, 0, +3, +6 dB (changed in the middle
of the gaps, 100 ms ramps), so the cues of one programme differ in SNR and a rank
correlation means something. The speech track is the true one, so only the estimators are
measured.

Reported per condition (cues of all seeds pooled, Spearman per programme then averaged):
median |mix - stems| of ``sbld_lu`` (dB), Spearman rank correlation of ``sii``, agreement of
the ``masked`` verdict and of the full verdict, median |mix - stems| of ``sii``, mean
confidence, and whether the targets hold (median error <= 3 dB stationary / 5 dB music and
babble, Spearman >= 0.8, masked agreement >= 85 %). Writes benchmarks/results/masking.json.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np
from scipy.stats import spearmanr

from planner.analysis.masking import score_cues
from planner.demo.synth import synth_programme
from planner.io.audio import ProgrammeBlock
from planner.io.files import atomic_write_text
from planner.model import AudioInfo, CueScore, CueTiming, SpeechActivity
from planner.settings import AnalysisSettings

BACKGROUNDS = {"pink": "stationary noise", "music": "tonal music bed", "babble": "crowd babble"}
SNRS_DB = (20.0, 10.0, 5.0, 0.0, -5.0)
RIDES_DB = (-6.0, -3.0, 0.0, 3.0, 6.0)
TARGET_ERROR_DB = {"pink": 3.0, "music": 5.0, "babble": 5.0}
TARGET_SPEARMAN = 0.8
TARGET_MASKED_AGREEMENT = 0.85
BLOCK = 1 << 16
RESULTS = Path(__file__).resolve().parent / "results" / "masking.json"


def programme(background: str, snr_db: float, layout: str, seed: int, n_lines: int):
    """A synthesized programme with per-line background rides, its true speech track and cue spans."""
    prog = synth_programme(background=background, snr_db=snr_db, n_lines=n_lines, seed=seed, layout=layout)  # type: ignore[arg-type]
    fs, n = prog.sample_rate_hz, prog.n_samples
    rides = np.random.default_rng([seed, 7]).choice(RIDES_DB, size=n_lines)
    spans = prog.speech_truth
    cuts = [0.0] + [(spans[i][1] + spans[i + 1][0]) / 2 for i in range(len(spans) - 1)] + [n / fs]
    t = np.arange(n) / fs
    env_db = np.zeros(n)
    for i, g in enumerate(rides):
        env_db[(t >= cuts[i]) & (t < cuts[i + 1])] = g
    ramp = int(0.1 * fs)
    env_db = np.convolve(np.pad(env_db, (ramp // 2, ramp - ramp // 2 - 1), mode="edge"), np.ones(ramp) / ramp, mode="valid")
    background_audio = (prog.background * 10 ** (env_db[:, None] / 20)).astype(np.float32)
    mask = np.zeros(-(-n // (fs // 100)), dtype=bool)
    for a, b in spans:
        mask[round(a / 0.01) : round(b / 0.01)] = True
    activity = SpeechActivity(0.01, mask.astype(np.float32), mask, backend="truth", source="dialogue stem")
    timings = [CueTiming(c.index, c.start_s, c.end_s, 0.0, 0.0, c.duration_s, 12.0) for c in prog.cues]
    info = AudioInfo(fs, prog.dialogue.shape[1], n, layout, "WAV", "PCM_24", 24)  # type: ignore[arg-type]
    return prog.dialogue, background_audio, activity, timings, info


def score(dialogue, background, activity, timings, info, kind: str) -> tuple[tuple[CueScore, ...], float]:
    """Scores of one programme and the compute time, seconds."""
    blocks = (
        ProgrammeBlock(s, dialogue[s : s + BLOCK] + background[s : s + BLOCK],
                       dialogue[s : s + BLOCK] if kind == "stems" else None,
                       background[s : s + BLOCK] if kind == "stems" else None)
        for s in range(0, dialogue.shape[0], BLOCK)
    )  # fmt: skip
    start = time.perf_counter()
    scores = score_cues(blocks, info=info, kind=kind, timings=timings, activity=activity, settings=AnalysisSettings())  # type: ignore[arg-type]
    return scores, time.perf_counter() - start


def condition(layout: str, background: str, snr_db: float, seeds: int, n_lines: int) -> dict[str, object]:
    """Every metric of one layout, background and SNR."""
    errors, sii_errors, masked, full, confidence, rhos = [], [], [], [], [], []
    audio_s = stems_s = mix_s = 0.0
    for seed in range(seeds):
        parts = programme(background, snr_db, layout, seed, n_lines)
        stems, t_stems = score(*parts, kind="stems")
        mix, t_mix = score(*parts, kind="mix")
        audio_s += parts[4].duration_s
        stems_s, mix_s = stems_s + t_stems, mix_s + t_mix
        pairs = [(s, m) for s, m in zip(stems, mix) if s.sii is not None and m.sii is not None]
        errors += [abs(m.sbld_lu - s.sbld_lu) for s, m in pairs if m.sbld_lu is not None and s.sbld_lu is not None]
        sii_errors += [abs(m.sii - s.sii) for s, m in pairs]  # type: ignore[operator]
        masked += [(s.verdict == "masked") == (m.verdict == "masked") for s, m in pairs]
        full += [s.verdict == m.verdict for s, m in pairs]
        confidence += [m.confidence for _, m in pairs]
        rho = spearmanr([s.sii for s, _ in pairs], [m.sii for _, m in pairs]).statistic
        rhos.append(None if not np.isfinite(rho) else float(rho))
    finite = [r for r in rhos if r is not None]
    row: dict[str, object] = {
        "layout": layout,
        "background": background,
        "snr_db": snr_db,
        "cues": len(masked),
        "median_abs_sbld_error_db": float(np.median(errors)),
        "spearman_sii": float(np.mean(finite)) if finite else None,
        "spearman_sii_min": float(np.min(finite)) if finite else None,
        "masked_agreement": float(np.mean(masked)),
        "verdict_agreement": float(np.mean(full)),
        "median_abs_sii_error": float(np.median(sii_errors)),
        "mean_confidence": float(np.mean(confidence)),
        "audio_s": audio_s,
        "stems_compute_s": stems_s,
        "mix_compute_s": mix_s,
    }
    row["meets_targets"] = bool(
        row["median_abs_sbld_error_db"] <= TARGET_ERROR_DB[background]  # type: ignore[operator]
        and (row["spearman_sii"] is not None and row["spearman_sii"] >= TARGET_SPEARMAN)  # type: ignore[operator]
        and row["masked_agreement"] >= TARGET_MASKED_AGREEMENT  # type: ignore[operator]
    )
    return row


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--layouts", default="stereo,5.1,mono", help="comma-separated layouts")
    parser.add_argument("--seeds", type=int, default=2, help="programmes per condition")
    parser.add_argument("--lines", type=int, default=10, help="lines (cues) per programme")
    parser.add_argument("--json", type=Path, default=RESULTS, help="where to write the results")
    args = parser.parse_args()
    rows = []
    header = (
        f"{'layout':>6} {'background':>17} {'SNR':>4} {'cues':>4} {'|dSBLD| dB':>10} {'Spearman':>8} "
        f"{'(min)':>6} {'masked %':>8} {'verdict %':>9} {'|dSII|':>7} {'conf':>5} {'ok':>3}"
    )
    print(header)
    for layout in args.layouts.split(","):
        for background in BACKGROUNDS:
            for snr in SNRS_DB:
                r = condition(layout, background, snr, args.seeds, args.lines)
                rows.append(r)
                rho = "-" if r["spearman_sii"] is None else f"{r['spearman_sii']:.2f}"
                rho_min = "-" if r["spearman_sii_min"] is None else f"{r['spearman_sii_min']:.2f}"
                print(
                    f"{layout:>6} {BACKGROUNDS[background]:>17} {snr:>+4.0f} {r['cues']:>4} "
                    f"{r['median_abs_sbld_error_db']:>10.2f} {rho:>8} {rho_min:>6} "
                    f"{100 * r['masked_agreement']:>8.0f} {100 * r['verdict_agreement']:>9.0f} "
                    f"{r['median_abs_sii_error']:>7.3f} {r['mean_confidence']:>5.2f} {'yes' if r['meets_targets'] else 'NO':>3}",
                    flush=True,
                )
    audio = sum(r["audio_s"] for r in rows)  # type: ignore[misc]
    stems_t = sum(r["stems_compute_s"] for r in rows)  # type: ignore[misc]
    mix_t = sum(r["mix_compute_s"] for r in rows)  # type: ignore[misc]
    print(f"scored {audio:.0f} s of audio twice: stems {stems_t:.1f} s, mix {mix_t:.1f} s of compute")
    out = {
        "method": __doc__.split("\n\n")[1].replace("\n", " "),
        "targets": {"median_abs_sbld_error_db": TARGET_ERROR_DB, "spearman_sii": TARGET_SPEARMAN,
                    "masked_agreement": TARGET_MASKED_AGREEMENT},
        "settings": {"seeds": args.seeds, "lines": args.lines, "rides_db": list(RIDES_DB)},
        "rows": rows,
    }  # fmt: skip
    args.json.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(args.json, json.dumps(out, indent=2, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()
