"""Per-cue masking scores in one streaming pass over the programme (pass 2).

For each cue, over the speech frames (``activity.is_speech``) of its aligned span:

- ``speech_db`` / ``background_db``: K-weighted levels (ITU-R BS.1770-5, channels summed with
  the Table 3 weights, LFE left out), ungated, LUFS; ``sbld_lu`` their difference;
- ``sii``: ANSI S3.5-1997 SII of the cue's average speech and background spectra at the
  listening level, for the analysis hearing profile; ``sii_by_profile`` the same for
  ``normal`` and every age preset (and, for 5.1, each ``name@stereo-fold-down``: the ITU-R
  BS.775 fold-down heard on stereo loudspeakers);
- ``sii_short``: short-time SII after Rhebergen and Versfeld (2005), the mean over speech
  frames of the SII of the cue's speech spectrum against each frame's background;
- ``stoi``: STOI (Taal et al. 2011, the ``pystoi`` package) of the mix against the clean
  dialogue over the span, for stems only.

Stems (``kind="stems"``) give the speech and the background directly. For the mix alone
(``kind="mix"``) they are estimated by :mod:`planner.analysis.estimate`. What the listener
hears is the loudspeaker sum (:mod:`planner.analysis.features`); spectra and levels are
dB SPL at the listening level (:mod:`planner.analysis.scoring`).

Memory: the band analysers' overlap, the noise tracker's state, and per open cue its
accumulators (sums over frames; the frames kept for the short-time SII, at most
:data:`~planner.analysis.cuepass.ESII_MAX_FRAMES`; the samples STOI needs, at most
:data:`~planner.analysis.cuepass.STOI_MAX_S`). A cue stays
open from :data:`~planner.analysis.estimate.CONTEXT_S` before its span to as long after.
"""

from __future__ import annotations

import dataclasses
import importlib
from collections.abc import Iterable, Iterator, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from typing import TYPE_CHECKING, Literal

import numpy as np

from planner._typing import FloatArray
from planner.analysis.channels import detection_signal
from planner.analysis.cuepass import (
    CLIP_RUN,
    STOI_MAX_S,
    STOI_MIN_S,
    CueAccumulator,
    clipped_runs,
    frame_runs,
    frame_start,
    listener_mono,
)
from planner.analysis.estimate import CONTEXT_S, Spatial, estimate_mix, tracked_view
from planner.analysis.features import FLAT, N_FEATURES, ProgrammeFeatures
from planner.analysis.minstats import MinimumStatistics
from planner.analysis.scoring import (
    FOLD_DOWN_SUFFIX,
    TrailingMean,
    analysis_thresholds,
    esii_frames,
    levels,
    short_time_sii,
    sii_by_profile,
    spl_offset_db,
)
from planner.analysis.sii import N_BANDS
from planner.analysis.verdicts import verdict
from planner.errors import InputError
from planner.model import AudioInfo, CueScore, CueTiming, SpeechActivity
from planner.progress import Progress, no_progress
from planner.settings import AnalysisSettings
from planner.units import nearest_int

if TYPE_CHECKING:
    from planner.io.audio import ProgrammeBlock

__all__ = ["score_cues", "score_spans", "verdict"]

#: Audio read before a cue's span where a stems pass resumes after a gap, seconds: the band
#: windows (80 ms) and the decimator before them, the ESII windows (35 ms) and the K-weighting
#: (its slowest pole, 0.995 at 48 kHz, decays by over 1000 dB in 0.5 s) have all settled, so
#: the cue's frames are those of a pass from sample 0 (tests/test_masking.py).
SKIP_LEAD_S = 0.5
#: Audio read after a cue's span, seconds: enough for the band windows of its last frames.
SKIP_TAIL_S = 0.25
#: Gaps shorter than this are read through rather than skipped, seconds (restarting the
#: features costs about as much as analysing a second of stereo stems).
SKIP_MIN_GAP_S = 1.0

#: STOI jobs that may wait for the thread before the pass waits for the oldest (each holds a cue's audio).
_STOI_WAITING = 8


