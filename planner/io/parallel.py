"""Both passes over the audio on two cores: worker processes that read the programme themselves.

Pass 1 (:func:`speech_worker`): the speech detector reads the detection signal in a second
process (and, from a mix with the fast detector, meters its true peak there too) while the
caller meters the loudness. Pass 2 (:func:`band_worker`): the band powers of
every analysed signal and the K-weighted and flat powers of half of them (the costly part
of the frame features, :meth:`planner.analysis.features.ProgrammeFeatures.band_powers`)
are computed in a second process and sent back block by block through a bounded queue,
while the caller computes the other half's K-weighted and flat powers, tracks the noise
and accumulates the cues. Each worker reads the files on its own (the operating
system's cache serves the second read), computes exactly what the single-process code
computes, in the same order, so results are identical. The queue holds at most
:data:`QUEUE_BLOCKS` blocks, so memory stays constant whatever the programme length.

Workers start by ``fork`` where the platform has it (nothing is imported again), else by
``spawn``. A worker's exception is raised again in the caller; a worker that dies without
one (killed) raises :class:`~planner.errors.CueplanError`.
"""

from __future__ import annotations

import contextlib
import dataclasses
import multiprocessing
import multiprocessing.context
import os
import queue as queue_module
from collections.abc import Callable, Iterator
from typing import Any

from planner._typing import FloatArray
from planner.analysis.channels import DETECTION_SOURCE, detection_signal
from planner.analysis.features import ProgrammeFeatures
from planner.analysis.truepeak import TruePeakMeter
from planner.analysis.vad import make_detector
from planner.errors import CueplanError
from planner.io.audio import Programme, iter_programme
from planner.jit import ready
from planner.model import AudioInfo, SpeechActivity
from planner.settings import AnalysisSettings

#: Programmes at least this long use worker processes; for shorter ones starting a
#: process costs more than it saves, seconds.
PARALLEL_MIN_S = 60.0
#: Blocks of features the pass-2 worker may run ahead of the caller.
QUEUE_BLOCKS = 8
_POLL_S = 1.0


def use_workers(info: AudioInfo) -> bool:
    """Whether a pass over audio of this length should use a second process (two or more usable cores)."""
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cpus = os.cpu_count() or 1
    return cpus > 1 and info.duration_s >= PARALLEL_MIN_S


def _context() -> multiprocessing.context.ForkContext | multiprocessing.context.SpawnContext:
    # fork starts a worker without importing anything again (spawn re-imports scipy.signal: ~1 s)
    if "fork" in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")


def speech_source(programme: Programme) -> str:
    """What the speech detector listens to, in words for reports."""
    return "dialogue stem" if programme.kind == "stems" else DETECTION_SOURCE[programme.info.layout]


def detect_programme_speech(
    programme: Programme, settings: AnalysisSettings, peaks: TruePeakMeter | None = None
) -> SpeechActivity:
    """The speech track of a programme: its detection signal through the configured detector.

    The signal is that of the mix, or of the dialogue stem alone (read as a one-file
    programme of the full length, so a shorter stem gets the trailing zeros it gets in
    :func:`planner.io.audio.iter_programme` of the stems). ``peaks``: a meter fed the mix
    on the way (a mix programme only).
    """
    info = programme.info
    detector = make_detector(
        settings.vad, info.sample_rate_hz, aggressiveness=settings.vad_aggressiveness, source=speech_source(programme)
    )
    speech = programme
    if programme.kind == "stems":
        speech = dataclasses.replace(programme, kind="mix", mix=programme.dialogue, dialogue=None, background=None)
    for block in iter_programme(speech):
        detector.feed(detection_signal(block.mix, info.layout))
        if peaks is not None:
            peaks.feed(block.mix)
    return detector.finish()


def _run(target: Callable[..., Any], args: tuple[Any, ...], out: Any) -> None:
    """Worker body: put ``("item", value)`` for each value ``target`` yields, then ``("done", None)``."""
    try:
        for value in target(*args):
            out.put(("item", value))
        out.put(("done", None))
    except BaseException as exc:  # handed to the caller, which raises it
        out.put(("error", exc))


