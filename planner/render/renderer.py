"""Render a plan into audio: gain envelopes (or mix-only reduction), loudness, true-peak limit.

Stems: ``out = dialogue * g_dialogue(t) + background * g_background(t)`` in the input
layout. Mix only: the background is reduced (and the dialogue lifted) under each event by
:class:`planner.render.separate.MixReducer`. Where no event acts the processed samples
equal the input samples bit for bit.

Loudness (ITU-R BS.1770-4 integrated, gated) needs the processed programme's loudness
before the gain can be chosen, so a normalised render reads the programme twice, block by
block: pass 1 processes and measures; pass 2 processes again (deterministically, the same
samples), applies the one gain ``target - measured`` and the true-peak limiter, measures
and writes. Where the limiter will act (the gained true peak reaches the ceiling), up to
three extra measuring passes raise the gain by the loudness it takes away, so the output
still lands on the target. With normalisation off one pass suffices. Outputs are written
through :class:`planner.io.audio.AudioWriter` (temporary file renamed when complete, never
over an input); the plan's SHA-256 and the render settings go into the file's description
(BWF ``bext`` for WAV, the Vorbis comment for FLAC).
"""

from __future__ import annotations

import hashlib
import os
import queue
import tempfile
import threading
from collections.abc import Callable, Iterator, Sequence
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass
from functools import partial
from pathlib import Path
from typing import Any, Literal

import numpy as np

from planner._typing import AudioArray
from planner.analysis.framepower import SignalKPower
from planner.analysis.loudness import LoudnessMeter
from planner.errors import PlanFileError, SettingsError
from planner.io.audio import DEFAULT_BLOCK_FRAMES, STEM_LENGTH_TOLERANCE_FRAMES, AudioWriter, Programme, ProgrammeBlock, iter_programme
from planner.io.exports import plan_json_chunks
from planner.io.files import refuse_inputs
from planner.model import AudioInfo, LoudnessSummary, Plan, Record
from planner.progress import Progress, no_progress
from planner.render.envelope import GainEnvelope
from planner.render.limiter import TruePeakLimiter
from planner.render.separate import MixReducer
from planner.settings import RenderSettings

#: File names of the processed stems inside ``stems_out``.
STEM_NAMES = ("dialogue.wav", "background.wav")
_FLAC_SUBTYPES = ("PCM_16", "PCM_24")
#: The limiter is expected to act when the gained true peak comes within this of the ceiling, dB.
_LIMIT_MARGIN_DB = 0.2
#: At most this many extra measuring passes correct the gain for the limiter's loudness loss.
_CORRECTION_PASSES = 3
#: A correction below this is taken as settled, LU.
_CORRECTION_LU = 0.02
#: Pieces of output that may wait for a metering or writing thread.
_QUEUED_PIECES = 4


@dataclass(frozen=True)
class RenderReport(Record):
    """What a render did and measured.

    Loudness figures are BS.1770-4 integrated loudness (LUFS) of the input, of the
    processed programme before normalisation, and of the output; true peaks are 4x
    oversampled (dBTP). ``standard`` names the preset or target (``"off"`` without
    normalisation), ``tolerance_lu`` its tolerance; ``gain_applied_db`` is the
    normalisation gain; the limiter figures give its largest gain reduction (dB) and how
    long it reduced the gain (s). ``within_tolerance`` says whether the output loudness is
    within the tolerance of the target (``None`` without a target), ``true_peak_ok``
    whether the output true peak is at or below the ceiling (``None`` without one).
    """

    output_path: str
    kind: Literal["mix", "stems"]
    plan_sha256: str
    standard: str
    target_lufs: float | None
    tolerance_lu: float | None
    ceiling_dbtp: float | None
    loudness_before_lufs: float | None
    loudness_processed_lufs: float | None
    loudness_after_lufs: float | None
    true_peak_before_dbtp: float
    true_peak_after_dbtp: float
    gain_applied_db: float
    limiter_max_reduction_db: float
    limiter_active_s: float
    within_tolerance: bool | None
    true_peak_ok: bool | None
    n_events: int
    duration_s: float
    clipped_samples: int = 0
    stems_out: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


def plan_sha256(plan: Plan) -> str:
    """SHA-256 (hex) of the plan's canonical JSON, the same bytes ``plan.json`` holds."""
    digest = hashlib.sha256()
    for chunk in plan_json_chunks(plan):
        digest.update(chunk.encode("utf-8"))
    return digest.hexdigest()