class _ScoringPass:
    """State of the streaming pass; :meth:`feed` every block, then :meth:`finish`."""

    def __init__(
        self,
        info: AudioInfo,
        kind: Literal["mix", "stems"],
        timings: Sequence[CueTiming],
        activity: SpeechActivity,
        settings: AnalysisSettings,
        stoi: bool,
        k_power: FloatArray | None = None,
    ) -> None:
        self.info, self.kind, self.activity = info, kind, activity
        self.frame_s = activity.frame_s
        self.hop = self.frame_s * info.sample_rate_hz
        self.features = ProgrammeFeatures(info, kind, frame_s=self.frame_s, k_power=k_power)
        self.offset_db = spl_offset_db(settings.listening_level_db_spl)
        self.hearing_name, self.thresholds = analysis_thresholds(settings)
        self.windows = TrailingMean(esii_frames(self.frame_s))
        self.spatial = kind == "mix" and info.layout != "mono"
        self.structure: Spatial = (
            "none" if not self.spatial else ("mid-side" if info.layout == "stereo" else "centre-others")
        )
        n_tracked = N_FEATURES * (2 if info.layout == "5.1" else 1)
        self.tracker = MinimumStatistics(n_tracked, frame_s=self.frame_s) if kind == "mix" else None
        self.pending = sorted(timings, key=_by_start)
        self.context_frames = nearest_int(CONTEXT_S / self.frame_s)
        self.open: list[CueAccumulator] = []
        self.scores: dict[int, CueScore] = {}
        self.frames_done = 0
        self.samples_done = 0
        self.clip_carry = np.zeros(CLIP_RUN - 1, dtype=bool)
        # STOI (stems only) in a thread beside the pass: (cue index, its STOI job), oldest first
        self.stoi_pool = ThreadPoolExecutor(1, thread_name_prefix="cueplan-stoi") if stoi and kind == "stems" else None
        self.stoi_jobs: list[tuple[int, Future[tuple[float | None, str]]]] = []

    # ----------------------------------------------------------------- streaming

    def _speech_at(self, frames: np.ndarray) -> np.ndarray:
        mask = self.activity.is_speech
        inside = (frames >= 0) & (frames < mask.shape[0])
        out = np.zeros(frames.shape, dtype=bool)
        out[inside] = mask[frames[inside]]
        return out

    def _open(self, until_sample: int | None) -> None:
        """Open the pending cues whose context starts before ``until_sample`` (all if None)."""
        while self.pending:
            first = nearest_int(self.pending[0].aligned_start_s / self.frame_s) - self.context_frames
            if until_sample is not None and frame_start(max(first, 0), self.hop) >= until_sample:
                return
            timing = self.pending.pop(0)
            self.open.append(
                CueAccumulator(
                    timing, frame_s=self.frame_s, hop=self.hop, context_frames=self.context_frames, names=self._names()
                )
            )

    def feed(self, block: ProgrammeBlock, bands: list[FloatArray | None] | None = None) -> None:
        """Add one block (contiguous with the previous one, or stems after a gap: :func:`score_spans`);
        ``bands``: its band powers if computed elsewhere."""
        if block.start_frame != self.samples_done:
            self._skip_to(block.start_frame, given_bands=bands is not None)
        end = self.samples_done + block.n_frames
        self._open(end)
        self._samples(block)
        self._frames(self.features.process(block, bands))
        self.samples_done = end
        self._close(final=False)

    def _skip_to(self, start: int, *, given_bands: bool) -> None:
        """Restart the features at sample ``start`` after a gap (stems only; see :func:`score_spans`).

        Every open cue whose span has begun must have all of it before the gap (it is scored
        now; the others wait again), and the next cue's span must start at least
        :data:`SKIP_LEAD_S` after ``start``, where the restarted band windows and K-weighting
        have settled.
        """
        frame = nearest_int(start / self.hop)
        if (
            self.kind != "stems"
            or given_bands
            or start < self.samples_done
            or frame_start(frame, self.hop) != start
        ):
            raise InputError(
                f"audio blocks must be contiguous from sample 0; got a block at {start}, "
                f"expected {self.samples_done}; pass the blocks of iter_programme from the start (stems scored "
                "without bands= may skip ahead to the first sample of a frame, as score_spans gives)"
            )
        lead = nearest_int(SKIP_LEAD_S / self.frame_s)
        # cues opened for their context whose span has not begun wait again (stems scores
        # read no context)
        waiting = [c for c in self.open if c.f0 >= self.frames_done and c.s0 >= self.samples_done]
        self.open = [c for c in self.open if c not in waiting]
        self.pending = sorted([c.timing for c in waiting] + self.pending, key=_by_start)
        for cue in self.open:
            if cue.f1 > self.frames_done or cue.s1 > self.samples_done:
                raise InputError(
                    f"cue {cue.timing.index} is still being read where the audio skips to sample {start}; "
                    "read the sample ranges score_spans gives"
                )
        if self.pending and nearest_int(self.pending[0].aligned_start_s / self.frame_s) < frame + lead:
            raise InputError(
                f"cue {self.pending[0].index} starts within "
                f"{SKIP_LEAD_S:g} s of sample {start}, where the audio resumes; read the sample ranges score_spans gives"
            )
        self._close(final=True)
        self.features = ProgrammeFeatures(self.info, self.kind, frame_s=self.frame_s)
        self.windows = TrailingMean(esii_frames(self.frame_s))
        self.clip_carry = np.zeros(CLIP_RUN - 1, dtype=bool)
        self.frames_done, self.samples_done = frame, start

    def finish(self, bands: list[FloatArray | None] | None = None) -> tuple[CueScore, ...]:
        """Scores of every cue, in index order, after the last block (``bands``: the band powers' flush)."""
        self._frames(self.features.flush(bands))
        self._open(None)
        self._close(final=True)
        self._collect_stoi(0)
        return tuple(self.scores[i] for i in sorted(self.scores))

    def close(self) -> None:
        """Stop the STOI thread (after :meth:`finish`, or when the pass is abandoned)."""
        if self.stoi_pool is not None:
            self.stoi_pool.shutdown(wait=True, cancel_futures=True)

    def _names(self) -> list[str]:
        if self.kind == "stems":
            return ["speech", "background"] + (["speech_fold", "background_fold"] if self.info.layout == "5.1" else [])
        names = ["total", "tracked"]
        if self.spatial:
            names += ["mixed", "clean"]
        if self.info.layout == "5.1":
            names += ["fold_total", "fold_tracked", "fold_mixed", "fold_clean"]
        return names

    def _frames(self, views: dict[str, FloatArray]) -> None:
        n = next(iter(views.values())).shape[0]
        if n == 0:
            return
        if self.tracker is not None:
            # What the tracker follows per listening arrangement (estimate.tracked_view): a stereo
            # mix's mid, else the listener power; the 5.1 fold-down's mid.
            main = tracked_view(self.structure)
            both = views[main] if self.info.layout != "5.1" else np.hstack([views[main], views["fold_mixed"]])
            tracked = self.tracker.process(both)
            views["tracked"] = tracked[:, :N_FEATURES]
            if self.info.layout == "5.1":
                views["fold_tracked"] = tracked[:, N_FEATURES:]
        proxy_name = "background" if self.kind == "stems" else ("clean" if self.spatial else None)
        proxy = self.windows.process(views[proxy_name][:, :N_BANDS]) if proxy_name else None
        g0 = self.frames_done
        j = np.arange(g0, g0 + n)
        is_speech = self._speech_at(j)
        probability = np.zeros(n, dtype=np.float32)
        inside = j < self.activity.probability.shape[0]
        probability[inside] = self.activity.probability[j[inside]]
        for cue in self.open:
            cue.add_frames(g0, views, is_speech, probability, proxy)
        self.frames_done += n

    def _samples(self, block: ProgrammeBlock) -> None:
        b0, n = self.samples_done, block.n_frames
        checked = [block.mix] if self.kind == "mix" else [block.dialogue, block.background]
        runs, self.clip_carry = clipped_runs(checked, self.clip_carry)
        # the speech flag of each frame the block touches, repeated over its samples
        first, counts = frame_runs(b0, n, self.hop)
        speech = np.repeat(self._speech_at(np.arange(first, first + counts.shape[0])), counts)
        detection = detection_signal(block.mix, self.info.layout) if self.kind == "mix" else None
        mono_mix = mono_clean = None
        # the audio STOI reads, kept only when STOI runs
        if (
            self.stoi_pool is not None
            and block.dialogue is not None
            and any(c.keep_audio and c.s0 < b0 + n and c.s1 > b0 for c in self.open)
        ):
            mono_mix = listener_mono(block.mix, self.info.layout)
            mono_clean = listener_mono(block.dialogue, self.info.layout)
        for cue in self.open:
            cue.add_samples(b0, runs, speech, detection, mono_mix, mono_clean)

    def _close(self, *, final: bool) -> None:
        still = []
        for cue in self.open:
            if final or (cue.e1 <= self.frames_done and cue.s1 <= self.samples_done):
                self.scores[cue.timing.index] = self._score(cue)
                if self.stoi_pool is not None and cue.n_speech:
                    self.stoi_jobs.append((cue.timing.index, self.stoi_pool.submit(_stoi, cue, self.info.sample_rate_hz)))
            else:
                still.append(cue)
        self.open = still
        self._collect_stoi(_STOI_WAITING)

    def _collect_stoi(self, keep: int) -> None:
        """Put the STOI of the oldest jobs into their scores until at most ``keep`` are left.

        The STOI note goes first in the reason, as the other notes of a stems score follow it.
        """
        while len(self.stoi_jobs) > keep:
            index, job = self.stoi_jobs.pop(0)
            value, note = job.result()
            score = self.scores[index]
            if score.method != "none":
                reason = "; ".join(part for part in (note, score.reason) if part)
                self.scores[index] = dataclasses.replace(score, stoi=value, reason=reason)

    # ----------------------------------------------------------------- scores

    def _no_score(self, cue: CueAccumulator, reason: str) -> CueScore:
        return CueScore(
            index=cue.timing.index, method="none", speech_s=cue.n_speech * self.frame_s, speech_db=None,
            background_db=None, sbld_lu=None, sii=None, sii_short=None, stoi=None, confidence=0.0,
            verdict="no-score", reason=reason,
        )  # fmt: skip

    def _score(self, cue: CueAccumulator) -> CueScore:
        t = cue.timing
        if cue.n_speech == 0:
            return self._no_score(
                cue, f"no speech detected in the cue's aligned span ({t.aligned_start_s:.2f}-{t.aligned_end_s:.2f} s)"
            )
        mean = cue.means()
        notes: list[str] = []
        if self.kind == "stems":
            # STOI comes from the thread (_close, _collect_stoi)
            speech, background = mean["speech"], mean["background"]
            fold = (mean["speech_fold"], mean["background_fold"]) if self.info.layout == "5.1" else None
            rows = np.vstack(cue.esii_rows) if cue.esii_rows else np.zeros((0, N_BANDS))
            confidence = 1.0
        else:
            speech, background, fold, rows, confidence, est_notes = self._estimate(cue, mean)
            notes.extend(est_notes)
            notes.append("no STOI: it needs the clean dialogue (stems)")
        if not speech[FLAT] > 0.0:
            what = "the dialogue stem" if self.kind == "stems" else "the programme"
            return self._no_score(cue, f"{what} is silent over the cue's speech frames")
        lv = levels(speech, background, self.offset_db)
        by_profile = sii_by_profile(lv.speech_spectrum_db, lv.background_spectrum_db, self.thresholds)
        threshold = self.thresholds[self.hearing_name]
        sii_value = by_profile[self.hearing_name]
        sii_short = short_time_sii(lv.speech_spectrum_db, rows, self.offset_db, threshold)
        result = verdict(sii_value, lv.sbld_lu)
        if fold is not None:
            fl = levels(fold[0], fold[1], self.offset_db)
            folded = sii_by_profile(
                fl.speech_spectrum_db, fl.background_spectrum_db, self.thresholds, suffix=FOLD_DOWN_SUFFIX
            )
            by_profile.update(folded)
            fold_verdict = verdict(folded[self.hearing_name + FOLD_DOWN_SUFFIX], fl.sbld_lu)
            if fold_verdict != result:
                notes.append(f"on the stereo fold-down: {fold_verdict}")
        if lv.background_db is None:
            notes.append("the background is silent under this cue")
        if cue.clipped:
            notes.append("clipped audio in this cue (full-scale runs of 3+ samples): scores may be unreliable")
        return CueScore(
            index=t.index,
            method="stems" if self.kind == "stems" else "mix",
            speech_s=cue.n_speech * self.frame_s,
            speech_db=lv.speech_db,
            background_db=lv.background_db,
            sbld_lu=lv.sbld_lu,
            sii=sii_value,
            sii_short=sii_short,
            stoi=None,
            confidence=confidence,
            verdict=result,
            reason="; ".join(notes),
            speech_spectrum_db=tuple(float(v) for v in lv.speech_spectrum_db),
            background_spectrum_db=tuple(float(v) for v in lv.background_spectrum_db),
            sii_by_profile=by_profile,
        )

    def _estimate(
        self, cue: CueAccumulator, mean: dict[str, FloatArray]
    ) -> tuple[FloatArray, FloatArray, tuple[FloatArray, FloatArray] | None, FloatArray, float, list[str]]:
        fraction = cue.wada.speech_fraction()
        layout = self.info.layout
        # Listener speech power (flat) implied by the WADA-SNR of the detection signal: speech
        # is equal in L and R (heard twice the mid's power), or alone in C (heard once).
        if fraction is None:
            wada_speech = None
        elif layout == "stereo":
            wada_speech = 2.0 * fraction * mean["mixed"][FLAT]
        elif layout == "5.1":
            wada_speech = fraction * mean["mixed"][FLAT]
        else:
            wada_speech = fraction * mean["total"][FLAT]
        est = estimate_mix(cue.evidence("", self.structure, wada_speech))
        fold = None
        if layout == "5.1":
            fold_est = estimate_mix(cue.evidence("fold_", "mid-side", wada_speech))
            fold = (fold_est.speech, fold_est.background)
        if self.spatial and cue.esii_rows:
            # Background per frame: the estimate, following the speech-free part's fluctuation.
            proxy = np.vstack(cue.esii_rows)
            level = np.maximum(proxy.mean(axis=0), 1e-20)
            rows = est.background[None, :N_BANDS] * proxy / level
        else:
            rows = est.background[None, :N_BANDS]
        return est.speech, est.background, fold, rows, est.confidence, list(est.notes)

