"""The command line end to end on short synthesized programmes: outputs, exit codes, nothing written on bad input."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
import soundfile as sf
from typer.testing import CliRunner

from planner.cli import app
from planner.demo.synth import distort_cues, synth_programme, write_programme

runner = CliRunner()


def _run(*args: str | Path) -> tuple[int, str]:
    result = runner.invoke(app, [str(a) for a in args], env={"COLUMNS": "100"})
    return result.exit_code, result.output


@pytest.fixture(scope="module")
def episode(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """A 6-line programme over music at +3 dB, subtitles 1.5 s early (ground truth built here)."""
    folder = tmp_path_factory.mktemp("episode")
    prog = synth_programme(background="music", snr_db=3.0, n_lines=6, seed=4)
    subs = distort_cues(prog.cues, offset_s=1.5)
    return write_programme(prog, folder, stems=True, subtitles=subs)


@pytest.fixture(scope="module")
def clean_episode(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """8 lines over pink noise at +15 dB, subtitles 1.5 s early (ground truth built here)."""
    folder = tmp_path_factory.mktemp("clean")
    prog = synth_programme(background="pink", snr_db=15.0, n_lines=8, seed=4)
    return write_programme(prog, folder, stems=False, subtitles=distort_cues(prog.cues, offset_s=1.5))


def _csv_rows(path: Path) -> list[dict[str, str]]:
    lines = [ln for ln in path.read_text(encoding="utf-8").splitlines() if not ln.startswith("#")]
    return list(csv.DictReader(lines))


def test_inspect_json_reports_layout_duration_and_cues(episode: dict[str, Path]) -> None:
    code, out = _run("inspect", episode["mix"], episode["subtitles"], "--json", "--quiet")
    assert code == 0, out
    data = json.loads(out)
    info = sf.info(str(episode["mix"]))  # reference: the file's own header via soundfile
    assert data["audio"]["layout"] == "stereo"
    assert data["audio"]["duration_s"] == pytest.approx(info.duration)
    assert data["subtitles"]["cue_count"] == 6


def test_align_finds_the_constructed_offset(clean_episode: dict[str, Path], tmp_path: Path) -> None:
    out_dir = tmp_path / "qc"
    code, out = _run("align", clean_episode["mix"], clean_episode["subtitles"], "--out", out_dir, "--vad", "fast", "--quiet")
    assert code == 0, out
    alignment = json.loads((out_dir / "alignment.json").read_text())["alignment"]
    # Ground truth: distort_cues moved every cue 1.5 s early (t_subs = t_audio - 1.5).
    assert alignment["segments"][0]["offset_s"] == pytest.approx(1.5, abs=0.05)
    assert (out_dir / "retimed.srt").is_file()
    assert len(_csv_rows(out_dir / "cues.csv")) == 8
    code, out = _run("report", out_dir, "--for", "editor", "--plain")
    assert code == 0, out
    assert "alignment only" in out


def test_analyse_stems_then_replan_without_audio(episode: dict[str, Path], tmp_path: Path) -> None:
    out_dir = tmp_path / "mix"
    code, out = _run(
        "analyse", episode["subtitles"], "--dialogue", episode["dialogue"], "--background", episode["background"],
        "--out", out_dir, "--vad", "fast", "--quiet",
    )  # fmt: skip
    assert code == 0, out
    for name in ("analysis.json", "plan.json", "cues.csv", "events.csv", "plan.otio", "plan.edl", "retimed.srt"):
        assert (out_dir / name).is_file(), name
    rows = _csv_rows(out_dir / "cues.csv")
    assert {r["method"] for r in rows} == {"stems"}
    first = (out_dir / "plan.json").read_bytes()
    code, out = _run("plan", out_dir, "--strength", "gentle")
    assert code == 0, out
    gentle = json.loads((out_dir / "plan.json").read_text())
    assert gentle["settings"]["strength"] == 0.25
    # Gentle allows at most 0.25 x the 12 dB maximum cut (docs/methods.md, "Strength").
    assert all(e["background_gain_db"] >= -3.0 - 1e-9 for e in gentle["events"])
    code, _ = _run("plan", out_dir)
    assert code == 0
    assert (out_dir / "plan.json").read_bytes() == first  # same settings, byte-identical plan


def test_missing_file_exits_2_and_writes_nothing(tmp_path: Path, episode: dict[str, Path]) -> None:
    out_dir = tmp_path / "never"
    code, out = _run("analyse", tmp_path / "absent.wav", episode["subtitles"], "--out", out_dir, "--quiet")
    assert code == 2
    assert "absent.wav" in out and "Traceback" not in out
    assert not out_dir.exists()


def test_bad_subtitles_exit_2_naming_the_line(tmp_path: Path, episode: dict[str, Path]) -> None:
    bad = tmp_path / "bad.srt"
    bad.write_text("1\n00:00:01,000 --> 00:00:00,500\nBackwards.\n", encoding="utf-8")
    out_dir = tmp_path / "never"
    code, out = _run("align", episode["mix"], bad, "--out", out_dir, "--quiet")
    assert code == 2
    assert "line 2" in out
    assert not out_dir.exists()


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--fps", "26"], "fps"),
        (["--vad", "loud"], "vad"),
        (["--hearing", "age-33"], "age-33"),
    ],
    ids=["fps", "vad", "hearing"],
)
def test_bad_option_values_exit_2(tmp_path: Path, episode: dict[str, Path], args: list[str], needle: str) -> None:
    code, out = _run("analyse", episode["mix"], episode["subtitles"], "--out", tmp_path / "o", *args, "--quiet")
    assert code == 2
    assert needle in out
    assert not (tmp_path / "o").exists()


def test_stems_need_both_files(tmp_path: Path, episode: dict[str, Path]) -> None:
    code, out = _run("analyse", episode["subtitles"], "--dialogue", episode["dialogue"], "--out", tmp_path / "o")
    assert code == 2
    assert "--background" in out


def test_plan_refuses_a_hand_edited_positive_cut(episode: dict[str, Path], tmp_path: Path) -> None:
    out_dir = tmp_path / "edit"
    code, _ = _run("analyse", episode["mix"], episode["subtitles"], "--out", out_dir, "--vad", "fast", "--quiet")
    assert code == 0
    plan = json.loads((out_dir / "plan.json").read_text())
    if not plan["events"]:
        pytest.skip("no event to edit in this programme")
    plan["events"][0]["background_gain_db"] = 4.0
    (out_dir / "plan.json").write_text(json.dumps(plan))
    code, out = _run("report", out_dir, "--plain")
    assert code == 2
    assert plan["events"][0]["event_id"] in out and "background_gain_db" in out


def test_plan_refuses_an_analysis_without_its_inputs(episode: dict[str, Path], tmp_path: Path) -> None:
    out_dir = tmp_path / "no-inputs"
    code, _ = _run("analyse", episode["mix"], episode["subtitles"], "--out", out_dir, "--vad", "fast", "--quiet")
    assert code == 0
    analysis = json.loads((out_dir / "analysis.json").read_text())
    analysis["inputs"] = [f for f in analysis["inputs"] if f["role"] != "subtitles"]
    (out_dir / "analysis.json").write_text(json.dumps(analysis))
    before = (out_dir / "plan.json").read_bytes()
    code, out = _run("plan", out_dir, "--strength", "gentle")
    assert code == 2
    assert "subtitle" in out and "re-run cueplan analyse" in out
    assert (out_dir / "plan.json").read_bytes() == before  # nothing written


def test_analyse_with_an_audiogram_scores_for_it(episode: dict[str, Path], tmp_path: Path) -> None:
    # Ground truth: a flat 40 dB HL audiogram raises every band threshold by 40 dB, so the
    # SII for it can only be lower than for normal hearing (ANSI S3.5 clause 4.5, D = max(Z, X + T')).
    audiogram = tmp_path / "flat40.csv"
    audiogram.write_text("frequency_hz,threshold_db_hl\n250,40\n1000,40\n4000,40\n8000,40\n", encoding="utf-8")
    out_dir = tmp_path / "hoh"
    code, out = _run(
        "analyse", episode["mix"], episode["subtitles"], "--out", out_dir, "--vad", "fast", "--audiogram", audiogram, "--quiet"
    )  # fmt: skip
    assert code == 0, out
    analysis = json.loads((out_dir / "analysis.json").read_text())
    assert analysis["settings"]["hearing"] == "audiogram"
    assert analysis["settings"]["audiogram_db_hl"] == [40.0] * 18
    scored = [s for s in analysis["scores"] if s["sii"] is not None]
    assert scored and all(s["sii"] <= s["sii_by_profile"]["normal"] for s in scored)


def test_bad_audiogram_exits_2(episode: dict[str, Path], tmp_path: Path) -> None:
    audiogram = tmp_path / "bad.csv"
    audiogram.write_text("frequency_hz,threshold_db_hl\n1000,40\n500,30\n", encoding="utf-8")
    code, out = _run("analyse", episode["mix"], episode["subtitles"], "--out", tmp_path / "o", "--audiogram", audiogram)
    assert code == 2
    assert not (tmp_path / "o").exists()


@pytest.fixture(scope="module")
def analysed_stems(episode: dict[str, Path], tmp_path_factory: pytest.TempPathFactory) -> Path:
    """An analysis folder of the stems episode (cueplan analyse --vad fast)."""
    out_dir = tmp_path_factory.mktemp("analysed") / "stems"
    code, out = _run(
        "analyse", episode["subtitles"], "--dialogue", episode["dialogue"], "--background", episode["background"],
        "--out", out_dir, "--vad", "fast", "--quiet",
    )  # fmt: skip
    assert code == 0, out
    return out_dir


def test_render_then_verify_then_report(analysed_stems: Path, tmp_path: Path) -> None:
    import pyloudnorm

    rendered = tmp_path / "clearer.wav"
    stems = tmp_path / "stems"
    code, out = _run("render", analysed_stems, "--out", rendered, "--stems-out", stems, "--quiet")
    assert code == 0, out
    for path in (rendered, stems / "dialogue.wav", stems / "background.wav", analysed_stems / "render.json",
                 analysed_stems / "verify.csv", analysed_stems / "report.html"):  # fmt: skip
        assert path.is_file(), path
    audio, rate = sf.read(str(rendered))
    # Reference: pyloudnorm's BS.1770-4 meter; EBU R 128 asks -23 LUFS (the default preset),
    # and issue 6 asks the output within 0.1 LU of the target.
    assert pyloudnorm.Meter(rate).integrated_loudness(audio) == pytest.approx(-23.0, abs=0.1)
    events = json.loads((analysed_stems / "plan.json").read_text())["events"]
    planned_cues = {c for e in events for c in e["cue_indices"]}
    assert planned_cues, "the +3 dB music episode is built to need moves"
    assert {int(r["cue"]) for r in _csv_rows(analysed_stems / "verify.csv")} == planned_cues
    code, out = _run("verify", analysed_stems, rendered)
    assert code == 0, out
    code, out = _run("report", analysed_stems, "--for", "mixer", "--plain")
    assert code == 0, out


def test_render_refuses_to_write_over_an_input(analysed_stems: Path, episode: dict[str, Path]) -> None:
    before = episode["dialogue"].read_bytes()
    code, out = _run("render", analysed_stems, "--out", episode["dialogue"], "--quiet")
    assert code == 2, out
    assert "Traceback" not in out
    assert episode["dialogue"].read_bytes() == before


def test_a_full_disk_is_one_clear_line_and_leaves_no_output(
    analysed_stems: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Ground truth: the test makes every audio write fail as a full disk does (ENOSPC).
    import errno
    import os

    from planner.io import audio_writer

    def full(self: object, block: object) -> None:
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(tmp_path))

    monkeypatch.setattr(audio_writer.AudioWriter, "write", full)
    rendered = tmp_path / "clearer.wav"
    code, out = _run("render", analysed_stems, "--out", rendered, "--quiet")
    assert code == 1, out
    assert "the disk is full" in out and "Free space and run again" in out
    assert "Traceback" not in out
    assert not rendered.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary left behind


def test_render_refuses_audio_that_is_not_the_plans(episode: dict[str, Path], tmp_path: Path) -> None:
    import shutil

    mix = tmp_path / "mix.wav"
    shutil.copy(episode["mix"], mix)
    out_dir = tmp_path / "a"
    code, out = _run("analyse", mix, episode["subtitles"], "--out", out_dir, "--vad", "fast", "--quiet")
    assert code == 0, out
    audio, rate = sf.read(str(mix), dtype="float32")
    sf.write(str(mix), 0.5 * audio, rate, subtype="PCM_24")  # the file changed after the analysis
    code, out = _run("render", out_dir, "--out", tmp_path / "r.wav", "--quiet")
    assert code == 2, out
    assert "does not match" in out
    assert not (tmp_path / "r.wav").exists() and not (out_dir / "render.json").exists()
