"""Archive triage: discovery, the catalogue's transactions, resuming after SIGKILL, pool vs cluster, failures.

Ground truth throughout is what the tests construct: the file names they create, the cues
they write into each subtitle file, the speech-to-background ratio they synthesize each
episode at, the failures they plant (corrupt, truncated, missing, a folder in place of a
file), and the process they kill.
"""

from __future__ import annotations

import csv
import io
import os
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

from planner.batch import triage as triage_module
from planner.batch.catalogue import Catalogue
from planner.batch.cli import triage_app
from planner.batch.sources import EpisodeJob, discover
from planner.batch.summary import EpisodeSummary, CatalogueCue
from planner.batch.triage import TriageSettings, run_triage, triage_episode, triage_report
from planner.demo.synth import synth_programme, write_programme
from planner.errors import InputError
from planner.settings import AnalysisSettings, PlanSettings

REPO = Path(__file__).resolve().parent.parent
FAST = TriageSettings(analysis=AnalysisSettings(vad="fast"))
#: Columns that hold times of day or durations of work, which differ between any two runs.
TIMING = {"started_at", "finished_at", "elapsed_s"}

#: Invented episodes: (name, background, SNR dB, lines, seed). "clear" is synthesized 25 dB
#: over its background, "buried" 5 dB under babble (ground truth for the ranking).
EPISODES = {
    "harbour_lights_e01_clear": ("pink", 25.0, 3, 1),
    "harbour_lights_e02_buried": ("babble", -5.0, 3, 2),
    "harbour_lights_e03": ("rain", 10.0, 3, 3),
    "harbour_lights_e04": ("music", 15.0, 3, 4),
    "harbour_lights_e05": ("pink", 5.0, 3, 5),
}


@pytest.fixture(scope="module")
def library(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[Path, Path, int, list[str]]]:
    """Each invented episode written once: (mix path, subtitle path, cue count, cue texts)."""
    root = tmp_path_factory.mktemp("library")
    out = {}
    for name, (background, snr_db, n_lines, seed) in EPISODES.items():
        prog = synth_programme(background=background, snr_db=snr_db, n_lines=n_lines, seed=seed)
        folder = root / name
        folder.mkdir()
        paths = write_programme(prog, folder, stems=False)
        out[name] = (paths["mix"], paths["subtitles"], len(prog.cues), [c.text for c in prog.cues])
    return out


def make_folder(folder: Path, library: dict[str, tuple[Path, Path, int, list[str]]], names: list[str]) -> Path:
    """A source folder holding NAME.wav + NAME.srt for each name."""
    folder.mkdir(parents=True, exist_ok=True)
    for name in names:
        mix, subs, _, _ = library[name]
        shutil.copyfile(mix, folder / f"{name}.wav")
        shutil.copyfile(subs, folder / f"{name}.srt")
    return folder


def dump(catalog: Path) -> dict[str, list[tuple[object, ...]]]:
    """Every table's rows, sorted, without the timing columns: read with plain sqlite3."""
    db = sqlite3.connect(f"file:{catalog}?mode=ro", uri=True)
    out = {}
    for (table,) in db.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name"):
        names = [r[1] for r in db.execute(f"PRAGMA table_info({table})") if r[1] not in TIMING]
        out[table] = sorted(db.execute(f"SELECT {', '.join(names)} FROM {table}").fetchall(), key=repr)
    db.close()
    return out


def cue_counts(catalog: Path) -> dict[str, int]:
    db = sqlite3.connect(f"file:{catalog}?mode=ro", uri=True)
    counts = dict(db.execute("SELECT episode_id, COUNT(*) FROM cues GROUP BY episode_id").fetchall())
    db.close()
    return counts


def rows(catalog: Path) -> dict[str, dict[str, object]]:
    with Catalogue(catalog, create=False) as cat:
        return {r["episode_id"]: r for r in cat.episodes()}


# --------------------------------------------------------------------------- discovery