def _stoi(cue: CueAccumulator, sample_rate_hz: int) -> tuple[float | None, str]:
    """STOI of a cue's mono mix against its clean dialogue (pystoi), or None and why not.

    Runs in a thread, so pystoi's warning for too few frames left after its silent-frame
    removal cannot be caught (the warnings filters are process-wide): the same steps of
    pystoi (resampling to its rate, silent-frame removal, STFT) count the frames first, and
    pystoi then gets the resampled signals, which gives what it gives for the originals.
    """
    if not cue.keep_audio:
        return None, f"no STOI: the span must be {STOI_MIN_S:g}-{STOI_MAX_S:g} s long"
    # imported here: pystoi loads scipy.signal (about 0.6 s), which only stems scoring needs
    from pystoi import stoi as pystoi_stoi
    from pystoi import utils as stoi_utils

    constants = importlib.import_module("pystoi.stoi")  # its rate, frame and segment lengths
    clean, degraded = np.concatenate(cue.clean), np.concatenate(cue.degraded)
    if sample_rate_hz != constants.FS:
        clean = stoi_utils.resample_oct(clean, constants.FS, sample_rate_hz)
        degraded = stoi_utils.resample_oct(degraded, constants.FS, sample_rate_hz)
    kept, _ = stoi_utils.remove_silent_frames(clean, degraded, constants.DYN_RANGE, constants.N_FRAME, constants.N_FRAME // 2)
    if stoi_utils.stft(kept, constants.N_FRAME, constants.NFFT, overlap=2).shape[0] < constants.N:
        return None, "no STOI: too little dialogue above silence in the span"
    return float(pystoi_stoi(clean, degraded, constants.FS)), ""


def score_cues(
    blocks: Iterable[ProgrammeBlock],
    *,
    info: AudioInfo,
    kind: Literal["mix", "stems"],
    timings: Sequence[CueTiming],
    activity: SpeechActivity,
    settings: AnalysisSettings,
    progress: Progress | None = None,
    bands: Iterable[list[FloatArray | None]] | None = None,
    stoi: bool = True,
    k_power: FloatArray | None = None,
) -> tuple[CueScore, ...]:
    """Score every cue for masking in one pass over the programme's blocks.

    Parameters
    ----------
    blocks : iterable of ProgrammeBlock
        The programme from sample 0, contiguous (``planner.io.audio.iter_programme``).
    info : AudioInfo
        The programme's format (rate, layout).
    kind : {"mix", "stems"}
        ``stems``: score from the dialogue and background stems; ``mix``: estimate them.
    timings : sequence of CueTiming
        Aligned cue spans (``aligned_start_s``/``aligned_end_s``, seconds).
    activity : SpeechActivity
        Speech frames of the programme (10 ms).
    settings : AnalysisSettings
        Listening level (dB SPL at -23 LUFS) and hearing profile.
    progress : Progress, optional
        Called as ``progress("scoring", seconds done, seconds total)``.
    bands : iterable of lists of arrays, optional
        The band powers of the same blocks computed elsewhere (e.g. in another process):
        ``ProgrammeFeatures(info, kind, frame_s=activity.frame_s)``'s ``band_powers(block)``
        for every block, then its ``flush_band_powers()``. Computed here when omitted; the
        scores are the same.
    stoi : bool
        Compute STOI from stems (default); False leaves every ``stoi`` None (no reason
        given), for callers that read only the SII and the levels.
    k_power : ndarray, optional
        For a mix: the K-weighted power of every frame of every analysed signal, measured
        in pass 1 (:class:`~planner.analysis.framepower.SignalKPower`), so that nothing is
        K-weighted here; ``bands`` must then come from features made with it too. The
        scores equal those computed without it to float32 rounding of the frame powers.

    Returns
    -------
    tuple of CueScore
        One per timing, in ``index`` order.

    Raises
    ------
    InputError
        If the blocks are not contiguous from sample 0, stems blocks lack a stem, or
        ``bands`` ends before the blocks do.
    """
    report = progress or no_progress
    scoring = _ScoringPass(info, kind, timings, activity, settings, stoi, k_power)
    given = None if bands is None else iter(bands)
    try:
        for block in blocks:
            scoring.feed(block, None if given is None else _next_bands(given))
            report("scoring", scoring.samples_done / info.sample_rate_hz, info.duration_s)
        return scoring.finish(None if given is None else _next_bands(given))
    finally:
        scoring.close()


def score_spans(timings: Sequence[CueTiming], info: AudioInfo, frame_s: float) -> tuple[tuple[int, int], ...]:
    """The sample ranges ``[start, stop)`` a stems scoring pass must read to score these cues alone.

    Each cue's span with :data:`SKIP_LEAD_S` before it and :data:`SKIP_TAIL_S` after, ranges
    closer than :data:`SKIP_MIN_GAP_S` merged, every range starting on the first sample of an
    analysis frame. :func:`score_cues` of the stems blocks of these ranges alone (no
    ``bands=``) gives the scores of a pass over the whole programme. A frame hop that is not
    a whole number of samples gives the whole programme.
    """
    hop = frame_s * info.sample_rate_hz
    if not timings:
        return ()
    if abs(hop - round(hop)) > 1e-9:
        return ((0, info.n_frames),)
    lead, tail = nearest_int(SKIP_LEAD_S / frame_s), nearest_int(SKIP_TAIL_S * info.sample_rate_hz)
    min_gap = nearest_int(SKIP_MIN_GAP_S * info.sample_rate_hz)
    spans: list[list[int]] = []
    for t in sorted(timings, key=_by_start):
        f0 = nearest_int(t.aligned_start_s / frame_s)
        f1 = max(nearest_int(t.aligned_end_s / frame_s), f0)
        start = frame_start(max(f0 - lead, 0), hop)
        stop = min(frame_start(f1, hop) + tail, info.n_frames)
        if spans and start - spans[-1][1] < min_gap:
            spans[-1][1] = max(spans[-1][1], stop)
        else:
            spans.append([start, stop])
    return tuple((a, b) for a, b in spans if b > a)


def _by_start(timing: CueTiming) -> tuple[float, int]:
    """Sort key: cues in order of their aligned start."""
    return timing.aligned_start_s, timing.index


def _next_bands(given: Iterator[list[FloatArray | None]]) -> list[FloatArray | None]:
    try:
        return next(given)
    except StopIteration:
        raise InputError(
            "bands= ended before the audio blocks; pass one entry per block and one for the flush"
        ) from None