def render(
    plan: Plan,
    programme: Programme,
    out_path: str | Path,
    settings: RenderSettings,
    *,
    stems_out: Path | None = None,
    progress: Progress | None = None,
    block_frames: int = DEFAULT_BLOCK_FRAMES,
    before_writing: Callable[[], object] | None = None,
    k_frames: SignalKPower | None = None,
) -> RenderReport:
    """Apply a plan to a programme and write the clearer-dialogue version.

    Parameters
    ----------
    plan : Plan
        The plan; its analysis must describe audio of the programme's rate and channels.
    programme : Programme
        The audio: a mix, or dialogue and background stems.
    out_path : str or Path
        Output file (``.wav``/``.bwf`` or ``.flac``); never one of the inputs.
    settings : RenderSettings
        Loudness preset or target and true-peak ceiling.
    stems_out : Path, optional
        Folder (created if missing) for the processed stems ``dialogue.wav`` and
        ``background.wav``, with the same normalisation gain as the output (they sum to
        the output before the limiter). Stems programmes only.
    progress : Progress, optional
        Called with ``(stage, seconds done, seconds total)`` for each pass: ``"render: measuring"``,
        ``"render: measuring limiter (n)"`` (only when the limiter acts), ``"render: writing"``.
    block_frames : int
        Frames per block read.
    before_writing : callable, optional
        Called after the measuring passes, before anything is written (a check that runs
        beside them, such as the inputs' hashes); an exception it raises stops the render.
    k_frames : SignalKPower, optional
        Fed the K-weighted channels of the output as it is metered, so that a verify of the
        output mix (``verify(..., k_power=k_frames.result())``) need not K-weight it again.

    Returns
    -------
    RenderReport

    Raises
    ------
    PlanFileError
        The plan was made for audio of another rate, channel count or length.
    SettingsError
        ``stems_out`` for a mix-only programme.
    OutputError
        An output would overwrite an input, or its folder does not exist.
    """
    info = programme.info
    _check_matches(plan, programme)
    out_path = Path(out_path)
    inputs = [p for p in (programme.mix, programme.dialogue, programme.background) if p is not None]
    refuse_inputs(out_path, inputs)
    stem_paths: tuple[Path, ...] = ()
    if stems_out is not None:
        if programme.kind != "stems":
            raise SettingsError("stems_out needs a stems programme (dialogue and background); drop it for a mix")
        stem_paths = tuple(Path(stems_out) / name for name in STEM_NAMES)
        for p in stem_paths:
            refuse_inputs(p, inputs)
            if p.resolve() == out_path.resolve():
                raise SettingsError(f"out_path={str(out_path)!r} is one of the processed stems' files; choose another name")
        Path(stems_out).mkdir(parents=True, exist_ok=True)
    fs = info.sample_rate_hz
    total_s = info.duration_s
    envelopes = gain_envelopes(plan, info)

    # The analysis metered the same input blocks (pipeline: ``block.mix``): no need to meter them again.
    recorded = plan.analysis.loudness
    before_summary = recorded if recorded.integrated_lufs is not None else None
    with _Passes(plan, programme, envelopes, block_frames, progress or no_progress, out_path) as passes:
        return _render_passes(
            passes, plan, programme, out_path, settings, stem_paths, inputs, before_summary, fs, total_s,
            before_writing, k_frames,
        )  # fmt: skip


