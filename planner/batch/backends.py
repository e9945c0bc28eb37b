"""Where triage tasks run: a local process pool, or a Dask distributed cluster.

Both take the same task function and arguments and hand back, per finished task, either
its return value or the exception that stopped it (a worker process that died, a lost
cluster worker). The coordinating process alone talks to the catalogue.

The local pool starts its workers from a fork server (``spawn`` where there is none), never
by forking the coordinator itself, so whatever threads the coordinator runs are safe, and passes them a queue on which each task reports
its analysis stage; the cluster reports no stages (its dashboard shows the tasks).
"""

from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import queue
import time
from collections.abc import Callable, Hashable, Sequence
from concurrent.futures.process import BrokenProcessPool
from types import TracebackType
from typing import Any, Protocol

from planner.allocator import reuse_freed_buffers
from planner.errors import InputError

#: ``(episode id, stage, done, total)`` sink for stage reports.
StageSink = Callable[[str, str, float, float], None]
#: Seconds between two stage reports of one task (and the coordinator's polling period).
STAGE_PERIOD_S = 0.25
#: Seconds to wait for a Dask scheduler to answer before giving up.
CONNECT_TIMEOUT_S = 10.0


class Backend(Protocol):
    """Runs tasks: at most ``capacity`` at once are useful."""

    capacity: int

    def submit(self, job: Any, settings: Any) -> Hashable: ...

    def wait(self, handles: Sequence[Hashable], *, on_stage: StageSink | None = None) -> list[tuple[Hashable, Any]]: ...

    def __enter__(self) -> Backend: ...

    def __exit__(self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None) -> None: ...


# Set in each pool worker by _init_worker: the queue to report stages on.
_stage_queue: Any = None


def _init_worker(stages: Any) -> None:
    global _stage_queue
    _stage_queue = stages
    reuse_freed_buffers()  # as the command line does (planner.allocator)
    # Never block a worker's exit on a coordinator that stopped reading.
    stages.cancel_join_thread()


def _pool_task(task: Callable[..., Any], job: Any, settings: Any) -> Any:
    """Run ``task(job, settings, progress=...)`` in a pool worker, reporting stages on the queue."""
    last: dict[str, float] = {}

    def report(stage: str, done: float, total: float) -> None:
        now = time.monotonic()
        if stage in last and now - last[stage] < STAGE_PERIOD_S and done < total:
            return
        last[stage] = now
        if _stage_queue is not None:
            try:
                _stage_queue.put_nowait((job.episode_id, stage, float(done), float(total)))
            except (queue.Full, ValueError, OSError):
                pass  # stage reports are a display nicety; the result still comes back

    return task(job, settings, progress=report)


def _context() -> Any:
    """The ``forkserver`` start method with the triage modules preloaded where it exists, else ``spawn``.

    Both start workers from a clean single-threaded process; the fork server imports numpy,
    scipy and the pipeline once, so later pools of the same coordinator start at once.
    """
    if "forkserver" in multiprocessing.get_all_start_methods():
        context = multiprocessing.get_context("forkserver")
        context.set_forkserver_preload(["planner.batch.triage"])
        return context
    return multiprocessing.get_context("spawn")


class LocalPool:
    """A ``concurrent.futures.ProcessPoolExecutor`` of ``workers`` spawned processes running ``task``."""

    def __init__(self, workers: int, task: Callable[..., Any]) -> None:
        self.capacity = workers
        self._task = task
        self._context = _context()
        self._stages = self._context.Queue()
        self._pool = self._new_pool()

    def _new_pool(self) -> cf.ProcessPoolExecutor:
        return cf.ProcessPoolExecutor(
            max_workers=self.capacity, mp_context=self._context, initializer=_init_worker, initargs=(self._stages,)
        )

    def submit(self, job: Any, settings: Any) -> Hashable:
        """Queue one task; a pool broken by a dead worker is replaced first."""
        try:
            return self._pool.submit(_pool_task, self._task, job, settings)
        except BrokenProcessPool:
            self._pool.shutdown(wait=False, cancel_futures=True)
            self._pool = self._new_pool()
            return self._pool.submit(_pool_task, self._task, job, settings)

    def wait(self, handles: Sequence[Hashable], *, on_stage: StageSink | None = None) -> list[tuple[Hashable, Any]]:
        """Block until at least one task ends; pass on stage reports meanwhile."""
        futures: list[cf.Future[Any]] = list(handles)  # type: ignore[arg-type]
        while True:
            finished, _ = cf.wait(futures, timeout=STAGE_PERIOD_S, return_when=cf.FIRST_COMPLETED)
            self._drain(on_stage)
            if finished:
                ordered = [f for f in futures if f in finished]
                return [(f, f.exception() if f.exception() is not None else f.result()) for f in ordered]

    def _drain(self, on_stage: StageSink | None) -> None:
        while True:
            try:
                report = self._stages.get_nowait()
            except queue.Empty:
                return
            if on_stage is not None:
                on_stage(*report)

    def __enter__(self) -> LocalPool:
        return self

    def __exit__(self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None) -> None:
        # On an interruption do not wait for the running episodes: their rows stay "running"
        # and the next run redoes them.
        self._pool.shutdown(wait=kind is None, cancel_futures=True)
        self._stages.close()


class DaskCluster:
    """Tasks on an existing Dask distributed scheduler at ``address``; capacity is its worker thread count."""

    def __init__(self, address: str, task: Callable[..., Any]) -> None:
        from distributed import Client

        self._task = task
        try:
            self._client = Client(address, timeout=f"{CONNECT_TIMEOUT_S:g}s", set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(
                f"cannot reach a Dask scheduler at {address} ({type(exc).__name__}: {exc}); "
                "start one with `dask scheduler` and pass its tcp://host:port address"
            ) from None
        self.capacity = max(1, sum(self._client.nthreads().values()))

    def submit(self, job: Any, settings: Any) -> Hashable:
        """Send one task to the cluster (never deduplicated: ``pure=False``)."""
        return self._client.submit(self._task, job, settings, pure=False)  # type: ignore[no-any-return]

    def wait(self, handles: Sequence[Hashable], *, on_stage: StageSink | None = None) -> list[tuple[Hashable, Any]]:
        """Block until at least one task ends."""
        from distributed import as_completed

        # This client is not the process's default one, so wait on its own event loop.
        next(as_completed(list(handles), loop=self._client.loop))
        return [(f, _outcome(f)) for f in handles if f.done()]  # type: ignore[attr-defined]

    def __enter__(self) -> DaskCluster:
        return self

    def __exit__(self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None) -> None:
        self._client.close()


def _outcome(future: Any) -> Any:
    """A finished Dask future's value, or the exception that ended it (errored or cancelled)."""
    if future.status == "finished":
        return future.result()
    try:
        return future.exception()
    except Exception as exc:  # noqa: BLE001 - a cancelled future raises instead of returning its exception
        return exc


def make_backend(workers: int, cluster: str | None, task: Callable[..., Any]) -> LocalPool | DaskCluster:
    """A cluster client when ``cluster`` is an address, else a local pool of ``workers`` processes."""
    if cluster is not None:
        return DaskCluster(cluster, task)
    return LocalPool(workers, task)