def peaks_beside_speech(programme: Programme, settings: AnalysisSettings) -> bool:
    """Whether the speech worker meters the true peak too: from a mix (it reads the mix
    anyway) with the fast detector (the neural one already makes it the longer process)."""
    return programme.kind == "mix" and settings.vad == "fast"


def _speech_items(
    programme: Programme, settings: AnalysisSettings
) -> Iterator[tuple[SpeechActivity, TruePeakMeter | None]]:
    info = programme.info
    peaks = TruePeakMeter(info.sample_rate_hz, info.n_channels) if peaks_beside_speech(programme, settings) else None
    yield detect_programme_speech(programme, settings, peaks), peaks


def _band_items(programme: Programme, frame_s: float, k_power: FloatArray | None) -> Iterator[list[FloatArray | None]]:
    features = ProgrammeFeatures(programme.info, programme.kind, frame_s=frame_s, k_power=k_power)
    for block in iter_programme(programme):
        yield features.band_powers(block)
    yield features.flush_band_powers()


def _received(out: Any, worker: multiprocessing.process.BaseProcess) -> Iterator[Any]:
    while True:
        try:
            kind, value = out.get(timeout=_POLL_S)
        except queue_module.Empty:
            if not worker.is_alive():
                raise CueplanError(
                    f"a worker process stopped without a result (exit code {worker.exitcode}); "
                    "the machine may be short of memory: run again"
                ) from None
            continue
        if kind == "error":
            raise value
        if kind == "done":
            return
        yield value


@contextlib.contextmanager
def _worker(target: Callable[..., Any], args: tuple[Any, ...], maxsize: int) -> Iterator[Iterator[Any]]:
    context = _context()
    if context.get_start_method() == "fork":
        ready()  # the worker runs compiled loops too: it inherits numba's set-up instead of repeating it
    out = context.Queue(maxsize=maxsize)
    worker = context.Process(target=_run, args=(target, args, out), daemon=True)
    worker.start()
    try:
        yield _received(out, worker)
    finally:
        if worker.is_alive():
            worker.terminate()
        worker.join()
        out.close()
        out.join_thread()


@contextlib.contextmanager
def speech_worker(
    programme: Programme, settings: AnalysisSettings
) -> Iterator[Callable[[], tuple[SpeechActivity, TruePeakMeter | None]]]:
    """Start :func:`detect_programme_speech` in a second process; the context gives a function that waits for it.

    The function returns the speech track and, where :func:`peaks_beside_speech`, the
    true-peak meter fed the mix (else None: the caller meters the peaks itself).
    """
    with _worker(_speech_items, (programme, settings), 1) as items:
        yield lambda: next(items)


@contextlib.contextmanager
def band_worker(
    programme: Programme, frame_s: float, k_power: FloatArray | None = None
) -> Iterator[Iterator[list[FloatArray | None]]]:
    """Compute the scoring pass's band powers in a second process; the context gives them in order.

    The items are ``ProgrammeFeatures(info, kind, frame_s=frame_s, k_power=k_power).band_powers(block)``
    for every block of :func:`planner.io.audio.iter_programme`, then its ``flush_band_powers()``:
    what :func:`planner.analysis.masking.score_cues` takes as ``bands`` (with the same ``k_power``).
    """
    with _worker(_band_items, (programme, frame_s, k_power), QUEUE_BLOCKS) as items:
        yield items


def _call(target: Callable[..., Any], args: tuple[Any, ...]) -> Iterator[Any]:
    yield target(*args)


@contextlib.contextmanager
def call_worker(target: Callable[..., Any], args: tuple[Any, ...]) -> Iterator[Callable[[], Any]]:
    """Start ``target(*args)`` in a second process; the context gives a function that waits for its result."""
    with _worker(_call, (target, args), 1) as items:
        yield lambda: next(items)