def _render_passes(
    passes: _Passes,
    plan: Plan,
    programme: Programme,
    out_path: Path,
    settings: RenderSettings,
    stem_paths: tuple[Path, ...],
    inputs: list[Path],
    before_summary: LoudnessSummary | None,
    fs: int,
    total_s: float,
    before_writing: Callable[[], object] | None,
    k_frames: SignalKPower | None,
) -> RenderReport:
    """The measuring and writing passes of :func:`render` and its report."""
    info = programme.info
    notes: list[str] = []
    target = settings.target()
    target_lufs: float | None
    ceiling: float | None
    tolerance: float | None
    if target is not None:
        target_lufs, ceiling, tolerance, label = target
    else:
        target_lufs, ceiling, tolerance = None, settings.true_peak_dbtp, None
        label = "off" if ceiling is None else f"off, ceiling {ceiling:g} dBTP"
    sha = plan_sha256(plan)
    gain_db, processed_lufs = 0.0, None
    if target_lufs is not None:
        # Pass 1: the gain needs the processed programme's integrated loudness first.
        metered, processed = passes.measure("render: measuring", with_input=before_summary is None, record=True)
        before_summary = before_summary or metered
        processed_lufs = processed.integrated_lufs
        if processed_lufs is None:
            notes.append("the processed programme is silent after BS.1770 gating; no loudness gain was applied")
        else:
            first = target_lufs - processed_lufs
            gain_db, n_extra = passes.correct_for_limiter(first, target_lufs, ceiling, processed.true_peak_dbtp)
            if n_extra:
                notes.append(
                    f"the limiter takes loudness away: {n_extra} extra measuring pass(es) raised the gain by "
                    f"{gain_db - first:.2f} dB"
                )

    if before_writing is not None:
        before_writing()
    limiter = None if ceiling is None else TruePeakLimiter(fs, info.n_channels, ceiling_dbtp=ceiling)
    writers = _Outputs(out_path, stem_paths, info, inputs, _description(sha, settings, label, ceiling, programme.kind))
    input_summary, after_summary = passes.write(writers, gain_db, limiter, with_input=before_summary is None, k_frames=k_frames)
    before_summary = before_summary or input_summary
    assert before_summary is not None
    if writers.clipped_output:
        notes.append(f"{writers.clipped_output} output samples exceeded full scale and were clipped (integer format)")
    if writers.clipped_stems:
        notes.append(f"{writers.clipped_stems} samples of the processed stems (not limited) were clipped")
    clipped = writers.clipped_output + writers.clipped_stems
    within = None
    if target_lufs is not None and tolerance is not None and after_summary.integrated_lufs is not None:
        within = abs(after_summary.integrated_lufs - target_lufs) <= tolerance
    return RenderReport(
        output_path=str(out_path),
        kind=programme.kind,
        plan_sha256=sha,
        standard=label,
        target_lufs=target_lufs,
        tolerance_lu=tolerance,
        ceiling_dbtp=ceiling,
        loudness_before_lufs=before_summary.integrated_lufs,
        loudness_processed_lufs=processed_lufs if target_lufs is not None else after_summary.integrated_lufs,
        loudness_after_lufs=after_summary.integrated_lufs,
        true_peak_before_dbtp=before_summary.true_peak_dbtp,
        true_peak_after_dbtp=after_summary.true_peak_dbtp,
        gain_applied_db=gain_db,
        limiter_max_reduction_db=0.0 if limiter is None else limiter.max_reduction_db,
        limiter_active_s=0.0 if limiter is None else limiter.reduced_frames / fs,
        within_tolerance=within,
        true_peak_ok=None if ceiling is None else after_summary.true_peak_dbtp <= ceiling,
        n_events=len(plan.events),
        duration_s=total_s,
        clipped_samples=clipped,
        stems_out=tuple(str(p) for p in stem_paths),
        notes=tuple(notes),
    )


class _Outputs:
    """The output file and the optional processed stems, opened together so they fail together."""

    def __init__(self, out_path: Path, stem_paths: tuple[Path, ...], info: AudioInfo, inputs: list[Path], description: str) -> None:
        subtype = _subtype(info.subtype, out_path)
        self._make = [
            AudioWriter(p, sample_rate_hz=info.sample_rate_hz, n_channels=info.n_channels, subtype=subtype,
                        inputs=inputs, description=description)
            for p in (out_path, *stem_paths)
        ]  # fmt: skip
        self.clipped_output = 0
        self.clipped_stems = 0

    @contextmanager
    def opened(self) -> Iterator[tuple[AudioWriter, list[AudioWriter]]]:
        """All writers entered; each renames its file only if the whole block succeeds."""
        with ExitStack() as stack:
            opened = [stack.enter_context(w) for w in self._make]
            yield opened[0], opened[1:]
            self.clipped_output = opened[0].n_clipped
            self.clipped_stems = sum(w.n_clipped for w in opened[1:])


