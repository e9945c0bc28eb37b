"""Archive triage: analyse and plan every episode of a source into a resumable catalogue.

:func:`triage_episode` is the whole work for one episode and is pure in the sense that
matters here: paths and settings in, a plain picklable :class:`EpisodeResult` out, no
catalogue access, every error caught into the result. :func:`run_triage` runs it for every
episode that needs it, in a local process pool or on a Dask distributed cluster, and writes
each result into the catalogue (:mod:`planner.batch.catalogue`) as it arrives, from this
process only. So the pool and the cluster produce the same catalogue.

An episode is skipped when its catalogue row is ``done`` with the same input paths, the
same SHA-256 of each input and the same settings fingerprint; ``force`` redoes it. Rows
left ``running`` by a killed run, ``failed`` rows and changed episodes are redone.
"""

from __future__ import annotations

import dataclasses
import os
import tempfile
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

from planner.batch.backends import Backend, make_backend
from planner.batch.catalogue import Catalogue
from planner.batch.reports import ReportRow, episode_report, triage_report
from planner.batch.sources import Discovery, EpisodeJob, Unpaired, discover
from planner.batch.summary import CatalogueCue, EpisodeSummary, canonical_json, settings_fingerprint, summarise
from planner.errors import CueplanError, SettingsError
from planner.folder import Inputs
from planner.io.files import sha256_file
from planner.pipeline import analyse
from planner.planning.scenes import make_plan
from planner.progress import Progress, no_progress
from planner.settings import AnalysisSettings, PlanSettings

__all__ = [
    "EpisodeJob",
    "EpisodeResult",
    "ReportRow",
    "StageCallback",
    "TriageSettings",
    "TriageSummary",
    "Unpaired",
    "episode_report",
    "run_triage",
    "triage_episode",
    "triage_report",
]

#: ``(episode id, stage, done, total)``: what one episode's analysis is doing.
StageCallback = Callable[[str, str, float, float], None]


@dataclass(frozen=True)
class TriageSettings:
    """The analysis and plan settings every episode of a batch is triaged with."""

    analysis: AnalysisSettings = field(default_factory=AnalysisSettings)
    plan: PlanSettings = field(default_factory=PlanSettings)

    def for_episode(self, job: EpisodeJob) -> AnalysisSettings:
        """The analysis settings for one episode: its own frame rate when the source gives one."""
        if job.fps is None or job.fps == self.analysis.fps:
            return self.analysis
        drop_frame = self.analysis.drop_frame and job.fps in ("29.97", "59.94")
        return dataclasses.replace(self.analysis, fps=job.fps, drop_frame=drop_frame)

    def fingerprint(self, job: EpisodeJob) -> str:
        """SHA-256 fingerprint of the settings as applied to ``job`` (see :func:`settings_fingerprint`)."""
        return settings_fingerprint(self.for_episode(job), self.plan)

    def as_json(self, job: EpisodeJob) -> str:
        """Canonical JSON of the settings as applied to ``job``."""
        return canonical_json({"analysis": self.for_episode(job).to_dict(), "plan": self.plan.to_dict()})


@dataclass(frozen=True)
class EpisodeResult:
    """What triaging one episode gave: a summary and cue rows, or the failure message.

    ``sha256`` maps each input role to the SHA-256 of the file analysed (``None`` where the
    file could not be read); ``elapsed_s`` is the wall time of the work, seconds.
    """

    episode_id: str
    status: Literal["done", "failed"]
    message: str
    sha256: dict[str, str | None]
    summary: EpisodeSummary | None = None
    cues: tuple[CatalogueCue, ...] = ()
    elapsed_s: float = 0.0


@dataclass(frozen=True)
class TriageSummary:
    """What a batch run did: episodes found, finished now, skipped as current, failed, and the files left out."""

    catalog: str
    total: int
    done: tuple[str, ...]
    skipped: tuple[str, ...]
    failed: tuple[tuple[str, str], ...]
    unpaired: tuple[Unpaired, ...]
    elapsed_s: float


def _hash_or_none(path: Path | None) -> str | None:
    if path is None:
        return None
    try:
        return sha256_file(path)
    except OSError:
        return None


def _hashes(job: EpisodeJob) -> dict[str, str | None]:
    return {role: _hash_or_none(path) for role, path in job.roles()}


def triage_episode(job: EpisodeJob, settings: TriageSettings, *, progress: Progress | None = None) -> EpisodeResult:
    """Analyse (into a temporary folder) and plan one episode, and summarise it.

    Never raises for a bad episode: a :class:`~planner.errors.CueplanError` becomes a
    ``failed`` result with its message, any other exception a ``failed`` result naming its
    type and message.

    Parameters
    ----------
    job : EpisodeJob
        The episode's files (paths the process running this can read) and frame rate.
    settings : TriageSettings
        Analysis and plan settings.
    progress : Progress, optional
        Receives the analysis stages (seconds of audio done / total).
    """
    start = time.perf_counter()
    inputs = Inputs(subtitles=job.subtitles, mix=job.mix, dialogue=job.dialogue, background=job.background)
    try:
        with tempfile.TemporaryDirectory(prefix="cueplan-triage-") as tmp:
            analysis = analyse(inputs, Path(tmp), settings.for_episode(job), progress=progress)
        (progress or no_progress)("planning", 0.0, 1.0)
        summary, cues = summarise(make_plan(analysis, settings.plan))
    except CueplanError as exc:
        message = str(exc)
    except Exception as exc:  # noqa: BLE001 - any failure of one episode must not stop the batch
        message = f"{type(exc).__name__}: {exc}"
    else:
        sha = {role: None for role, _ in job.roles()} | {f.role: f.sha256 for f in analysis.inputs}
        return EpisodeResult(job.episode_id, "done", "", sha, summary, cues, time.perf_counter() - start)
    return EpisodeResult(job.episode_id, "failed", message, _hashes(job), elapsed_s=time.perf_counter() - start)