def test_folder_pairs_by_name_and_lists_the_rest(tmp_path: Path) -> None:
    # Ground truth: the file names created here and the pairing rule in planner/batch/sources.py.
    names = [
        "e01.wav", "e01.srt",
        "e02.dialogue.wav", "e02.background.wav", "e02.vtt",
        "e03.wav",
        "e04.srt",
        "e05.dialogue.wav", "e05.srt",
        "e06.wav", "e06.dialogue.wav", "e06.background.wav", "e06.srt",
        "series_b/e01.flac", "series_b/e01.srt",
        "notes.txt", ".hidden.wav",
    ]  # fmt: skip
    for name in names:
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_bytes(b"")
    found = discover(tmp_path)
    jobs = {j.episode_id: j for j in found.jobs}
    assert sorted(jobs) == ["e01", "e02", "e06", "series_b/e01"]
    assert jobs["e01"].mix == tmp_path.resolve() / "e01.wav" and jobs["e01"].dialogue is None
    assert jobs["e02"].mix is None and jobs["e02"].background == tmp_path.resolve() / "e02.background.wav"
    assert jobs["e06"].mix is None and jobs["e06"].dialogue == tmp_path.resolve() / "e06.dialogue.wav"
    assert jobs["series_b/e01"].subtitles == tmp_path.resolve() / "series_b/e01.srt"
    left = {u.path: u.reason for u in found.unpaired}
    assert sorted(left) == ["e03.wav", "e04.srt", "e05.dialogue.wav", "e05.srt", "e06.wav"]
    assert "no subtitle file" in left["e03.wav"]
    assert "no audio" in left["e04.srt"]
    assert "only one stem" in left["e05.srt"]
    assert "not used" in left["e06.wav"]


def test_manifest_paths_ids_and_frame_rate(tmp_path: Path) -> None:
    # Ground truth: the manifest written here (relative paths resolve against its folder).
    (tmp_path / "m.csv").write_text(
        "audio,subtitles,dialogue,background,fps,episode\n"
        "a/e01.wav,a/e01.srt,,,23.976,\n"
        ",b/e02.srt,b/e02.dialogue.wav,b/e02.background.wav,,named\n",
        encoding="utf-8",
    )
    jobs = {j.episode_id: j for j in discover(tmp_path / "m.csv").jobs}
    assert sorted(jobs) == ["a/e01", "named"]
    assert jobs["a/e01"].fps == "23.976" and jobs["a/e01"].mix == tmp_path.resolve() / "a/e01.wav"
    assert jobs["named"].dialogue == tmp_path.resolve() / "b/e02.dialogue.wav" and jobs["named"].fps is None


BAD_MANIFESTS = {
    "empty": ("", "manifest is empty"),
    "no-subtitles-column": ("audio\nx.wav\n", "no 'subtitles' column"),
    "unknown-column": ("audio,subtitles,speed\nx.wav,x.srt,1\n", "unknown manifest column 'speed'"),
    "no-rows": ("audio,subtitles\n", "lists no episodes"),
    "duplicate": ("audio,subtitles\nx.wav,x.srt\nx.wav,y.srt\n", "row 3: episode 'x' is also on row 2"),
    "mix-and-stems": ("audio,subtitles,dialogue,background\nx.wav,x.srt,d.wav,b.wav\n", "row 2: both audio and stems"),
    "one-stem": ("audio,subtitles,dialogue\n,x.srt,d.wav\n", "row 2: no audio"),
    "bad-fps": ("audio,subtitles,fps\nx.wav,x.srt,26\n", "row 2: fps='26' must be one of"),
    "short-row": ("audio,subtitles\nx.wav\n", "row 2 has 1 fields, the header 2"),
}


@pytest.mark.parametrize("text,message", BAD_MANIFESTS.values(), ids=BAD_MANIFESTS.keys())
def test_bad_manifest_exits_2_with_its_message(tmp_path: Path, text: str, message: str) -> None:
    manifest = tmp_path / "manifest.csv"
    manifest.write_text(text, encoding="utf-8")
    result = CliRunner().invoke(triage_app, [str(manifest), "--catalog", str(tmp_path / "c.sqlite"), "--quiet"])
    assert result.exit_code == 2, result.output
    assert message in " ".join(result.output.split())
    assert not (tmp_path / "c.sqlite").exists()  # nothing is written for a bad manifest
    with pytest.raises(InputError, match="row|manifest"):
        discover(manifest)