class _Passes:
    """Reads and processes the programme once per call: measuring passes and the writing pass.

    A mix's separation is the costly part of a pass and gives the same samples every time,
    so the first measuring pass (``record=True``) keeps its processed output in a temporary
    float32 file beside the output, and later passes read that file instead of separating
    again (disk, not memory: 4 bytes per sample and channel, removed on exit). Stems are
    cheap to process and are simply read again.
    """

    def __init__(
        self,
        plan: Plan,
        programme: Programme,
        envelopes: tuple[GainEnvelope, GainEnvelope],
        block_frames: int,
        progress: Progress,
        out_path: Path,
    ) -> None:
        self._args = (plan, programme, envelopes, block_frames, progress)
        self._info = programme.info
        self._block_frames = block_frames
        self._progress = progress
        self._out_path = out_path
        self._cache: Path | None = None

    def __enter__(self) -> _Passes:
        return self

    def __exit__(self, *exc: object) -> None:
        if self._cache is not None:
            self._cache.unlink(missing_ok=True)
            self._cache = None

    def _meter(self, k_frames: SignalKPower | None = None) -> LoudnessMeter:
        on_weighted = None if k_frames is None else k_frames.feed
        return LoudnessMeter(self._info.sample_rate_hz, self._info.layout, on_weighted=on_weighted)

    def _pieces(
        self, stage: str, *, record: bool = False
    ) -> Iterator[tuple[AudioArray | None, AudioArray, tuple[AudioArray, AudioArray] | None]]:
        """The processed programme in time order, from the cache when there is one (input blocks then ``None``)."""
        if self._cache is not None:
            yield from self._replay(stage)
            return
        if not record or self._args[1].kind != "mix":
            yield from _process(*self._args, stage)
            return
        fd, name = tempfile.mkstemp(dir=self._out_path.parent, prefix=f".{self._out_path.name}.", suffix=".f32")
        path = Path(name)
        try:
            with os.fdopen(fd, "wb") as f:
                for piece in _process(*self._args, stage):
                    f.write(np.ascontiguousarray(piece[1], dtype=np.float32).tobytes())
                    yield piece
        except BaseException:
            path.unlink(missing_ok=True)
            raise
        self._cache = path

    def _replay(self, stage: str) -> Iterator[tuple[None, AudioArray, None]]:
        assert self._cache is not None
        n_ch, fs = self._info.n_channels, self._info.sample_rate_hz
        total_s, done = self._info.duration_s, 0
        with self._cache.open("rb") as f:
            while True:
                out = np.fromfile(f, dtype=np.float32, count=self._block_frames * n_ch).reshape(-1, n_ch)
                if not out.shape[0]:
                    break
                done += out.shape[0]
                yield None, out, None
                self._progress(stage, min(done / fs, total_s), total_s)

    def measure(
        self, stage: str, *, with_input: bool, gain_db: float = 0.0, ceiling: float | None = None, record: bool = False
    ) -> tuple[LoudnessSummary | None, LoudnessSummary]:
        """Loudness of the input (when asked) and of the processed programme after gain and limiter.

        ``record`` keeps a mix's processed output for the later passes (class docstring).
        """
        before = self._meter() if with_input else None
        after = self._meter()
        gain = np.float32(10.0 ** (gain_db / 20.0))
        limiter = None if ceiling is None else TruePeakLimiter(self._info.sample_rate_hz, self._info.n_channels, ceiling_dbtp=ceiling)
        with _Consumer(partial(_feed, after)) as metering:
            for inp, out, _ in self._pieces(stage, record=record):
                if before is not None and inp is not None:
                    _feed(before, inp)
                y = out if gain == 1.0 else out * gain
                metering.put(y if limiter is None else limiter.process(y))
            if limiter is not None:
                metering.put(limiter.flush())
        return (None if before is None else before.summary()), after.summary()

    def correct_for_limiter(
        self, gain_db: float, target_lufs: float, ceiling: float | None, peak_dbtp: float
    ) -> tuple[float, int]:
        """Raise the gain by the loudness the limiter will take away (extra measuring passes, only if it acts).

        Each pass measures the limited output at the current gain and adds the shortfall; the
        limiter's loss grows slowly with the gain, so this settles within a few hundredths of a LU.
        """
        if ceiling is None or peak_dbtp + gain_db <= ceiling - _LIMIT_MARGIN_DB:
            return gain_db, 0
        n = 0
        for i in range(_CORRECTION_PASSES):
            n += 1
            _, limited = self.measure(f"render: measuring limiter ({i + 1})", with_input=False, gain_db=gain_db, ceiling=ceiling)
            if limited.integrated_lufs is None:
                break
            error = target_lufs - limited.integrated_lufs
            gain_db += error
            if abs(error) < _CORRECTION_LU:
                break
        return gain_db, n

    def write(
        self,
        outputs: _Outputs,
        gain_db: float,
        limiter: TruePeakLimiter | None,
        *,
        with_input: bool,
        k_frames: SignalKPower | None = None,
    ) -> tuple[LoudnessSummary | None, LoudnessSummary]:
        """The writing pass: process, gain, limit, write (and measure the input when asked, and
        the output, whose K-weighted channels ``k_frames`` is fed)."""
        before = self._meter() if with_input else None
        after = self._meter(k_frames)
        gain = np.float32(10.0 ** (gain_db / 20.0))
        with outputs.opened() as (writer, stem_writers), _Consumer(partial(_feed, after)) as metering, _Consumer(
            writer.write
        ) as writing, _Consumer(partial(_write_stems, stem_writers)) as stems_out:

            def emit(y: AudioArray) -> None:
                if y.shape[0]:
                    writing.put(y)
                    metering.put(y)

            for inp, out, stems in self._pieces("render: writing"):
                if before is not None and inp is not None:
                    _feed(before, inp)
                y = out if gain == 1.0 else out * gain
                emit(y if limiter is None else limiter.process(y))
                if stem_writers and stems is not None:
                    stems_out.put(stems if gain == 1.0 else tuple(s * gain for s in stems))
            if limiter is not None:
                emit(limiter.flush())
        return (None if before is None else before.summary()), after.summary()


