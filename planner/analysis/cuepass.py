"""What the scoring pass keeps of one cue while the programme streams past: sums, not audio.

A :class:`CueAccumulator` is opened :data:`~planner.analysis.estimate.CONTEXT_S` before its
cue's aligned span and closed as long after it. Per analysis frame it adds the feature
vectors (:mod:`planner.analysis.features`) of the span's speech frames and, weighted by
nearness, of the speech-free frames either side of the span's middle; it keeps the frames the
short-time SII needs (at most :data:`ESII_MAX_FRAMES`), the WADA-SNR sums of the detection
signal on the speech samples, the samples STOI needs (spans of :data:`STOI_MIN_S` to
:data:`STOI_MAX_S` only) and whether the audio clipped in the span.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import numpy.typing as npt

from planner._typing import AudioArray, FloatArray
from planner.analysis.channels import fold_down_stereo
from planner.analysis.estimate import CONTEXT_DECAY_S, ContextMeans, MixEvidence, Spatial
from planner.analysis.features import N_FEATURES
from planner.analysis.wada import WadaAccumulator
from planner.model import CueTiming
from planner.units import nearest_int

#: Shortest span STOI is computed on, seconds: 30 frames of 25.6 ms at 50 % overlap (pystoi N).
STOI_MIN_S = 0.4
#: Longest span STOI is computed on, seconds (bounds the samples held per cue).
STOI_MAX_S = 30.0
#: Most frames kept per cue for the short-time SII; longer cues keep every k-th speech frame.
ESII_MAX_FRAMES = 6000
#: A sample at or above this magnitude counts as full scale; :data:`CLIP_RUN` in a row count as
#: clipping (common practice for detecting clipped PCM).
CLIP_LEVEL = 0.999
CLIP_RUN = 3


def frame_start(frame: int, hop: float) -> int:
    """First sample of analysis frame ``frame`` (nearest, halves up)."""
    return nearest_int(frame * hop)


def frame_of_sample(samples: npt.NDArray[np.int64], hop: float) -> npt.NDArray[np.int64]:
    """Analysis frame holding each sample: the largest ``j`` with ``frame_start(j) <= n``."""
    return np.ceil((samples + 0.5) / hop).astype(np.int64) - 1


def frame_runs(b0: int, n: int, hop: float) -> tuple[int, npt.NDArray[np.int64]]:
    """The frames holding samples ``b0 .. b0 + n - 1``: the first one, and how many of those
    samples each holds, so that ``np.repeat(per_frame, counts)`` equals ``per_frame`` looked up
    at :func:`frame_of_sample` of every sample (no frame for ``n`` = 0)."""
    if n == 0:
        return 0, np.zeros(0, dtype=np.int64)
    j0, j1 = (int(j) for j in frame_of_sample(np.array([b0, b0 + n - 1], dtype=np.int64), hop))
    # first sample of each later frame: frame_start, then moved so that frame_of_sample agrees
    # exactly (the two may differ by float rounding for a fractional hop)
    j = np.arange(j0 + 1, j1 + 1, dtype=np.int64)
    first = np.floor(j * hop + 0.5).astype(np.int64)
    for _ in range(2):
        first += frame_of_sample(first, hop) < j
        first -= frame_of_sample(first - 1, hop) >= j
    edges = np.concatenate([[b0], first, [b0 + n]])
    return j0, np.diff(edges)


def listener_mono(x: AudioArray, layout: str) -> FloatArray:
    """One signal for STOI: mid of stereo, mid of the BS.775 fold-down of 5.1, or the mono channel."""
    if layout == "5.1":
        x = fold_down_stereo(x)
    if x.shape[1] == 2:
        return 0.5 * (x[:, 0].astype(np.float64) + x[:, 1])
    return x[:, 0].astype(np.float64)


def clipped_runs(
    blocks: Sequence[AudioArray | None], carry: npt.NDArray[np.bool_]
) -> tuple[npt.NDArray[np.bool_], npt.NDArray[np.bool_]]:
    """Samples that end a run of :data:`CLIP_RUN` full-scale samples (any channel), and the new carry.

    ``carry`` holds the full-scale flags of the previous block's last ``CLIP_RUN - 1`` samples.
    """
    n = next(b.shape[0] for b in blocks if b is not None)
    present = [x for x in blocks if x is not None and x.size]
    if n >= CLIP_RUN - 1 and all(x.max() < CLIP_LEVEL and x.min() > -CLIP_LEVEL for x in present):
        # no full-scale sample (the usual case, found by two fast reductions; a NaN fails
        # them): no run ends here, and the next block starts with an empty carry
        return np.zeros(n, dtype=bool), np.zeros(CLIP_RUN - 1, dtype=bool)
    full = np.zeros(n, dtype=bool)
    for x in present:
        for column in range(x.shape[1]):  # column by column: any(axis=1) is slow on interleaved frames
            full |= np.abs(x[:, column]) >= CLIP_LEVEL
    ext = np.concatenate([carry, full])
    runs = np.ones(n, dtype=bool)
    for k in range(CLIP_RUN):
        runs &= ext[k : k + n]
    return runs, ext[ext.size - (CLIP_RUN - 1) :]


class CueAccumulator:
    """Running sums of one cue; see the module docstring.

    Parameters
    ----------
    timing : CueTiming
        The cue's aligned span.
    frame_s, hop : float
        Analysis frame, seconds, and the same in samples.
    context_frames : int
        Frames of context either side of the span.
    names : sequence of str
        The feature views to sum (``ProgrammeFeatures`` names plus ``tracked`` ones).
    """

    def __init__(self, timing: CueTiming, *, frame_s: float, hop: float, context_frames: int, names: Sequence[str]) -> None:
        self.timing = timing
        self.frame_s = frame_s
        self.f0 = nearest_int(timing.aligned_start_s / frame_s)
        self.f1 = max(nearest_int(timing.aligned_end_s / frame_s), self.f0)
        self.e0, self.e1 = max(self.f0 - context_frames, 0), self.f1 + context_frames
        self.s0, self.s1 = frame_start(self.f0, hop), frame_start(self.f1, hop)
        self.stride = max(1, -(-(self.f1 - self.f0) // ESII_MAX_FRAMES))
        self.speech = {n: np.zeros(N_FEATURES) for n in names}
        self.middle = (self.f0 + self.f1) // 2
        self.context = [{n: np.zeros(N_FEATURES) for n in names} for _ in range(2)]  # before, after
        self.n_context = [0.0, 0.0]
        self.n_speech = 0
        self.probability = 0.0
        self.esii_rows: list[FloatArray] = []
        self.wada = WadaAccumulator()
        self.keep_audio = STOI_MIN_S <= (self.f1 - self.f0) * frame_s <= STOI_MAX_S
        self.clean: list[npt.NDArray[np.float32]] = []
        self.degraded: list[npt.NDArray[np.float32]] = []
        self.clipped = False

    def add_frames(
        self,
        g0: int,
        views: Mapping[str, FloatArray],
        is_speech: npt.NDArray[np.bool_],
        probability: FloatArray,
        proxy: FloatArray | None,
    ) -> None:
        """Add the frames ``g0, g0 + 1, ...`` of ``views`` that fall in this cue's range.

        ``is_speech`` and ``probability`` are the speech track over the same frames; ``proxy``
        the windowed band powers kept for the short-time SII.
        """
        n = is_speech.shape[0]
        lo, hi = max(g0, self.e0), min(g0 + n, self.e1)
        if lo >= hi:
            return
        j = np.arange(lo, hi)
        rows = slice(lo - g0, hi - g0)
        speech = is_speech[rows]
        sel = speech & (j >= self.f0) & (j < self.f1)
        # Speech-free frames on each side of the span's middle, weighted by nearness.
        distance_s = np.maximum(np.maximum(self.f0 - j, j - self.f1 + 1), 0) * self.frame_s
        near = np.where(speech, 0.0, np.exp(-distance_s / CONTEXT_DECAY_S))
        sides = (np.where(j < self.middle, near, 0.0), np.where(j >= self.middle, near, 0.0))
        for name in self.speech:
            part = views[name][rows]
            self.speech[name] += part[sel].sum(axis=0)
            for side, w in zip(self.context, sides):
                side[name] += w @ part
        self.n_speech += int(sel.sum())
        for k, w in enumerate(sides):
            self.n_context[k] += float(w.sum())
        self.probability += float(probability[rows][sel].astype(np.float64).sum())
        if proxy is not None:
            keep = sel & ((j - self.f0) % self.stride == 0)
            self.esii_rows.append(proxy[rows][keep])

    def add_samples(
        self,
        b0: int,
        runs: npt.NDArray[np.bool_],
        speech: npt.NDArray[np.bool_],
        detection: FloatArray | None,
        mono_mix: FloatArray | None,
        mono_clean: FloatArray | None,
    ) -> None:
        """Add the samples ``b0, b0 + 1, ...`` that fall in the span.

        ``runs`` marks clipping, ``speech`` the samples of speech frames; ``detection`` feeds
        the WADA-SNR (mix only); ``mono_mix`` / ``mono_clean`` are kept for STOI (stems only).
        """
        n = runs.shape[0]
        lo, hi = max(b0, self.s0), min(b0 + n, self.s1)
        if lo >= hi:
            return
        rows = slice(lo - b0, hi - b0)
        self.clipped |= bool(runs[rows].any())
        if detection is not None:
            self.wada.add(detection[rows][speech[rows]])
        if self.keep_audio and mono_mix is not None and mono_clean is not None:
            self.degraded.append(mono_mix[rows].astype(np.float32))
            self.clean.append(mono_clean[rows].astype(np.float32))

    def means(self) -> dict[str, FloatArray]:
        """Mean feature vectors over the span's speech frames (call only with speech frames)."""
        return {k: v / self.n_speech for k, v in self.speech.items()}

    def evidence(self, prefix: str, spatial: Spatial, wada_speech_flat: float | None) -> MixEvidence:
        """The mix-only evidence of this cue for the views named ``prefix + total`` etc."""
        mean = self.means()
        sides: list[ContextMeans | None] = []
        for sums, n in zip(self.context, self.n_context):
            if n == 0:
                sides.append(None)
                continue
            ctx = {k: v / n for k, v in sums.items()}
            sides.append(
                ContextMeans(
                    n=n,
                    total=ctx[f"{prefix}total"],
                    tracked=ctx[f"{prefix}tracked"],
                    mixed=ctx.get(f"{prefix}mixed"),
                    clean=ctx.get(f"{prefix}clean"),
                )
            )
        return MixEvidence(
            spatial=spatial,
            total=mean[f"{prefix}total"],
            tracked=mean[f"{prefix}tracked"],
            speech_probability=self.probability / self.n_speech,
            before=sides[0],
            after=sides[1],
            mixed=mean.get(f"{prefix}mixed"),
            clean=mean.get(f"{prefix}clean"),
            wada_speech_flat=wada_speech_flat,
        )