@pytest.mark.parametrize("name", ["missing", "list.txt"], ids=["missing", "not-csv"])
def test_bad_source_exits_2(tmp_path: Path, name: str) -> None:
    if name.endswith(".txt"):
        (tmp_path / name).write_text("e01.wav\n", encoding="utf-8")
    result = CliRunner().invoke(triage_app, [str(tmp_path / name), "--catalog", str(tmp_path / "c.sqlite")])
    assert result.exit_code == 2
    assert "triage source" in result.output


# --------------------------------------------------------------------------- catalogue


def _summary() -> EpisodeSummary:
    return EpisodeSummary(
        duration_s=10.0, n_cues=2, speech_s=5.0, coverage=1.0, alignment_offset_s=0.0, alignment_ratio=1.0,
        alignment_rate_name="1", alignment_confidence=1.0, alignment_breaks=0, n_clear=2, n_at_risk=0, n_masked=0,
        n_no_score=0, integrated_lufs=-23.0, loudness_range_lu=3.0, true_peak_dbtp=-3.0, speech_lufs=-23.0, n_events=0,
        score=1.0, confidence=1.0, action="ok", verdict_line="ok: every scored line is clear", worst_scenes=(), warnings=(),
    )  # fmt: skip


def _cue(index: int) -> CatalogueCue:
    return CatalogueCue(
        cue_index=index, cue_id=str(index), text="Lower the nets.", start_s=1.0, end_s=2.0, aligned_start_s=1.0,
        aligned_end_s=2.0, onset_error_ms=0.0, flags=("late-in",), method="mix", verdict="clear", speech_s=1.0, sii=0.9,
        sbld_lu=20.0, stoi=None, confidence=0.9, reason="", event_id=None, background_gain_db=None, dialogue_gain_db=None,
    )  # fmt: skip


def test_finishing_an_episode_is_one_transaction(tmp_path: Path) -> None:
    # Ground truth: a planted failure in the middle of the cue inserts (a repeated cue index
    # violates the primary key): the whole finish must roll back, leaving the episode running
    # with no cue rows; a clean finish then writes all of them.
    path = tmp_path / "c.sqlite"
    with Catalogue(path) as cat:
        cat.mark_running("e01", paths={"mix": "e01.wav", "subtitles": "e01.srt"}, fps="25", fingerprint="f", settings_json="{}")
        with pytest.raises(sqlite3.IntegrityError):
            cat.record_done("e01", _summary(), [_cue(1), _cue(1)], sha256={}, elapsed_s=1.0)
        assert cat.episode("e01")["status"] == "running"  # type: ignore[index]
        assert cat.cues("e01") == []
        cat.record_done("e01", _summary(), [_cue(1), _cue(2)], sha256={"mix": "ab"}, elapsed_s=1.0)
        assert [c["cue_index"] for c in cat.cues("e01")] == [1, 2]
        assert cat.cues("e01")[0]["flags"] == ("late-in",)
    journal = sqlite3.connect(path).execute("PRAGMA journal_mode").fetchone()[0]
    assert journal == "wal"


