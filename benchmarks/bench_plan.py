"""What each strength step fixes and what it costs, and how fast a plan is made.

Run ``python benchmarks/bench_plan.py [--json benchmarks/results/plan.json] [--no-synth]``.

Two sets of analyses:

- ``synth``: the synthesized programmes of :mod:`planner.demo.synth` (fixture lines over
  pink noise, music, babble and rain at several exact SNRs), scored from their stems by
  :func:`planner.analysis.masking.score_cues` with the true speech spans as the speech
  activity and the true cues as aligned timings (so only masking and planning are measured);
- ``random``: a seeded analysis of 900 cues with normal-effort speech spectra (ANSI S3.5
  Table 3) shifted by a random level, backgrounds at a random per-band SNR and spectral tilt,
  scored with :func:`planner.analysis.sii.sii` and :func:`planner.analysis.verdicts.verdict`.

- ``demo``: the demo scenario (:mod:`planner.demo.scenario`), built into a temporary folder
  and scored the same way from its stems with its true speech spans and true cues; the table
  shows, for each designed scene, its SNR range, the rank of the plan's scene over it and the
  number of events inside it (the buried scene should rank first, the clear ones get none).

For each named strength step: cues flagged (at-risk or masked), cues fixed (predicted SII at
the target after their event's move, re-scored here from the cue spectra), the mean
background cut over flagged cues (0 where a cue gets no move) and over moved cues, and the
largest cut. Then the time to plan the 900 cues (events and scenes; best of 5 runs).
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np

from planner.analysis.masking import score_cues
from planner.analysis.sii import STANDARD_SPEECH_SPECTRA, sii
from planner.analysis.verdicts import verdict
from planner.demo.scenario import build_demo
from planner.demo.synth import BackgroundKind, synth_programme
from planner.io.audio import ProgrammeBlock, iter_programme, open_programme
from planner.model import (
    SCHEMA_VERSION,
    Alignment,
    Analysis,
    AudioInfo,
    Cue,
    CueScore,
    CueTiming,
    LoudnessSummary,
    MappingSegment,
    Plan,
    SpeechActivity,
    SubtitleTrack,
)
from planner.planning.gains import analysis_thresholds, plan_events
from planner.planning.scenes import make_plan
from planner.settings import STRENGTH_STEPS, AnalysisSettings, PlanSettings

FRAME_S = 0.01
BLOCK_FRAMES = 65536
SYNTH_BACKGROUNDS: tuple[BackgroundKind, ...] = ("pink", "music", "babble", "rain")
SYNTH_SNRS_DB = (-5.0, 0.0, 5.0, 10.0)


def _activity(spans: list[tuple[float, float]], duration_s: float) -> SpeechActivity:
    speech = np.zeros(int(np.ceil(duration_s / FRAME_S)), dtype=bool)
    for a, b in spans:
        speech[int(a / FRAME_S + 0.5) : int(b / FRAME_S + 0.5)] = True
    return SpeechActivity(FRAME_S, speech.astype(np.float32), speech, backend="truth", source="dialogue stem")


def _analysis(cues: list[Cue], timings: list[CueTiming], scores: tuple[CueScore, ...], activity: SpeechActivity,
              info: AudioInfo) -> Analysis:  # fmt: skip
    return Analysis(
        schema=SCHEMA_VERSION,
        settings=AnalysisSettings().to_dict(),
        inputs=(),
        audio=info,
        subtitles=SubtitleTrack(format="srt", encoding="utf-8", bom=False, cues=tuple(cues)),
        loudness=LoudnessSummary(-23.0, 8.0, -3.0, -3.5, -15.0, -18.0),
        activity=activity,
        alignment=Alignment((MappingSegment(0.0, info.duration_s, 1.0, 0.0),), 1.0, "1"),
        timings=tuple(timings),
        uncovered=(),
        scores=scores,
    )


def _timings(cues: list[Cue] | tuple[Cue, ...], activity: SpeechActivity) -> list[CueTiming]:
    out = []
    for c in cues:
        a, b = int(c.start_s / FRAME_S + 0.5), int(c.end_s / FRAME_S + 0.5)
        speech_s = float(activity.is_speech[a:b].sum()) * FRAME_S
        out.append(CueTiming(c.index, c.start_s, c.end_s, 0.0, 0.0, round(speech_s, 6), len(c.text) / c.duration_s))
    return out


def synth_analyses() -> list[Analysis]:
    """Analyses of the synthesized programmes, scored from their stems."""
    out = []
    for k, background in enumerate(SYNTH_BACKGROUNDS):
        for j, snr_db in enumerate(SYNTH_SNRS_DB):
            p = synth_programme(background=background, snr_db=snr_db, n_lines=8, seed=10 * k + j)
            info = AudioInfo(p.sample_rate_hz, p.dialogue.shape[1], p.n_samples, p.layout, "WAV", "FLOAT", 32)
            activity = _activity(list(p.speech_truth), p.duration_s)
            timings = _timings(p.cues, activity)
            blocks = (
                ProgrammeBlock(s, p.dialogue[s : s + BLOCK_FRAMES] + p.background[s : s + BLOCK_FRAMES],
                               p.dialogue[s : s + BLOCK_FRAMES], p.background[s : s + BLOCK_FRAMES])
                for s in range(0, p.n_samples, BLOCK_FRAMES)
            )  # fmt: skip
            scores = score_cues(blocks, info=info, kind="stems", timings=timings, activity=activity,
                                settings=AnalysisSettings())  # fmt: skip
            out.append(_analysis(list(p.cues), timings, scores, activity, info))
    return out


def demo_check() -> list[dict[str, object]]:
    """Plan the demo scenario from its stems; per designed scene: rank and events (module docstring)."""
    with tempfile.TemporaryDirectory() as tmp:
        files = build_demo(Path(tmp))
        truth = json.loads(files.truth.read_text(encoding="utf-8"))
        programme = open_programme(dialogue=files.dialogue, background=files.background)
        info = programme.info
        lines = truth["lines"]
        cues = [Cue(i + 1, str(i + 1), ln["true_cue_start_s"], ln["true_cue_end_s"], ln["text"]) for i, ln in enumerate(lines)]
        activity = _activity([(ln["speech_start_s"], ln["speech_end_s"]) for ln in lines], info.duration_s)
        timings = _timings(cues, activity)
        scores = score_cues(iter_programme(programme), info=info, kind="stems", timings=timings, activity=activity,
                            settings=AnalysisSettings())  # fmt: skip
    plan = make_plan(_analysis(cues, timings, scores, activity, info), PlanSettings())
    rows: list[dict[str, object]] = []
    for scene in truth["scenes"]:
        members = {i + 1 for i, ln in enumerate(lines) if ln["scene"] == scene["scene"]}
        ranks = sorted(s.rank for s in plan.scenes if members & set(s.cue_indices))
        events = [e for e in plan.events if members & set(e.cue_indices)]
        rows.append({"scene": scene["scene"], "name": scene["name"], "snr_db": [scene["snr_db_min"], scene["snr_db_max"]],
                     "plan_ranks": ranks, "events": len(events),
                     "worst_reason": next((s.reason for s in plan.scenes if s.rank == min(ranks, default=0)), "")})  # fmt: skip
    return rows


def random_analysis(n_cues: int = 900, seed: int = 0) -> Analysis:
    """A seeded analysis of ``n_cues`` cues (see module docstring)."""
    rng = np.random.default_rng(seed)
    normal = np.asarray(STANDARD_SPEECH_SPECTRA["normal"])
    lengths = rng.uniform(1.2, 4.5, n_cues)
    gaps = rng.uniform(0.2, 6.0, n_cues)
    starts = np.cumsum(gaps + np.concatenate([[0.0], lengths[:-1]]))
    snr = rng.uniform(-6.0, 14.0, n_cues)
    tilt = rng.uniform(-8.0, 8.0, n_cues)
    shift = rng.normal(0.0, 3.0, n_cues)
    e = normal[None, :] + shift[:, None]
    nb = e - snr[:, None] + tilt[:, None] * np.linspace(-1.0, 1.0, 18)[None, :]
    values = np.asarray(sii(e, nb))
    cues, spans, scores = [], [], []
    for i in range(n_cues):
        start, end = float(starts[i]), float(starts[i] + lengths[i])
        cues.append(Cue(i + 1, str(i + 1), round(start, 3), round(end, 3), "A line of dialogue."))
        spans.append((start + 0.15, end - 0.15))
        v = float(values[i])
        scores.append(CueScore(
            index=i + 1, method="stems", speech_s=round(lengths[i] - 0.3, 6), speech_db=-23.0 + shift[i],
            background_db=-23.0 + shift[i] - snr[i], sbld_lu=float(snr[i]), sii=v, sii_short=v, stoi=None,
            confidence=1.0, verdict=verdict(v, float(snr[i])), speech_spectrum_db=tuple(map(float, e[i])),
            background_spectrum_db=tuple(map(float, nb[i])), sii_by_profile={"normal": v},
        ))  # fmt: skip
    duration_s = float(starts[-1] + lengths[-1] + 5.0)
    activity = _activity(spans, duration_s)
    info = AudioInfo(48000, 2, int(duration_s * 48000), "stereo", "WAV", "PCM_24", 24)
    return _analysis(cues, _timings(cues, activity), tuple(scores), activity, info)


def strength_table(analyses: list[Analysis]) -> list[dict[str, float | str | int]]:
    """Cues flagged and fixed, and the cut, per strength step, summed over ``analyses``."""
    rows: list[dict[str, float | str | int]] = []
    for name, strength in STRENGTH_STEPS.items():
        settings = PlanSettings(strength=strength)
        flagged = fixed = 0
        cuts: list[float] = []
        for analysis in analyses:
            events = plan_events(analysis, settings)
            gain = {i: (e.background_gain_db, e.dialogue_gain_db) for e in events for i in e.cue_indices}
            thresholds = analysis_thresholds(analysis.settings)
            for s in analysis.scores:
                if s.verdict not in ("at-risk", "masked") or s.sii is None or s.sii >= settings.target_sii:
                    continue
                flagged += 1
                bg, lift = gain.get(s.index, (0.0, 0.0))
                after = sii(np.asarray(s.speech_spectrum_db) + lift, np.asarray(s.background_spectrum_db) + bg, thresholds)
                fixed += int(after >= settings.target_sii)
                cuts.append(-bg)
        moved = [c for c in cuts if c > 0]
        rows.append({
            "step": name, "strength": strength, "flagged": flagged, "fixed": fixed,
            "fixed_pct": 100.0 * fixed / flagged if flagged else 0.0,
            "mean_cut_db": float(np.mean(cuts)) if cuts else 0.0,
            "mean_cut_moved_db": float(np.mean(moved)) if moved else 0.0,
            "max_cut_db": max(cuts, default=0.0),
        })  # fmt: skip
    return rows


def time_plan(analysis: Analysis, repeats: int = 5) -> dict[str, float | int]:
    """Best-of-``repeats`` wall time of events alone and of the whole plan, seconds."""
    settings = PlanSettings()
    best_events, best_plan = np.inf, np.inf
    plan: Plan | None = None
    for _ in range(repeats):
        t0 = time.perf_counter()
        plan_events(analysis, settings)
        t1 = time.perf_counter()
        plan = make_plan(analysis, settings)
        t2 = time.perf_counter()
        best_events, best_plan = min(best_events, t1 - t0), min(best_plan, t2 - t1)
    assert plan is not None
    return {"cues": len(analysis.scores), "events": len(plan.events), "scenes": len(plan.scenes),
            "plan_events_s": best_events, "make_plan_s": best_plan}  # fmt: skip


def _print_table(title: str, rows: list[dict[str, float | str | int]]) -> None:
    print(title)
    print(f"{'step':<10}{'strength':>9}{'flagged':>9}{'fixed':>7}{'fixed %':>9}{'mean cut':>10}{'moved cut':>11}{'max cut':>9}")
    for r in rows:
        print(f"{r['step']:<10}{r['strength']:>9.2f}{r['flagged']:>9}{r['fixed']:>7}{r['fixed_pct']:>9.1f}"
              f"{r['mean_cut_db']:>10.2f}{r['mean_cut_moved_db']:>11.2f}{r['max_cut_db']:>9.1f}")  # fmt: skip
    print()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", type=Path, default=Path(__file__).parent / "results" / "plan.json")
    parser.add_argument("--no-synth", action="store_true", help="skip the synthesized programmes and the demo")
    args = parser.parse_args()
    result: dict[str, object] = {}
    if not args.no_synth:
        t0 = time.perf_counter()
        synth = synth_analyses()
        result["synth"] = strength_table(synth)
        result["synth_cues"] = sum(len(a.scores) for a in synth)
        result["synth_scoring_s"] = time.perf_counter() - t0
        _print_table(f"synthesized programmes ({result['synth_cues']} cues, stems; cut in dB)", result["synth"])  # type: ignore[arg-type]
        result["demo"] = demo = demo_check()
        print("demo scenario (scored from stems): designed scene, SNR range, plan scene ranks, events")
        for r in demo:
            snr = r["snr_db"]
            print(f"  {r['scene']} {r['name']:<16} {snr[0]:>5.1f}..{snr[1]:<5.1f} dB  ranks {r['plan_ranks']}  "  # type: ignore[index]
                  f"events {r['events']}  ({r['worst_reason']})")  # fmt: skip
        print()
    random = random_analysis()
    result["random"] = strength_table([random])
    _print_table("seeded random analysis (900 cues; cut in dB)", result["random"])  # type: ignore[arg-type]
    result["timing"] = timing = time_plan(random)
    print(f"plan {timing['cues']} cues: events {timing['plan_events_s']:.3f} s, "
          f"events + scenes {timing['make_plan_s']:.3f} s ({timing['events']} events, {timing['scenes']} scenes)")  # fmt: skip
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps(result, indent=2, sort_keys=True) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
