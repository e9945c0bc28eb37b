"""Verify: a rendered plan re-scores to what the same cut does when applied as a constant gain.

Ground truth is constructed here: the synthesized programme's background stem scaled by the
event's cut as one constant gain (no envelope, no render, no files), scored by the
project's cue scorer. The render must reach the same scores, since the event holds its full
gain over every speech frame of the cue (the ramps lie outside the speech).
"""

from __future__ import annotations

import csv
import importlib
from pathlib import Path

import numpy as np
import pytest
from render_fixtures import OnDisk, event, make_plan, write

from planner.analysis.masking import score_cues
from planner.analysis.framepower import SignalKPower
from planner.demo.synth import synth_programme
from planner.io.audio import ProgrammeBlock, open_programme
from planner.model import CueScore, Plan
from planner.render.renderer import STEM_NAMES, render
from planner.render.verify import VERIFY_COLUMNS, verify, verifying_stems, write_verify_csv
from planner.settings import AnalysisSettings, RenderSettings

CUT_DB = -9.0
LINES = (0, 2)  # the lines that get an event
# the module (planner.render exports a function of the same name)
verify_module = importlib.import_module("planner.render.verify")


def score_arrays(plan: Plan, dialogue: np.ndarray, background: np.ndarray) -> dict[int, CueScore]:
    """Score stems held in memory (blocks of 1 s) with the plan's timings, activity and settings."""
    step = 48000
    blocks = (
        ProgrammeBlock(a, dialogue[a : a + step] + background[a : a + step], dialogue[a : a + step], background[a : a + step])
        for a in range(0, dialogue.shape[0], step)
    )
    info = plan.analysis.audio
    scores = score_cues(blocks, info=info, kind="stems", timings=plan.analysis.timings, activity=plan.analysis.activity,
                        settings=AnalysisSettings.from_dict(plan.analysis.settings))  # fmt: skip
    return {s.index: s for s in scores}


@pytest.fixture(scope="module")
def case(tmp_path_factory: pytest.TempPathFactory) -> tuple[OnDisk, Plan, dict[int, CueScore]]:
    """A masked programme on disk, its plan (scores before from the original stems), and the constant-gain truth."""
    prog = synth_programme(background="pink", snr_db=0.0, n_lines=3, seed=11, layout="stereo", gap_s=(1.0, 1.5))
    disk = write(prog, tmp_path_factory.mktemp("verify"))
    draft = make_plan(prog, [])
    before = score_arrays(draft, prog.dialogue, prog.background)
    events = [
        event(prog.cues[i].index, *prog.speech_truth[i], cut_db=CUT_DB, score_before=before[prog.cues[i].index].sii or 0.0)
        for i in LINES
    ]
    plan = make_plan(prog, events, scores=[before[c.index] for c in prog.cues])
    scale = np.float32(10.0 ** (CUT_DB / 20.0))
    truth = score_arrays(plan, prog.dialogue, prog.background * scale)
    return disk, plan, truth


def test_stems_render_rescores_to_the_constant_gain_truth(case: tuple[OnDisk, Plan, dict[int, CueScore]], tmp_path: Path) -> None:
    disk, plan, truth = case
    stems = open_programme(dialogue=disk.dialogue, background=disk.background)
    render(plan, stems, tmp_path / "out.wav", RenderSettings(loudness="off"), stems_out=tmp_path / "stems")
    processed = open_programme(dialogue=tmp_path / "stems" / STEM_NAMES[0], background=tmp_path / "stems" / STEM_NAMES[1])
    report = verify(plan, open_programme(mix=tmp_path / "out.wav"), processed_stems=processed)
    assert report.method == "stems"
    assert [r.cue_index for r in report.rows] == [plan.analysis.timings[i].index for i in LINES]
    for row in report.rows:
        expected = truth[row.cue_index].sii
        assert expected is not None and row.measured_after is not None and row.score_before is not None
        assert row.measured_after == pytest.approx(expected, abs=0.005)  # 24-bit files vs float32 in memory
        assert row.measured_after > row.score_before + 0.1  # the cut really helped
        # The plan's prediction (re-scored analysed spectra) agrees with the measurement.
        assert row.predicted_after == pytest.approx(expected, abs=0.01)
        assert row.reached is (row.measured_after >= row.target - 0.005)
    assert report.n_cues == len(LINES) and report.n_cues_unscored == 0
    assert report.n_cues_reached == sum(r.reached is True for r in report.rows)


def test_mix_scoring_of_the_render_is_conservative(case: tuple[OnDisk, Plan, dict[int, CueScore]], tmp_path: Path) -> None:
    """From the rendered mix alone the scores are estimates that never claim more than the truth."""
    disk, plan, truth = case
    render(plan, open_programme(mix=disk.mix), tmp_path / "out.wav", RenderSettings(loudness="off"))
    report = verify(plan, open_programme(mix=tmp_path / "out.wav"))
    assert report.method == "mix" and report.notes
    measured = [r.measured_after for r in report.rows]
    assert all(r.method == "mix" for r in report.rows) and None not in measured
    # truth: the exact stems score of the same cut applied as a constant gain
    assert all(m <= truth[r.cue_index].sii + 0.02 for m, r in zip(measured, report.rows))  # type: ignore[operator]
    assert max(m - r.score_before for m, r in zip(measured, report.rows)) > 0.1  # type: ignore[operator]