def _write_stems(writers: list[AudioWriter], stems: tuple[AudioArray, ...]) -> None:
    """Append one piece of each processed stem to its writer."""
    for w, x in zip(writers, stems):
        w.write(x)


def _feed(meter: LoudnessMeter, x: AudioArray) -> None:
    """Meter a piece of audio (the reducer and the limiter may hand over empty pieces)."""
    if x.shape[0]:
        meter.feed(x)


class _Consumer:
    """A thread that hands each queued piece to ``consume``, so that metering and writing
    overlap making the output.

    The K-weighting (compiled, :mod:`planner.analysis.iir`), numpy's loops over large
    arrays and libsndfile's writes release the interpreter lock, so the thread runs on the
    other core. Pieces go through a bounded queue (at most :data:`_QUEUED_PIECES` waiting:
    constant memory) and must not be changed after :meth:`put`. An error in the thread is
    raised by the next :meth:`put`, or on leaving the ``with`` block, which waits for the thread.
    """

    def __init__(self, consume: Callable[[Any], None]) -> None:
        self._consume = consume
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=_QUEUED_PIECES)
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, name="cueplan-render", daemon=True)

    def _run(self) -> None:
        while (piece := self._queue.get()) is not None:
            if self._error is None:
                try:
                    self._consume(piece)
                except BaseException as exc:  # raised again by __exit__ in the caller
                    self._error = exc

    def __enter__(self) -> _Consumer:
        self._thread.start()
        return self

    def put(self, piece: Any) -> None:
        """Queue a piece (blocks while the queue is full); raises the thread's error at once if it had one."""
        if self._error is not None:
            raise self._error
        self._queue.put(piece)

    def __exit__(self, *exc: object) -> None:
        self._queue.put(None)
        self._thread.join()
        if self._error is not None and exc[0] is None:
            raise self._error


def gain_envelopes(plan: Plan, info: AudioInfo) -> tuple[GainEnvelope, GainEnvelope]:
    """The plan's dialogue and background gain curves at the programme's rate."""
    fs, total_s = info.sample_rate_hz, info.duration_s
    return (
        GainEnvelope(plan.events, fs, "dialogue", duration_s=total_s),
        GainEnvelope(plan.events, fs, "background", duration_s=total_s),
    )


def processed_stems(
    programme: Programme,
    envelopes: tuple[GainEnvelope, GainEnvelope],
    *,
    block_frames: int = DEFAULT_BLOCK_FRAMES,
    spans: Sequence[tuple[int, int]] | None = None,
) -> Iterator[ProgrammeBlock]:
    """The processed stems of a stems programme, block by block, before the loudness gain.

    Each block is ``ProgrammeBlock(start, d + b, d, b)``: the dialogue and background times
    their envelopes (:func:`gain_envelopes`), the samples :func:`render` writes to
    ``stems_out`` and sums to its output (times its loudness gain). ``spans``: only these
    sample ranges ``[start, stop)``, in order (default the whole programme).
    """
    for _, processed in _stem_blocks(programme, envelopes, block_frames, spans):
        yield processed