def _is_current(row: dict[str, object] | None, job: EpisodeJob, fingerprint: str) -> bool:
    """True when the catalogue row is done with the same input paths, settings and input hashes."""
    if row is None or row["status"] != "done" or row["settings_fingerprint"] != fingerprint:
        return False
    if any(row[f"{role}_path"] != (None if path is None else str(path)) for role, path in job.roles()):
        return False
    return all(row[f"{role}_sha256"] == sha for role, sha in _hashes(job).items())


def run_triage(
    source: str | Path,
    catalog_path: str | Path,
    *,
    workers: int | None = None,
    cluster: str | None = None,
    force: bool = False,
    progress: Progress | None = None,
    settings: TriageSettings | None = None,
    on_stage: StageCallback | None = None,
) -> TriageSummary:
    """Triage every episode of ``source`` into the catalogue at ``catalog_path``.

    Parameters
    ----------
    source : str or Path
        A folder of episodes or a CSV manifest (:mod:`planner.batch.sources`).
    catalog_path : str or Path
        The SQLite catalogue, created when missing.
    workers : int, optional
        Local worker processes (default ``os.cpu_count()``); ignored with ``cluster``.
    cluster : str, optional
        Address of a Dask distributed scheduler (``tcp://host:port``); its workers must
        see the input files at the same paths.
    force : bool
        Redo episodes that are already done and current.
    progress : Progress, optional
        Called as ``progress("episodes", finished, to_do)``.
    settings : TriageSettings, optional
        Analysis and plan settings (default: the defaults of both).
    on_stage : StageCallback, optional
        Called with each running episode's analysis stage (local pool only), and with the
        stage ``"done"`` or ``"failed"`` once the episode's result is in the catalogue.

    Returns
    -------
    TriageSummary

    Raises
    ------
    InputError
        A bad source or manifest, an unusable catalogue, or an unreachable cluster.
    """
    started = time.perf_counter()
    if workers is not None and workers < 1:
        raise SettingsError(f"workers={workers} must be at least 1; pass a positive number of worker processes")
    settings = settings or TriageSettings()
    progress = progress or no_progress
    found: Discovery = discover(source)
    done: list[str] = []
    skipped: list[str] = []
    failed: list[tuple[str, str]] = []
    with Catalogue(catalog_path) as catalogue:
        todo = []
        for job in found.jobs:
            if not force and _is_current(catalogue.episode(job.episode_id), job, settings.fingerprint(job)):
                skipped.append(job.episode_id)
            else:
                todo.append(job)
        progress("episodes", 0, len(todo))
        if todo:
            n_workers = workers if workers is not None else (os.cpu_count() or 1)
            with make_backend(n_workers, cluster, triage_episode) as backend:
                for result in _run(backend, todo, settings, catalogue, on_stage):
                    if result.status == "done":
                        done.append(result.episode_id)
                    else:
                        failed.append((result.episode_id, result.message))
                    progress("episodes", len(done) + len(failed), len(todo))
    return TriageSummary(
        catalog=str(catalog_path),
        total=len(found.jobs),
        done=tuple(sorted(done)),
        skipped=tuple(skipped),
        failed=tuple(sorted(failed)),
        unpaired=found.unpaired,
        elapsed_s=time.perf_counter() - started,
    )


def _run(
    backend: Backend, todo: list[EpisodeJob], settings: TriageSettings, catalogue: Catalogue, on_stage: StageCallback | None
) -> Iterator[EpisodeResult]:
    """Submit up to the backend's capacity, record each result as it completes, yield it."""
    waiting = list(reversed(todo))
    running: dict[object, EpisodeJob] = {}
    while waiting or running:
        while waiting and len(running) < backend.capacity:
            job = waiting.pop()
            catalogue.mark_running(
                job.episode_id,
                paths={role: None if p is None else str(p) for role, p in job.roles()},
                fps=settings.for_episode(job).fps,
                fingerprint=settings.fingerprint(job),
                settings_json=settings.as_json(job),
            )
            running[backend.submit(job, settings)] = job
        for handle, outcome in backend.wait(list(running), on_stage=on_stage):
            job = running.pop(handle)
            result = outcome if isinstance(outcome, EpisodeResult) else _lost(job, outcome)
            if result.status == "done" and result.summary is not None:
                catalogue.record_done(job.episode_id, result.summary, result.cues, sha256=result.sha256, elapsed_s=result.elapsed_s)
            else:
                catalogue.record_failed(job.episode_id, result.message, sha256=result.sha256, elapsed_s=result.elapsed_s)
            if on_stage is not None:
                on_stage(job.episode_id, result.status, 1.0, 1.0)
            yield result


def _lost(job: EpisodeJob, exc: BaseException) -> EpisodeResult:
    """The result of an episode whose worker process or cluster task died without answering."""
    message = (
        f"the worker running this episode stopped without a result ({type(exc).__name__}: {exc}); "
        "rerun the batch, and check the worker's memory if it happens again"
    )
    return EpisodeResult(job.episode_id, "failed", message, _hashes(job))
