"""Both passes on two cores (planner.io.parallel) against the single-process passes.

The reference is the single-process code path of planner.pipeline (the slow, obviously
correct version): with worker processes the analysis must be byte-identical. Worker errors
must reach the caller with their message.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

import planner.io.parallel as parallel
from planner import folder, pipeline
from planner.demo.synth import synth_programme, write_programme
from planner.errors import AudioInputError, CueplanError
from planner.io.audio import open_programme
from planner.settings import AnalysisSettings


@pytest.fixture(scope="module")
def programme_files(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    prog = synth_programme(background="music", snr_db=5.0, n_lines=4, seed=11, layout="stereo")
    return write_programme(prog, tmp_path_factory.mktemp("parallel"))


def _analysis_json(files: dict[str, Path], kind: str, vad: str, monkeypatch: pytest.MonkeyPatch, *, workers: bool) -> str:
    # Ground truth: the same analysis without worker processes (the threshold decides the path).
    monkeypatch.setattr(parallel, "PARALLEL_MIN_S", 0.0 if workers else float("inf"))
    monkeypatch.setattr(parallel.os, "sched_getaffinity", lambda pid: {0, 1}, raising=False)
    roles = {"mix": files["mix"]} if kind == "mix" else {"dialogue": files["dialogue"], "background": files["background"]}
    inputs = folder.Inputs(subtitles=files["subtitles"], **roles)
    return folder.analysis_json(pipeline.analyse(inputs, files["subtitles"].parent, AnalysisSettings(vad=vad)))


@pytest.mark.parametrize(("kind", "vad"), [("mix", "fast"), ("stems", "neural")], ids=["mix-fast", "stems-neural"])
def test_workers_give_the_single_process_analysis(
    programme_files: dict[str, Path], kind: str, vad: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    single = _analysis_json(programme_files, kind, vad, monkeypatch, workers=False)
    assert _analysis_json(programme_files, kind, vad, monkeypatch, workers=True) == single


def test_use_workers_needs_two_cores_and_a_long_programme(programme_files: dict[str, Path], monkeypatch: pytest.MonkeyPatch) -> None:
    programme = open_programme(mix=programme_files["mix"])
    monkeypatch.setattr(parallel.os, "sched_getaffinity", lambda pid: {0}, raising=False)
    assert not parallel.use_workers(programme.info)
    monkeypatch.setattr(parallel.os, "sched_getaffinity", lambda pid: {0, 1}, raising=False)
    monkeypatch.setattr(parallel, "PARALLEL_MIN_S", programme.info.duration_s + 1.0)
    assert not parallel.use_workers(programme.info)
    monkeypatch.setattr(parallel, "PARALLEL_MIN_S", programme.info.duration_s)
    assert parallel.use_workers(programme.info)


def test_worker_error_reaches_the_caller(tmp_path: Path) -> None:
    # Ground truth: a NaN sample, which the speech detector rejects with this message.
    x = np.zeros((48000, 2), dtype=np.float32)
    x[1000, 0] = np.nan
    path = tmp_path / "nan.wav"
    sf.write(path, x, 48000, subtype="FLOAT")
    with parallel.speech_worker(open_programme(mix=path), AnalysisSettings(vad="fast")) as result:
        with pytest.raises(AudioInputError, match="NaN or infinite samples"):
            result()


def test_worker_that_dies_raises(programme_files: dict[str, Path], monkeypatch: pytest.MonkeyPatch) -> None:
    def die(*args: object) -> None:
        os._exit(7)

    monkeypatch.setattr(parallel, "_band_items", die)
    if parallel._context().get_start_method() != "fork":
        pytest.skip("the patched target reaches the worker only through fork")
    with parallel.band_worker(open_programme(mix=programme_files["mix"]), 0.01) as items:
        with pytest.raises(CueplanError, match="exit code 7"):
            next(items)


def _divide(a: float, b: float) -> float:
    return a / b


def test_call_worker_returns_the_result_or_raises_the_error() -> None:
    # Ground truth: Python's own arithmetic, and its ZeroDivisionError
    with parallel.call_worker(_divide, (3.0, 4.0)) as result:
        assert result() == 0.75
    with parallel.call_worker(_divide, (1.0, 0.0)) as result:
        with pytest.raises(ZeroDivisionError):
            result()