def _stem_blocks(
    programme: Programme,
    envelopes: tuple[GainEnvelope, GainEnvelope],
    block_frames: int,
    spans: Sequence[tuple[int, int]] | None = None,
) -> Iterator[tuple[ProgrammeBlock, ProgrammeBlock]]:
    """Each input block of a stems programme with its processed block (:func:`processed_stems`)."""
    if programme.kind != "stems":
        raise SettingsError("processed stems need a stems programme (dialogue and background)")
    ranges = [(0, None)] if spans is None else spans
    blocks = (
        blk for a, b in ranges for blk in iter_programme(programme, block_frames=block_frames, start_frame=a, stop_frame=b)
    )
    for blk in blocks:
        assert blk.dialogue is not None and blk.background is not None
        n = blk.n_frames
        d, b = (
            x if not env.touches(blk.start_frame, n) else x * env.block(blk.start_frame, n)[:, None]
            for env, x in zip(envelopes, (blk.dialogue, blk.background))
        )
        yield blk, ProgrammeBlock(blk.start_frame, d + b, d, b)


def _process(
    plan: Plan,
    programme: Programme,
    envelopes: tuple[GainEnvelope, GainEnvelope],
    block_frames: int,
    progress: Progress,
    stage: str,
) -> Iterator[tuple[AudioArray | None, AudioArray, tuple[AudioArray, AudioArray] | None]]:
    """Yield ``(input mix block, processed block, processed stems)`` in time order.

    For a mix the processed pieces lag the input (the reducer's look-ahead) and the last
    one comes with no input block; the processed pieces add up to the programme's length.
    """
    info = programme.info
    fs = info.sample_rate_hz
    total_s = info.duration_s
    g_dialogue, g_background = envelopes
    if programme.kind == "stems":
        for blk, done in _stem_blocks(programme, envelopes, block_frames):
            assert done.dialogue is not None and done.background is not None
            yield blk.mix, done.mix, (done.dialogue, done.background)
            progress(stage, min((blk.start_frame + blk.n_frames) / fs, total_s), total_s)
        return
    reducer = MixReducer(g_background, g_dialogue, layout=info.layout, activity=plan.analysis.activity)
    for blk in iter_programme(programme, block_frames=block_frames):
        out, _ = reducer.process(blk.mix)
        yield blk.mix, out, None
        progress(stage, min((blk.start_frame + blk.n_frames) / fs, total_s), total_s)
    out, _ = reducer.flush()
    yield None, out, None


def _check_matches(plan: Plan, programme: Programme) -> None:
    """The plan must have been made for audio of this rate, channel count and length (within a block)."""
    a, b = plan.analysis.audio, programme.info
    if (a.sample_rate_hz, a.n_channels) != (b.sample_rate_hz, b.n_channels):
        raise PlanFileError(
            f"the plan was made for {a.n_channels}-channel audio at {a.sample_rate_hz} Hz, the programme is "
            f"{b.n_channels}-channel at {b.sample_rate_hz} Hz; render the audio the plan was analysed from",
            field="analysis.audio",
        )
    if abs(a.n_frames - b.n_frames) > STEM_LENGTH_TOLERANCE_FRAMES:
        raise PlanFileError(
            f"the plan was made for {a.duration_s:.3f} s of audio, the programme lasts {b.duration_s:.3f} s; "
            "render the audio the plan was analysed from",
            field="analysis.audio.n_frames",
        )


def _subtype(input_subtype: str, out_path: Path) -> str:
    """The input's sample format where the output format can hold it, else 24-bit PCM."""
    if out_path.suffix.lower() == ".flac" and input_subtype not in _FLAC_SUBTYPES:
        return "PCM_24"
    return input_subtype


def _description(sha: str, settings: RenderSettings, label: str, ceiling: float | None, kind: str) -> str:
    """ASCII metadata (at most 256 characters): plan hash and render settings."""
    tp = "none" if ceiling is None else f"{ceiling:g} dBTP"
    text = f"cueplan render; plan sha256 {sha}; from {kind}; loudness {settings.loudness} ({label}); ceiling {tp}"
    text = text.encode("ascii", "replace").decode("ascii")
    return text if len(text) <= 256 else text[:256]


__all__ = ["RenderReport", "STEM_NAMES", "plan_sha256", "render"]