def test_an_unexpected_exception_becomes_a_failed_result(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    # Ground truth: the exception planted in place of the analysis.
    def broken(*args: object, **kwargs: object) -> None:
        raise ZeroDivisionError("planted")

    monkeypatch.setattr(triage_module, "analyse", broken)
    (tmp_path / "e.srt").write_text("1\n00:00:01,000 --> 00:00:02,000\nAhoy.\n", encoding="utf-8")
    result = triage_episode(EpisodeJob("e", subtitles=tmp_path / "e.srt", mix=tmp_path / "e.wav"), FAST)
    assert result.status == "failed" and result.message == "ZeroDivisionError: planted"
    assert result.sha256["mix"] is None and result.sha256["subtitles"] is not None


# --------------------------------------------------------------------------- batch runs


def _wait_for_done(catalog: Path, proc: subprocess.Popen[bytes], timeout_s: float = 120.0) -> int:
    """Poll the catalogue (read-only) until it has a done row; return how many."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        assert proc.poll() is None, proc.stderr.read().decode() if proc.stderr else "the batch ended early"
        if catalog.exists():
            try:
                db = sqlite3.connect(f"file:{catalog}?mode=ro", uri=True)
                n = db.execute("SELECT COUNT(*) FROM episodes WHERE status = 'done'").fetchone()[0]
                db.close()
                if n:
                    return int(n)
            except sqlite3.OperationalError:
                pass  # tables not created yet
        time.sleep(0.02)
    raise AssertionError("no episode finished in time")


def test_sigkill_mid_batch_then_rerun_resumes(tmp_path: Path, library: dict) -> None:  # type: ignore[type-arg]
    # Ground truth: the process group this test starts and kills with SIGKILL once the
    # catalogue holds a done episode, and the cue count written into each subtitle file.
    names = sorted(EPISODES)
    source = make_folder(tmp_path / "archive", library, names)
    catalog = tmp_path / "catalog.sqlite"
    code = "import sys; from planner.batch.cli import triage_app; triage_app(prog_name='cueplan triage')"
    argv = [sys.executable, "-c", code, str(source), "--catalog", str(catalog), "--workers", "1", "--vad", "fast", "--quiet"]
    proc = subprocess.Popen(argv, cwd=tmp_path, start_new_session=True, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        _wait_for_done(catalog, proc)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the batch and its worker processes, all at once
        proc.communicate()
    before = rows(catalog)
    finished = {k for k, r in before.items() if r["status"] == "done"}
    assert finished and len(finished) < len(names)  # killed in the middle
    # No partial episode: cue rows exist exactly for the done episodes, complete.
    assert cue_counts(catalog) == {k: library[k][2] for k in finished}

    summary = run_triage(source, catalog, workers=1, settings=FAST)
    after = rows(catalog)
    assert sorted(after) == names and all(r["status"] == "done" for r in after.values())
    assert set(summary.skipped) == finished and set(summary.done) == set(names) - finished
    for k in finished:  # not recomputed: same attempt, same finishing time
        assert after[k]["attempts"] == 1 and after[k]["finished_at"] == before[k]["finished_at"]
    for k, r in before.items():
        if r["status"] == "running":  # the episode in flight when killed is redone
            assert after[k]["attempts"] == 2
    assert cue_counts(catalog) == {k: library[k][2] for k in names}


def test_local_pool_and_dask_cluster_give_identical_catalogues(tmp_path: Path, library: dict) -> None:  # type: ignore[type-arg]
    # Ground truth: the same files run twice, once per executor; and the synthesized SNR
    # (the episode made 5 dB under babble ranks before the one made 25 dB over pink noise).
    from distributed import LocalCluster

    names = ["harbour_lights_e01_clear", "harbour_lights_e02_buried", "harbour_lights_e03"]
    source = make_folder(tmp_path / "archive", library, names)
    local = run_triage(source, tmp_path / "local.sqlite", workers=1, settings=FAST)
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None) as cluster:
        remote = run_triage(source, tmp_path / "cluster.sqlite", cluster=cluster.scheduler_address, settings=FAST)
    assert local.done == remote.done == tuple(names) and not local.failed
    a, b = dump(tmp_path / "local.sqlite"), dump(tmp_path / "cluster.sqlite")
    assert a == b
    assert len(a["cues"]) == sum(library[k][2] for k in names)
    report = triage_report(tmp_path / "local.sqlite")
    order = [r.episode_id for r in report]
    assert order.index("harbour_lights_e02_buried") < order.index("harbour_lights_e01_clear")
    actions = {r.episode_id: r.action for r in report}
    assert actions["harbour_lights_e01_clear"] == "ok" and actions["harbour_lights_e02_buried"] != "ok"
    # The cue rows carry the texts written into the subtitle file, in order.
    with Catalogue(tmp_path / "local.sqlite", create=False) as cat:
        assert [c["text"] for c in cat.cues("harbour_lights_e03")] == library["harbour_lights_e03"][3]


def test_failures_become_rows_and_the_batch_goes_on(tmp_path: Path, library: dict) -> None:  # type: ignore[type-arg]
    # Ground truth: four planted failures: random bytes, a WAV cut inside its header, a
    # subtitle file that does not exist, and a folder named like an audio file (tests run as
    # root, so a chmod 000 file would still be readable).
    good = ["harbour_lights_e01_clear", "harbour_lights_e03"]
    source = make_folder(tmp_path / "archive", library, good)
    mix, subs, _, _ = library["harbour_lights_e04"]
    (source / "corrupt.wav").write_bytes(bytes(range(256)) * 64)
    (source / "truncated.wav").write_bytes(mix.read_bytes()[:30])
    (source / "folder.wav").mkdir()
    shutil.copyfile(mix, source / "nosubs.wav")
    for name in ("corrupt", "truncated", "folder"):
        shutil.copyfile(subs, source / f"{name}.srt")
    manifest = source / "manifest.csv"
    lines = ["audio,subtitles"] + [f"{n}.wav,{n}.srt" for n in [*good, "corrupt", "truncated", "folder", "nosubs"]]
    manifest.write_text("\n".join(lines) + "\n", encoding="utf-8")
    catalog = tmp_path / "c.sqlite"
    args = [str(manifest), "--catalog", str(catalog), "--workers", "2", "--vad", "fast", "--quiet"]
    result = CliRunner().invoke(triage_app, args)
    assert result.exit_code == 1, result.output
    got = rows(catalog)
    assert {k for k, r in got.items() if r["status"] == "done"} == set(good)
    expected = {
        "corrupt": r"corrupt\.wav: cannot read the audio header",
        "truncated": r"truncated\.wav: cannot read the audio header",
        "folder": r"folder\.wav: is not a file",
        "nosubs": r"nosubs\.srt: file not found",
    }
    for name, pattern in expected.items():
        assert got[name]["status"] == "failed" and re.search(pattern, str(got[name]["message"])), got[name]["message"]
    assert set(cue_counts(catalog)) == set(good)
    # The readable inputs of a failed episode keep their hash; the missing one has none.
    assert got["nosubs"]["mix_sha256"] is not None and got["nosubs"]["subtitles_sha256"] is None
    table = CliRunner().invoke(triage_app, ["report", "--catalog", str(catalog), "--csv"])
    assert table.exit_code == 0
    listed = list(csv.DictReader(io.StringIO(table.output)))
    assert [r["status"] for r in listed] == ["done", "done", "failed", "failed", "failed", "failed"]
    shown = CliRunner().invoke(triage_app, ["show", "corrupt", "--catalog", str(catalog)])
    assert shown.exit_code == 0 and "cannot read the audio header" in " ".join(shown.output.split())


def test_rerun_redoes_only_what_changed(tmp_path: Path, library: dict) -> None:  # type: ignore[type-arg]
    # Ground truth: the one subtitle file this test rewrites (a cue dropped) and the one
    # setting it changes.
    names = ["harbour_lights_e03", "harbour_lights_e05"]
    source = make_folder(tmp_path / "archive", library, names)
    catalog = tmp_path / "c.sqlite"
    first = run_triage(source, catalog, workers=2, settings=FAST)
    assert first.done == tuple(names)
    srt = source / "harbour_lights_e05.srt"
    srt.write_text(srt.read_text(encoding="utf-8").split("\n\n", 1)[1], encoding="utf-8")  # drop the first cue
    second = run_triage(source, catalog, workers=2, settings=FAST)
    assert second.skipped == ("harbour_lights_e03",) and second.done == ("harbour_lights_e05",)
    assert cue_counts(catalog)["harbour_lights_e05"] == library["harbour_lights_e05"][2] - 1
    changed = TriageSettings(analysis=AnalysisSettings(vad="fast"), plan=PlanSettings(target_sii=0.6))
    third = run_triage(source, catalog, workers=2, settings=changed)
    assert third.done == tuple(names) and not third.skipped
    forced = run_triage(source, catalog, workers=2, settings=changed, force=True)
    assert forced.done == tuple(names)
    assert {k: r["attempts"] for k, r in rows(catalog).items()} == {"harbour_lights_e03": 3, "harbour_lights_e05": 4}
