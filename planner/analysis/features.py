"""Per-frame powers of a programme, block by block: bands, K-weighted and flat, per listening view.

Every 10 ms analysis frame gets, for each mono signal analysed, a feature vector of
:data:`N_FEATURES` powers (mean square re digital full scale):

- ``[0:18]`` the 18 ANSI S3.5 one-third-octave band powers (:class:`~planner.analysis.bands.BandAnalyzer`);
- ``[K]`` the K-weighted power (ITU-R BS.1770-5 Annex 1, stages 1 and 2), so that
  ``-0.691 + 10 log10(K)`` is the frame's loudness for that signal (Eq. 2);
- ``[FLAT]`` the unweighted power (for the broadband WADA-SNR check).

Frame ``j`` covers samples ``[floor(j h + 0.5), floor((j + 1) h + 0.5))``, ``h`` the hop in
samples, and the band powers of the same frame are measured with windows centred on that
hop; a signal of ``n`` samples has ``ceil(n / h)`` frames. :class:`ProgrammeFeatures` combines
the per-signal vectors into what the listener hears (loudspeaker powers summed with the
BS.1770 channel weights, Table 3: 1.0 for L, R, C, 1.41 for Ls, Rs, LFE left out) and into the
spatial views the mix-only estimators need (stereo mid/side; 5.1 centre/others; the ITU-R
BS.775 stereo fold-down). Memory: one block of input plus the band analysers' overlap.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Literal

import numpy as np
import numpy.typing as npt

from planner._typing import FloatArray
from planner.analysis.bands import BandAnalyzer
from planner.analysis.channels import fold_down_stereo
from planner.analysis.framepower import FrameMeanSquares
from planner.analysis.loudness import k_weighting_sos
from planner.analysis.sii import N_BANDS
from planner.errors import InputError
from planner.model import AudioInfo
from planner.units import ANALYSIS_FRAME_S

if TYPE_CHECKING:
    from planner.io.audio import ProgrammeBlock

#: Index of the K-weighted power in a feature vector.
K = N_BANDS
#: Index of the unweighted power.
FLAT = N_BANDS + 1
#: Length of a feature vector.
N_FEATURES = N_BANDS + 2
#: BS.1770-5 channel weights G (Table 3) for L R C LFE Ls Rs; LFE (index 3) is excluded.
SURROUND_WEIGHTS = np.array([1.0, 1.0, 1.0, 0.0, 1.41, 1.41])
#: 5.1 channel index of the centre.
CENTRE = 2


class FrameFeatures:
    """Band, K-weighted and flat power per analysis frame of one mono signal, streaming.

    Parameters
    ----------
    sample_rate_hz : int
        Sample rate, Hz.
    frame_s : float, keyword-only
        Hop, seconds (default 10 ms).
    k_power : ndarray, keyword-only, optional
        The K-weighted power of every frame of the signal, computed elsewhere
        (:class:`~planner.analysis.framepower.SignalKPower`); the signal is then not K-weighted here. Frames past its
        end read 0.
    """

    def __init__(self, sample_rate_hz: int, *, frame_s: float = ANALYSIS_FRAME_S, k_power: FloatArray | None = None) -> None:
        self._bands = BandAnalyzer(sample_rate_hz, frame_s=frame_s)
        self._k_power = k_power
        if k_power is None:
            # imported here: the compiled filter loads numba (about 0.3 s and 100 MB), and
            # planning needs this module's constants only
            from planner.analysis.iir import sosfilt

            self._sosfilt = sosfilt
            self._sos = k_weighting_sos(sample_rate_hz)
            self._zi: FloatArray = np.zeros((self._sos.shape[0], 2))
        self._means = FrameMeanSquares(frame_s * sample_rate_hz, 2 if k_power is None else 1)
        self._n_levels = 0  # K/flat frames given so far
        self._queue: list[FloatArray] = []  # K/flat frames waiting for their band frames

    def _levels(self, means: FloatArray) -> FloatArray:
        """K and flat columns ``(n, 2)`` of frames whose mean squares (both, or flat alone) came from :class:`FrameMeanSquares`."""
        if self._k_power is None:
            return means
        n = means.shape[0]
        out = np.zeros((n, 2))
        k = self._k_power[self._n_levels : self._n_levels + n]
        out[: k.shape[0], 0] = k
        out[:, 1] = means[:, 0]
        self._n_levels += n
        return out

    def _combine(self, bands: FloatArray) -> FloatArray:
        n = bands.shape[0]
        kf = np.vstack(self._queue) if self._queue else np.zeros((0, 2))
        out = np.empty((n, N_FEATURES))
        out[:, :N_BANDS] = bands
        out[:, K:] = kf[:n]
        self._queue = [kf[n:]] if kf.shape[0] > n else []
        return out

    def band_powers(self, x: npt.ArrayLike) -> FloatArray:
        """The band columns alone of :meth:`process` (``x`` as there): what ``bands=`` takes."""
        return self._bands.process(np.asarray(x, dtype=np.float32))

    def flush_band_powers(self) -> FloatArray:
        """The band columns alone of :meth:`flush`."""
        return self._bands.flush()

    def process(self, x: npt.ArrayLike, bands: FloatArray | None = None, weighted: FloatArray | None = None) -> FloatArray:
        """Feature vectors of the frames completed by this input, shape ``(n_frames, N_FEATURES)``.

        ``bands``: :meth:`band_powers` of the same input computed elsewhere (by another
        instance fed the same signal, e.g. in another process); computed here when omitted.
        ``weighted``: the input K-weighted elsewhere, carrying the filter state from call to
        call (:class:`ProgrammeFeatures` filters its signals together); filtered here when omitted.
        """
        samples = np.asarray(x)  # squared in float64 by FrameMeanSquares, read as float32 by the bands
        if self._k_power is not None:
            means = self._means.feed([samples])
        else:
            if weighted is None:
                weighted, self._zi = self._sosfilt(self._sos, np.asarray(samples, dtype=np.float64), self._zi)
            means = self._means.feed([weighted, samples])
        self._queue.append(self._levels(means))
        return self._combine(self.band_powers(samples) if bands is None else bands)

    def flush(self, bands: FloatArray | None = None) -> FloatArray:
        """The remaining frames (the last one partial), so the total is ``ceil(n / hop)``.

        ``bands``: :meth:`flush_band_powers` computed elsewhere, as in :meth:`process`.
        """
        self._queue.append(self._levels(self._means.flush()))
        return self._combine(self.flush_band_powers() if bands is None else bands)


def _listener_sum(powers: list[FloatArray], weights: npt.ArrayLike) -> FloatArray:
    return sum((w * p for w, p in zip(np.asarray(weights), powers) if w != 0.0), np.zeros_like(powers[0]))


class ProgrammeFeatures:
    """The per-frame power views of a programme that the cue scores need.

    Stems (``kind="stems"``): ``speech`` and ``background`` (listener sums of the dialogue and
    background stems) and, for 5.1, ``speech_fold`` / ``background_fold`` for the BS.775
    stereo fold-down. Mix: ``total`` (listener sum of the mix); stereo also ``mixed`` = mid
    ``(L+R)/2`` and ``clean`` = side ``(L-R)/2``; 5.1 ``mixed`` = centre, ``clean`` = the
    others weighted as in the listener sum, plus ``fold_total``, ``fold_mixed``,
    ``fold_clean`` for the fold-down's mid and side. ``k_power``: a mix's
    :class:`~planner.analysis.framepower.SignalKPower` result, so that no signal is K-weighted here.
    """

    def __init__(
        self,
        info: AudioInfo,
        kind: Literal["mix", "stems"],
        *,
        frame_s: float = ANALYSIS_FRAME_S,
        k_power: FloatArray | None = None,
    ) -> None:
        self.layout = info.layout
        self.kind = kind
        n_signals = {"mono": 1, "stereo": 2, "5.1": 7}[info.layout] * (2 if kind == "stems" else 1)
        if k_power is not None and (kind != "mix" or k_power.ndim != 2 or k_power.shape[1] != n_signals):
            raise InputError(
                f"k_power of shape {k_power.shape} does not fit this programme ({info.layout} {kind}); "
                f"pass SignalKPower's result for a mix ({n_signals} columns), or none for stems"
            )
        self._k_given = k_power is not None
        if k_power is None:
            # the signals one process computes whole are K-weighted together (two rows at a
            # time through the compiled cascade); imported here as in FrameFeatures
            from planner.analysis.iir import sosfilt

            self._sosfilt = sosfilt
            self._sos = k_weighting_sos(info.sample_rate_hz)
            self._zi: FloatArray = np.zeros((self._sos.shape[0], n_signals, 2))
        self._signals = [
            FrameFeatures(info.sample_rate_hz, frame_s=frame_s, k_power=None if k_power is None else k_power[:, i])
            for i in range(n_signals)
        ]

    def _signals_of(self, x: FloatArray) -> list[FloatArray]:
        """The mono signals analysed for one multichannel array ``(n, ch)``."""
        if self.layout == "mono":
            return [x[:, 0]]
        if self.layout == "stereo":
            if self.kind == "stems":
                return [x[:, 0], x[:, 1]]
            return [0.5 * (x[:, 0] + x[:, 1]), 0.5 * (x[:, 0] - x[:, 1])]
        fold = fold_down_stereo(x).astype(np.float64)
        if self.kind == "stems":
            return [x[:, 0], x[:, 1], x[:, 2], x[:, 4], x[:, 5], fold[:, 0], fold[:, 1]]
        mid, side = 0.5 * (fold[:, 0] + fold[:, 1]), 0.5 * (fold[:, 0] - fold[:, 1])
        return [x[:, 0], x[:, 1], x[:, 2], x[:, 4], x[:, 5], mid, side]

    def _views(self, p: list[FloatArray]) -> dict[str, FloatArray]:
        """Named listener and spatial views from per-signal features, in :meth:`_signals_of` order."""
        if self.kind == "stems":
            half = len(p) // 2
            out = {}
            for name, q in (("speech", p[:half]), ("background", p[half:])):
                if self.layout == "5.1":
                    out[name] = _listener_sum(q[:5], SURROUND_WEIGHTS[[0, 1, 2, 4, 5]])
                    out[f"{name}_fold"] = q[5] + q[6]
                else:
                    out[name] = _listener_sum(q, np.ones(len(q)))
            return out
        if self.layout == "mono":
            return {"total": p[0]}
        if self.layout == "stereo":
            # |L|^2 + |R|^2 = 2 |M|^2 + 2 |S|^2 per bin, so the listener sum is exact.
            return {"total": 2.0 * (p[0] + p[1]), "mixed": p[0], "clean": p[1]}
        weights = SURROUND_WEIGHTS[[0, 1, 2, 4, 5]]
        others = _listener_sum([p[0], p[1], p[3], p[4]], weights[[0, 1, 3, 4]])
        return {
            "total": others + p[2],
            "mixed": p[2],
            "clean": others,
            "fold_total": 2.0 * (p[5] + p[6]),
            "fold_mixed": p[5],
            "fold_clean": p[6],
        }

    def _arrays(self, block: ProgrammeBlock) -> list[FloatArray]:
        """The analysed signals of a block: float64 where they are K-weighted here; float32
        (rounded once) where the K-weighted powers were given, as the band analysis reads
        float32 anyway and the flat power needs no more."""
        if self._k_given:
            return self._signals_of(block.mix)
        if self.kind == "stems":
            if block.dialogue is None or block.background is None:
                raise InputError(
                    "stems scoring needs dialogue and background in every block; open the programme with both stems"
                )
            dialogue, background = block.dialogue.astype(np.float64), block.background.astype(np.float64)
            return self._signals_of(dialogue) + self._signals_of(background)
        return self._signals_of(block.mix.astype(np.float64))

    def _whole(
        self, indices: Sequence[int], arrays: list[FloatArray], bands: Sequence[FloatArray | None] | None = None
    ) -> dict[int, FloatArray]:
        """Feature vectors of the signals ``indices`` for one block's ``arrays`` (``bands``: their
        band powers where computed elsewhere), K-weighted here together unless the powers were given."""
        weighted: list[FloatArray | None] = [None] * len(indices)
        if indices and not self._k_given:
            rows = np.vstack([np.asarray(arrays[i], dtype=np.float64) for i in indices])
            chosen = list(indices)
            filtered, self._zi[:, chosen] = self._sosfilt(self._sos, rows, self._zi[:, chosen])
            weighted = list(filtered)
        return {
            i: self._signals[i].process(arrays[i], None if bands is None else bands[i], weighted=w)
            for i, w in zip(indices, weighted)
        }

    def _whole_split(self) -> bool:
        """Whether each process computes the whole features of its own signals (K-weighted
        powers given, or stems: four or more signals to share), rather than the second process
        computing every band power and half of the K-weighting (a mix without given powers)."""
        return self._k_given or self.kind == "stems"

    def offloaded(self) -> range:
        """The signals whose whole features :meth:`band_powers` computes, chosen so that the
        two processes take about equal shares (measured on one hour of stereo and 5.1).

        With the K-weighted powers given: all but the first third, as the caller's own
        scoring costs about the features of a third of the signals (0 of 2 signals kept for
        stereo, 2 of 7 for 5.1). Stems: the second half (the background's), the caller
        computing the dialogue's. A mix without given powers: the second half, the band
        powers of the others computed there too (the caller K-weights those).
        """
        n = len(self._signals)
        if self._k_given:
            return range(n // 3, n)
        return range(n // 2, n) if self.kind == "stems" else range(n - n // 2, n)

    def band_powers(self, block: ProgrammeBlock) -> list[FloatArray | None]:
        """The costly part of :meth:`process`, for another process to compute.

        One entry per analysed signal, for the frames this block completes: for the
        :meth:`offloaded` signals the whole feature vectors ``(n, N_FEATURES)``; for the
        others the band powers ``(n, 18)``, or None where the caller computes those signals
        whole. Another instance's ``process(block, bands=...)`` then gives exactly what it
        gives alone.
        """
        offloaded, whole = self.offloaded(), self._whole_split()
        arrays = self._arrays(block)
        features = self._whole(offloaded, arrays)
        return [
            features[i] if i in offloaded else (None if whole else s.band_powers(a))
            for i, (s, a) in enumerate(zip(self._signals, arrays))
        ]

    def flush_band_powers(self) -> list[FloatArray | None]:
        """What :meth:`band_powers` gives for the last frames, after the final block."""
        offloaded, whole = self.offloaded(), self._whole_split()
        return [
            s.flush() if i in offloaded else (None if whole else s.flush_band_powers())
            for i, s in enumerate(self._signals)
        ]

    def process(self, block: ProgrammeBlock, bands: list[FloatArray | None] | None = None) -> dict[str, FloatArray]:
        """Views of the frames completed by this block, each ``(n_frames, N_FEATURES)``.

        ``bands``: this block's :meth:`band_powers` if computed elsewhere.
        """
        n = len(self._signals)
        if bands is None:
            features = self._whole(range(n), self._arrays(block))
            return self._views([features[i] for i in range(n)])
        offloaded = self.offloaded()
        if len(offloaded) == n:
            return self._views([_given(b) for b in bands])
        kept = [i for i in range(n) if i not in offloaded]
        # (all the arrays: a 5.1 fold-down needs every channel anyway)
        features = self._whole(kept, self._arrays(block), None if self._whole_split() else bands)
        return self._views([_given(bands[i]) if i in offloaded else features[i] for i in range(n)])

    def flush(self, bands: list[FloatArray | None] | None = None) -> dict[str, FloatArray]:
        """Views of the last frames after the final block (``bands``: :meth:`flush_band_powers`)."""
        if bands is None:
            return self._views([s.flush() for s in self._signals])
        offloaded = self.offloaded()
        return self._views([_given(b) if i in offloaded else s.flush(b) for i, (s, b) in enumerate(zip(self._signals, bands))])


def _given(features: FloatArray | None) -> FloatArray:
    if features is None:
        raise InputError("bands= lacks the features of an offloaded signal; pass what band_powers() gave")
    return features