def test_level_gain_is_taken_back_out_of_the_listening_level(case: tuple[OnDisk, Plan, dict[int, CueScore]], tmp_path: Path) -> None:
    disk, plan, _ = case
    stems = open_programme(dialogue=disk.dialogue, background=disk.background)
    results = []
    for loudness in ("off", "-30"):
        out = tmp_path / loudness
        rep = render(plan, stems, out / "out.wav", RenderSettings(loudness=loudness), stems_out=out)
        processed = open_programme(dialogue=out / STEM_NAMES[0], background=out / STEM_NAMES[1])
        results.append(verify(plan, open_programme(mix=out / "out.wav"), processed_stems=processed, level_gain_db=rep.gain_applied_db))
    assert abs(results[1].level_gain_db) > 3.0  # the normalisation really moved the level
    for plain, normalised in zip(results[0].rows, results[1].rows):
        assert normalised.measured_after == pytest.approx(plain.measured_after, abs=0.002)


def test_verify_csv_has_one_row_per_planned_cue(case: tuple[OnDisk, Plan, dict[int, CueScore]], tmp_path: Path) -> None:
    disk, plan, _ = case
    render(plan, open_programme(dialogue=disk.dialogue, background=disk.background), tmp_path / "out.wav",
           RenderSettings(loudness="off"), stems_out=tmp_path)  # fmt: skip
    processed = open_programme(dialogue=tmp_path / STEM_NAMES[0], background=tmp_path / STEM_NAMES[1])
    report = verify(plan, open_programme(mix=tmp_path / "out.wav"), processed_stems=processed)
    write_verify_csv(report, tmp_path / "verify.csv")
    lines = (tmp_path / "verify.csv").read_text(encoding="utf-8").splitlines()
    assert lines[0].startswith(f"# {report.n_cues_reached} of {len(LINES)} planned cues reached the target")
    rows = list(csv.DictReader(lines[1:]))
    assert tuple(rows[0]) == VERIFY_COLUMNS
    assert [int(r["cue"]) for r in rows] == [r.cue_index for r in report.rows]
    for got, row in zip(rows, report.rows):
        assert float(got["measured_after"]) == pytest.approx(row.measured_after, abs=5e-4)
        assert got["reached_target"] == ("yes" if row.reached else "no")


@pytest.mark.parametrize("beside", [False, True], ids=["after", "second-process"])
def test_stems_scored_beside_the_render_match_verifying_the_written_stems(
    case: tuple[OnDisk, Plan, dict[int, CueScore]], tmp_path: Path, monkeypatch: pytest.MonkeyPatch, beside: bool
) -> None:
    """Reference: verify() reading the processed stems the render wrote (24-bit files)."""
    disk, plan, truth = case
    monkeypatch.setattr(verify_module, "use_workers", lambda info: beside)
    programme = open_programme(dialogue=disk.dialogue, background=disk.background)
    with verifying_stems(plan, programme) as report_for:
        rep = render(plan, programme, tmp_path / "out.wav", RenderSettings(loudness="-30"), stems_out=tmp_path)
        streamed = report_for(rep.gain_applied_db)
    assert abs(rep.gain_applied_db) > 3.0  # the normalisation really moved the level
    processed = open_programme(dialogue=tmp_path / STEM_NAMES[0], background=tmp_path / STEM_NAMES[1])
    files = verify(plan, open_programme(mix=tmp_path / "out.wav"), processed_stems=processed, level_gain_db=rep.gain_applied_db)
    assert streamed.method == files.method == "stems" and streamed.level_gain_db == rep.gain_applied_db
    assert [r.cue_index for r in streamed.rows] == [r.cue_index for r in files.rows]
    for got, ref in zip(streamed.rows, files.rows):
        assert got.measured_after is not None and ref.measured_after is not None
        # the same samples, unscaled and unrounded against normalised and rounded to 24 bits
        assert got.measured_after == pytest.approx(ref.measured_after, abs=0.002)
        assert got.measured_after == pytest.approx(truth[got.cue_index].sii, abs=0.005)  # the constant-gain truth


def test_mix_verify_with_the_output_meters_k_powers(case: tuple[OnDisk, Plan, dict[int, CueScore]], tmp_path: Path) -> None:
    """Reference: the same verify K-weighting the rendered file itself."""
    disk, plan, _ = case
    programme = open_programme(mix=disk.mix)
    levels = SignalKPower(programme.info)
    rep = render(plan, programme, tmp_path / "out.wav", RenderSettings(loudness="-30"), k_frames=levels)
    rendered = open_programme(mix=tmp_path / "out.wav")
    given = verify(plan, rendered, level_gain_db=rep.gain_applied_db, k_power=levels.result())
    alone = verify(plan, rendered, level_gain_db=rep.gain_applied_db)
    for got, ref in zip(given.rows, alone.rows, strict=True):
        assert got.measured_after is not None and ref.measured_after is not None
        # the meter filtered the float32 samples, the verify reads their 24-bit rounding
        assert got.measured_after == pytest.approx(ref.measured_after, abs=1e-3)
