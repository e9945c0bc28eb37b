"""Render and verify on synthesized programmes, where the true dialogue and background are known.

Run ``python benchmarks/bench_render.py [--json benchmarks/results/render.json] [--quick]``.

Programmes: :func:`planner.demo.synth.synth_programme` (fixture lines over pink noise,
music, babble and rain at several exact SNRs, stereo and 5.1), written as 24-bit WAV. Each
is analysed with the true speech spans as speech activity and the true cues as aligned
timings (so only masking, planning and rendering are measured), then planned with the
default :class:`~planner.settings.PlanSettings`:

- stems: scored from the stems, rendered from the stems to EBU R 128 with the processed
  stems written out, verified from them (exact). Figure: share of the events the plan
  called reachable whose every cue measures at or above the target (issue 6: >= 95 %);
- mix only: scored from the mix (estimators), the background reduced by
  :class:`~planner.render.separate.MixReducer` with the true stems as components, so the
  true background's attenuation over each event's full-gain span (error against the
  planned cut; issue 6: within 3 dB) and the true dialogue's SI-SDR (Le Roux et al. 2019;
  issue 6: >= 15 dB) are measured exactly; the mix is also rendered to EBU R 128;
- every output: integrated loudness by pyloudnorm (``filter_class="DeMan"``, BS.1770-4)
  against the target, true peak by 4x ``scipy.signal.resample_poly`` against the ceiling;
- limiter: one stereo programme rendered to -14 LUFS, loud enough that the limiter works;
- speed: one longer stereo programme rendered from stems and from the mix (EBU R 128,
  both passes, files in and out), seconds per programme hour, wall clock and CPU time of
  this process (targets: 12 s from stems, 20 s from a stereo mix).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import tempfile
import time
from pathlib import Path

import numpy as np
import pyloudnorm
import soundfile as sf
from scipy.signal import resample_poly

from planner.analysis.loudness import LoudnessMeter
from planner.analysis.masking import score_cues
from planner.demo.synth import SynthProgramme, synth_programme, write_programme
from planner.io.audio import iter_programme, open_programme
from planner.model import (
    SCHEMA_VERSION,
    Alignment,
    Analysis,
    AudioInfo,
    CueTiming,
    MappingSegment,
    SpeechActivity,
    SubtitleTrack,
)
from planner.planning.scenes import make_plan
from planner.render.envelope import GainEnvelope
from planner.render.renderer import STEM_NAMES, render
from planner.render.separate import MixReducer
from planner.render.verify import verify
from planner.settings import AnalysisSettings, PlanSettings, RenderSettings

FRAME_S = 0.01
BACKGROUNDS = ("pink", "music", "babble", "rain")
SNRS_DB = (0.0, 3.0, 6.0)
LAYOUTS = ("stereo", "5.1")


def truth_activity(prog: SynthProgramme) -> SpeechActivity:
    n = int(np.ceil(prog.duration_s / FRAME_S))
    mask = np.zeros(n, dtype=bool)
    for a, b in prog.speech_truth:
        mask[int(round(a / FRAME_S)) : int(round(b / FRAME_S))] = True
    return SpeechActivity(frame_s=FRAME_S, probability=mask.astype(np.float32), is_speech=mask, backend="fast", source="truth")


def analyse(prog: SynthProgramme, paths: dict[str, Path], kind: str) -> Analysis:
    """Analysis with true timings and activity, scored from the stems or the mix."""
    programme = (
        open_programme(dialogue=paths["dialogue"], background=paths["background"]) if kind == "stems" else open_programme(mix=paths["mix"])
    )
    timings = tuple(
        CueTiming(index=c.index, aligned_start_s=c.start_s, aligned_end_s=c.end_s, onset_error_ms=0.0,
                  offset_error_ms=0.0, speech_s=round(s[1] - s[0], 6), cps=10.0)
        for c, s in zip(prog.cues, prog.speech_truth)
    )  # fmt: skip
    activity = truth_activity(prog)
    settings = AnalysisSettings(vad="fast")
    scores = score_cues(iter_programme(programme), info=programme.info, kind=programme.kind, timings=timings,
                        activity=activity, settings=settings)  # fmt: skip
    meter = LoudnessMeter(prog.sample_rate_hz, prog.layout)
    for blk in iter_programme(programme):
        meter.feed(blk.mix)
    info = programme.info
    return Analysis(
        schema=SCHEMA_VERSION, settings=settings.to_dict(), inputs=(),
        audio=AudioInfo(sample_rate_hz=info.sample_rate_hz, n_channels=info.n_channels, n_frames=info.n_frames,
                        layout=info.layout, format=info.format, subtype=info.subtype, bit_depth=info.bit_depth),
        subtitles=SubtitleTrack(format="srt", encoding="utf-8", bom=False, cues=prog.cues),
        loudness=meter.summary(), activity=activity,
        alignment=Alignment(segments=(MappingSegment(0.0, prog.duration_s, 1.0, 0.0),), confidence=1.0, rate_name="1"),
        timings=timings, uncovered=(), scores=scores,
    )  # fmt: skip


def headroom(prog: SynthProgramme, peak_dbfs: float = -1.0) -> SynthProgramme:
    """Scale dialogue and background together so the mix peaks at most at ``peak_dbfs`` (24-bit files must not clip)."""
    peak = float(np.max(np.abs(prog.mix)))
    limit = 10.0 ** (peak_dbfs / 20.0)
    if peak <= limit:
        return prog
    g = np.float32(limit / peak)
    return dataclasses.replace(prog, dialogue=prog.dialogue * g, background=prog.background * g)


def lufs(x: np.ndarray, fs: int) -> float:
    y = x[:, [0, 1, 2, 4, 5]] if x.shape[1] == 6 else x
    return float(pyloudnorm.Meter(fs, filter_class="DeMan").integrated_loudness(y.astype(np.float64)))


def true_peak_dbtp(x: np.ndarray) -> float:
    return float(20.0 * np.log10(np.max(np.abs(resample_poly(x.astype(np.float64), 4, 1, axis=0)))))


def si_sdr_db(reference: np.ndarray, estimate: np.ndarray) -> float:
    s, e = reference.astype(np.float64).ravel(), estimate.astype(np.float64).ravel()
    target = (e @ s) / (s @ s) * s
    return float(10.0 * np.log10((target @ target) / np.sum((e - target) ** 2)))


def output_checks(path: Path, fs: int, target_lufs: float) -> dict[str, float]:
    y = sf.read(str(path), dtype="float32", always_2d=True)[0]
    return {"loudness_error_lu": lufs(y, fs) - target_lufs, "true_peak_dbtp": true_peak_dbtp(y)}


def stems_case(prog: SynthProgramme, paths: dict[str, Path], work: Path) -> dict[str, object]:
    plan = make_plan(analyse(prog, paths, "stems"), PlanSettings())
    row: dict[str, object] = {"events": len(plan.events), "reachable": sum(e.reachable for e in plan.events)}
    if not plan.events:
        return row
    stems = open_programme(dialogue=paths["dialogue"], background=paths["background"])
    rep = render(plan, stems, work / "stems_out.wav", RenderSettings(), stems_out=work / "stems")
    processed = open_programme(dialogue=work / "stems" / STEM_NAMES[0], background=work / "stems" / STEM_NAMES[1])
    ver = verify(plan, open_programme(mix=work / "stems_out.wav"), processed_stems=processed, level_gain_db=rep.gain_applied_db)
    gaps = [r.measured_after - r.predicted_after for r in ver.rows if r.measured_after is not None and r.predicted_after is not None]
    row |= {
        "reachable_reached": ver.n_reachable_events_reached,
        "cues": ver.n_cues,
        "cues_reached": ver.n_cues_reached,
        "max_abs_measured_minus_predicted": float(np.max(np.abs(gaps))) if gaps else None,
        **output_checks(work / "stems_out.wav", prog.sample_rate_hz, -23.0),
    }
    return row


def mix_case(prog: SynthProgramme, paths: dict[str, Path], work: Path) -> dict[str, object]:
    plan = make_plan(analyse(prog, paths, "mix"), PlanSettings())
    row: dict[str, object] = {"events": len(plan.events)}
    cut_events = [e for e in plan.events if e.background_gain_db < 0.0]
    if not cut_events:
        return row
    fs = prog.sample_rate_hz
    reducer = MixReducer(GainEnvelope(plan.events, fs, "background"), GainEnvelope(plan.events, fs, "dialogue"),
                         layout=prog.layout, activity=plan.analysis.activity)  # fmt: skip
    mix, parts = prog.mix, np.stack([prog.dialogue, prog.background])
    comps = [reducer.process(mix[a : a + 65536], parts[:, a : a + 65536])[1] for a in range(0, mix.shape[0], 65536)]
    comp = np.concatenate([*comps, reducer.flush(2)[1]], axis=1)
    errors, sdrs = [], []
    for ev in cut_events:
        a, b = int(round(ev.start_s * fs)), int(round(ev.end_s * fs))
        bg_in = float(np.sum(prog.background[a:b].astype(np.float64) ** 2))
        bg_out = float(np.sum(comp[1, a:b].astype(np.float64) ** 2))
        errors.append(10.0 * np.log10(bg_out / bg_in) - ev.background_gain_db)
        sdrs.append(si_sdr_db(prog.dialogue[a:b], comp[0, a:b]))
    render(plan, open_programme(mix=paths["mix"]), work / "mix_out.wav", RenderSettings())
    row |= {
        "cut_events": len(cut_events),
        "planned_cut_db": [e.background_gain_db for e in cut_events],
        "attenuation_error_db": errors,
        "dialogue_si_sdr_db": sdrs,
        **output_checks(work / "mix_out.wav", fs, -23.0),
    }
    return row


def limited(work: Path) -> dict[str, float]:
    """A render loud enough (-14 LUFS) that the true-peak limiter must work."""
    prog = headroom(synth_programme(background="music", snr_db=3.0, n_lines=6, seed=5, layout="stereo"))
    paths = write_programme(prog, work, stems=True, subtitles=())
    plan = make_plan(analyse(prog, paths, "stems"), PlanSettings())
    stems = open_programme(dialogue=paths["dialogue"], background=paths["background"])
    rep = render(plan, stems, work / "limited.wav", RenderSettings(loudness="-14"))
    return {"limiter_max_reduction_db": rep.limiter_max_reduction_db, **output_checks(work / "limited.wav", prog.sample_rate_hz, -14.0)}


def speed(work: Path, n_lines: int) -> dict[str, float]:
    prog = synth_programme(background="pink", snr_db=3.0, n_lines=n_lines, seed=99, layout="stereo")
    paths = write_programme(prog, work, stems=True, subtitles=())
    out: dict[str, float] = {"duration_s": prog.duration_s}
    for kind in ("stems", "mix"):
        plan = make_plan(analyse(prog, paths, kind), PlanSettings())
        programme = (
            open_programme(dialogue=paths["dialogue"], background=paths["background"]) if kind == "stems" else open_programme(mix=paths["mix"])
        )
        t0, c0 = time.perf_counter(), time.process_time()
        render(plan, programme, work / f"speed_{kind}.wav", RenderSettings())
        out[f"{kind}_s_per_hour"] = (time.perf_counter() - t0) / prog.duration_s * 3600.0
        out[f"{kind}_cpu_s_per_hour"] = (time.process_time() - c0) / prog.duration_s * 3600.0
        out[f"{kind}_events"] = len(plan.events)
        out[f"{kind}_event_share"] = sum(e.end_s - e.start_s for e in plan.events) / prog.duration_s
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", type=Path, default=Path(__file__).parent / "results" / "render.json")
    parser.add_argument("--quick", action="store_true", help="one SNR and fewer lines (a smoke run)")
    args = parser.parse_args()
    snrs = SNRS_DB[:1] if args.quick else SNRS_DB
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for layout in LAYOUTS:
            for background in BACKGROUNDS:
                for snr in snrs:
                    work = Path(tmp) / f"{layout}-{background}-{snr:g}"
                    work.mkdir()
                    prog = headroom(synth_programme(background=background, snr_db=snr, n_lines=4 if args.quick else 8,  # type: ignore[arg-type]
                                           seed=int(snr) + 10 * BACKGROUNDS.index(background), layout=layout))  # type: ignore[arg-type]  # fmt: skip
                    paths = write_programme(prog, work, stems=True, subtitles=())
                    rows.append({"layout": layout, "background": background, "snr_db": snr,
                                 "stems": stems_case(prog, paths, work), "mix": mix_case(prog, paths, work)})  # fmt: skip
                    print_row(rows[-1])
        lim_dir = Path(tmp) / "limited"
        lim_dir.mkdir()
        lim = limited(lim_dir)
        sp = speed(Path(tmp), 20 if args.quick else 120)
    summary = summarise(rows)
    summary["speed"] = sp
    summary["limited_render"] = lim
    print_summary(summary)
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps({"summary": summary, "programmes": rows}, indent=2, sort_keys=True) + "\n", encoding="utf-8")


def print_row(r: dict) -> None:  # type: ignore[type-arg]
    s, m = r["stems"], r["mix"]
    stems = f"{s.get('reachable_reached', 0)}/{s['reachable']} reachable reached" if s["events"] else "no events"
    if m.get("cut_events"):
        mix = (f"cut err {min(m['attenuation_error_db']):+5.1f}..{max(m['attenuation_error_db']):+5.1f} dB, "
               f"SI-SDR min {min(m['dialogue_si_sdr_db']):5.1f} dB")  # fmt: skip
    else:
        mix = "no cuts"
    print(f"{r['layout']:6s} {r['background']:6s} {r['snr_db']:4.0f} dB | stems: {stems:22s} | mix: {mix}")


def summarise(rows: list[dict]) -> dict:  # type: ignore[type-arg]
    reach = sum(r["stems"]["reachable"] for r in rows)
    reached = sum(r["stems"].get("reachable_reached", 0) for r in rows)
    errs = [e for r in rows for e in r["mix"].get("attenuation_error_db", [])]
    sdrs = [e for r in rows for e in r["mix"].get("dialogue_si_sdr_db", [])]
    outs = [r[k] for r in rows for k in ("stems", "mix") if "loudness_error_lu" in r[k]]
    by_snr = {}
    for snr in sorted({r["snr_db"] for r in rows}):
        e = [x for r in rows if r["snr_db"] == snr for x in r["mix"].get("attenuation_error_db", [])]
        d = [x for r in rows if r["snr_db"] == snr for x in r["mix"].get("dialogue_si_sdr_db", [])]
        by_snr[f"{snr:g}"] = {
            "mix_cut_events": len(e),
            "mix_within_3db_share": float(np.mean(np.abs(e) <= 3.0)) if e else None,
            "mix_si_sdr_at_least_15db_share": float(np.mean(np.array(d) >= 15.0)) if d else None,
            "mix_median_si_sdr_db": float(np.median(d)) if d else None,
        }
    return {
        "mix_by_snr_db": by_snr,
        "stems_reachable_events": reach,
        "stems_reachable_reached": reached,
        "stems_reached_share": reached / reach if reach else None,
        "mix_cut_events": len(errs),
        "mix_within_3db_share": float(np.mean(np.abs(errs) <= 3.0)) if errs else None,
        "mix_attenuation_error_db": {"min": min(errs), "median": float(np.median(errs)), "max": max(errs)} if errs else None,
        "mix_si_sdr_at_least_15db_share": float(np.mean(np.array(sdrs) >= 15.0)) if sdrs else None,
        "mix_dialogue_si_sdr_db": {"min": min(sdrs), "median": float(np.median(sdrs))} if sdrs else None,
        "max_abs_loudness_error_lu": max(abs(o["loudness_error_lu"]) for o in outs),
        "max_true_peak_dbtp": max(o["true_peak_dbtp"] for o in outs),
        "outputs_checked": len(outs),
    }


def print_summary(s: dict) -> None:  # type: ignore[type-arg]
    sp = s["speed"]
    lines = [
        ("stems: reachable events reaching target", f"{s['stems_reachable_reached']}/{s['stems_reachable_events']}"
         f" ({100 * (s['stems_reached_share'] or 0):.1f} %)", ">= 95 %"),
        ("mix: cut within 3 dB of plan", f"{100 * (s['mix_within_3db_share'] or 0):.1f} % of {s['mix_cut_events']}"
         f" (error {s['mix_attenuation_error_db']['min']:+.1f}..{s['mix_attenuation_error_db']['max']:+.1f} dB)", "all"),
        ("mix: dialogue SI-SDR >= 15 dB", f"{100 * (s['mix_si_sdr_at_least_15db_share'] or 0):.1f} % (min "
         f"{s['mix_dialogue_si_sdr_db']['min']:.1f}, median {s['mix_dialogue_si_sdr_db']['median']:.1f} dB)", "all"),
        ("max |loudness error| (pyloudnorm DeMan)", f"{s['max_abs_loudness_error_lu']:.3f} LU over {s['outputs_checked']} outputs", "<= 0.1 LU"),
        ("max true peak (4x resample_poly)", f"{s['max_true_peak_dbtp']:+.2f} dBTP", "<= -1.0 dBTP"),
        ("-14 LUFS render (limiter working)", f"loudness error {s['limited_render']['loudness_error_lu']:+.3f} LU, true peak "
         f"{s['limited_render']['true_peak_dbtp']:+.2f} dBTP, limiter up to {s['limited_render']['limiter_max_reduction_db']:.1f} dB",
         "0.1 LU, -1 dBTP"),
        (f"speed, stems ({sp['duration_s']:.0f} s programme)", f"{sp['stems_s_per_hour']:.1f} s per programme hour "
         f"(CPU {sp['stems_cpu_s_per_hour']:.1f} s; events on {100 * sp['stems_event_share']:.0f} %)", "12 s"),
        ("speed, stereo mix", f"{sp['mix_s_per_hour']:.1f} s per programme hour "
         f"(CPU {sp['mix_cpu_s_per_hour']:.1f} s; events on {100 * sp['mix_event_share']:.0f} %)", "20 s"),
    ]  # fmt: skip
    print()
    for name, value, target in lines:
        print(f"{name:44s} {value:52s} target {target}")
    print()
    for snr, v in s["mix_by_snr_db"].items():
        if v["mix_cut_events"]:
            print(f"mix at {snr:>2s} dB SNR: {v['mix_cut_events']:3d} cut events, within 3 dB {100 * v['mix_within_3db_share']:5.1f} %, "
                  f"SI-SDR >= 15 dB {100 * v['mix_si_sdr_at_least_15db_share']:5.1f} % (median {v['mix_median_si_sdr_db']:.1f} dB)")


if __name__ == "__main__":
    main()
