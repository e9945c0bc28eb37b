"""Plain records passed between the pipeline stages, and their JSON form.

Every record is a frozen dataclass. Times are float seconds (``start_s``), levels dB,
gains dB. ``to_dict`` gives plain JSON-ready data (tuples become lists, nested records
become dicts) and ``from_dict`` rebuilds the record exactly; unknown or missing fields
raise :class:`~planner.errors.PlanFileError` naming the field, so a hand-edited file
fails loudly. Sequences inside records are tuples in a fixed, documented order (cues by
``index``, events by ``start_s``, scenes by ``rank``) so that the JSON is deterministic.

Record map (pipeline order)::

    SubtitleTrack(Cue...)  AudioInfo  LoudnessSummary
          \\                 |
           SpeechActivity -> Alignment(MappingSegment...) -> CueTiming..., UncoveredSpeech...
                                  -> CueScore... -> Analysis
                                  -> GainEvent..., Scene... -> Plan
"""

from __future__ import annotations

import base64
import dataclasses
import functools
import types
import typing
from dataclasses import dataclass, field
from typing import Any, ClassVar, Literal, TypeVar, Union, get_args, get_origin

import numpy as np

from planner.errors import PlanFileError

#: Version of the JSON layout of analysis.json and plan.json. Bump on any incompatible change.
SCHEMA_VERSION = 1

Verdict = Literal["clear", "at-risk", "masked", "no-score"]
ScoreMethod = Literal["stems", "mix", "none"]
Layout = Literal["mono", "stereo", "5.1"]
InputRole = Literal["mix", "dialogue", "background", "subtitles"]

R = TypeVar("R", bound="Record")
#: Resolved field types of a record class, computed once per class (resolving them is most of
#: the cost of loading a plan of 900 cues).
_type_hints = functools.cache(typing.get_type_hints)


class Record:
    """Mixin giving a frozen dataclass strict ``to_dict`` / ``from_dict``."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of this record (nested records and tuples converted)."""
        return {f.name: _to_plain(getattr(self, f.name)) for f in dataclasses.fields(self)}  # type: ignore[arg-type]

    @classmethod
    def from_dict(cls: type[R], data: Any, *, where: str = "") -> R:
        """Rebuild the record from :meth:`to_dict` output; raise PlanFileError on any mismatch."""
        label = where or cls.__name__
        if not isinstance(data, dict):
            raise PlanFileError(f"expected an object for {cls.__name__}, got {type(data).__name__}", field=label)
        hints = _type_hints(cls)  # type: ignore[arg-type]
        names = {f.name for f in dataclasses.fields(cls)}  # type: ignore[arg-type]
        unknown = sorted(set(data) - names)
        if unknown:
            raise PlanFileError(
                f"unknown field {unknown[0]!r}; allowed fields are {', '.join(sorted(names))}",
                field=f"{label}.{unknown[0]}",
            )
        kwargs: dict[str, Any] = {}
        for f in dataclasses.fields(cls):  # type: ignore[arg-type]
            if f.name not in data:
                if f.default is not dataclasses.MISSING or f.default_factory is not dataclasses.MISSING:
                    continue
                raise PlanFileError("missing required field", field=f"{label}.{f.name}")
            kwargs[f.name] = _from_plain(hints[f.name], data[f.name], f"{label}.{f.name}")
        return cls(**kwargs)


def _to_plain(value: Any) -> Any:
    if isinstance(value, Record):
        return value.to_dict()
    if isinstance(value, (tuple, list)):
        return [_to_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _to_plain(v) for k, v in sorted(value.items())}
    if isinstance(value, np.generic):
        return value.item()
    return value


def _from_plain(tp: Any, value: Any, where: str) -> Any:
    origin = get_origin(tp)
    if origin in (Union, types.UnionType):
        args = get_args(tp)
        if value is None and type(None) in args:
            return None
        inner = [a for a in args if a is not type(None)]
        return _from_plain(inner[0], value, where) if len(inner) == 1 else value
    if origin is Literal:
        if value not in get_args(tp):
            allowed = ", ".join(repr(a) for a in get_args(tp))
            raise PlanFileError(f"value {value!r} is not one of {allowed}", field=where)
        return value
    if origin is tuple:
        if not isinstance(value, list):
            raise PlanFileError(f"expected a list, got {type(value).__name__}", field=where)
        args = get_args(tp)
        if len(args) == 2 and args[1] is Ellipsis:
            if args[0] is float and all(type(v) is float for v in value):
                return tuple(value)  # the common case (spectra, tracks), checked at C speed
            return tuple(_from_plain(args[0], v, f"{where}[{i}]") for i, v in enumerate(value))
        return tuple(_from_plain(a, v, f"{where}[{i}]") for i, (a, v) in enumerate(zip(args, value)))
    if origin is dict:
        if not isinstance(value, dict):
            raise PlanFileError(f"expected an object, got {type(value).__name__}", field=where)
        _, vt = get_args(tp)
        return {k: _from_plain(vt, v, f"{where}.{k}") for k, v in value.items()}
    if isinstance(tp, type) and issubclass(tp, Record):
        return tp.from_dict(value, where=where)
    if tp is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise PlanFileError(f"expected a number, got {value!r}", field=where)
        return float(value)
    if tp is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise PlanFileError(f"expected a whole number, got {value!r}", field=where)
        return value
    if tp is bool:
        if not isinstance(value, bool):
            raise PlanFileError(f"expected true or false, got {value!r}", field=where)
        return value
    if tp is str:
        if not isinstance(value, str):
            raise PlanFileError(f"expected text, got {value!r}", field=where)
        return value
    return value


# --------------------------------------------------------------------------- inputs


@dataclass(frozen=True)
class InputFile(Record):
    """One input file: its role, its path relative to the analysis folder, and its SHA-256."""

    role: InputRole
    path: str
    sha256: str


@dataclass(frozen=True)
class AudioInfo(Record):
    """What a probe of an audio file found. ``layout`` is the channel layout the tool assumes."""

    sample_rate_hz: int
    n_channels: int
    n_frames: int
    layout: Layout
    format: str
    subtype: str
    bit_depth: int | None

    @property
    def duration_s(self) -> float:
        """Length in seconds."""
        return self.n_frames / self.sample_rate_hz


@dataclass(frozen=True)
class Cue(Record):
    """One subtitle cue, exactly as written (times exact to the millisecond at the file edge).

    ``index`` is the 1-based position in file order; ``cue_id`` the identifier as written
    (SRT number or WebVTT identifier, ``""`` if none); ``text`` keeps inline tags and uses
    ``"\\n"`` between lines; ``settings`` keeps WebVTT cue settings as written.
    """

    index: int
    cue_id: str
    start_s: float
    end_s: float
    text: str
    settings: str = ""

    @property
    def duration_s(self) -> float:
        """On-screen duration in seconds."""
        return self.end_s - self.start_s


@dataclass(frozen=True)
class SubtitleTrack(Record):
    """A parsed subtitle file: its cues in file order plus what the reader noticed.

    ``notes`` lists every tolerated deviation or repair (one sentence each); ``header``
    keeps a WebVTT header block (and STYLE/REGION blocks) verbatim for writing back.
    """

    format: Literal["srt", "vtt"]
    encoding: str
    bom: bool
    cues: tuple[Cue, ...]
    notes: tuple[str, ...] = ()
    header: str = ""


@dataclass(frozen=True)
class LoudnessSummary(Record):
    """BS.1770 / Tech 3342 figures of one programme. ``None`` where everything was gated out."""

    integrated_lufs: float | None
    loudness_range_lu: float | None
    true_peak_dbtp: float
    sample_peak_dbfs: float
    max_momentary_lufs: float | None
    max_short_term_lufs: float | None
    speech_lufs: float | None = None


# --------------------------------------------------------------------------- speech activity


@dataclass(frozen=True, eq=False)
class SpeechActivity(Record):
    """Speech probability and decision per analysis frame (10 ms) from the start of the audio.

    ``probability`` is float32 in 0..1, ``is_speech`` bool, both of shape ``(n_frames,)``.
    ``level_db``, when the detector measured it, is the detection signal's 200-1000 Hz
    band power per frame in dB relative to full scale (float32 ``(n_frames,)``; kept in
    0.5 dB steps from -127.5 to 0 dB). ``source`` says which signal was analysed (e.g.
    ``"centre channel"``), ``backend`` which detector. ``notes`` carries warnings such as a
    fallback or low confidence.
    """

    frame_s: float
    probability: np.ndarray
    is_speech: np.ndarray
    backend: str
    source: str
    notes: tuple[str, ...] = ()
    level_db: np.ndarray | None = None

    @property
    def n_frames(self) -> int:
        """Number of analysis frames."""
        return int(self.is_speech.shape[0])

    def segments(self) -> list[tuple[float, float]]:
        """Speech runs as ``(start_s, end_s)`` pairs in time order."""
        mask = self.is_speech.astype(np.int8)
        edges = np.flatnonzero(np.diff(np.concatenate(([0], mask, [0]))))
        return [(float(a * self.frame_s), float(b * self.frame_s)) for a, b in zip(edges[::2], edges[1::2])]

    def to_dict(self) -> dict[str, Any]:
        """Segments, the probability track quantised to 1/255 and the level track to 0.5 dB (base64 uint8)."""
        q = np.clip(np.round(self.probability.astype(np.float64) * 255.0), 0, 255).astype(np.uint8)
        out = {
            "frame_s": self.frame_s,
            "n_frames": self.n_frames,
            "backend": self.backend,
            "source": self.source,
            "notes": list(self.notes),
            "segments": [[a, b] for a, b in self.segments()],
            "probability_u8": base64.b64encode(q.tobytes()).decode("ascii"),
        }
        if self.level_db is not None:
            level = np.clip(np.round((self.level_db.astype(np.float64) + _LEVEL_FLOOR_DB) * 2.0), 0, 255).astype(np.uint8)
            out["level_u8"] = base64.b64encode(level.tobytes()).decode("ascii")
        return out

    @classmethod
    def from_dict(cls, data: Any, *, where: str = "") -> SpeechActivity:
        """Rebuild from :meth:`to_dict`; without ``probability_u8`` the mask stands in for it."""
        label = where or "activity"
        if not isinstance(data, dict):
            raise PlanFileError("expected an object", field=label)
        try:
            frame_s = float(data["frame_s"])
            n = int(data["n_frames"])
            mask = np.zeros(n, dtype=bool)
            for a, b in data["segments"]:
                mask[int(round(a / frame_s)) : int(round(b / frame_s))] = True
            prob = _track_u8(data, "probability_u8", n, label)
            level = _track_u8(data, "level_u8", n, label)
            return cls(
                frame_s=frame_s,
                probability=mask.astype(np.float32) if prob is None else prob / np.float32(255.0),
                is_speech=mask,
                backend=str(data["backend"]),
                source=str(data["source"]),
                notes=tuple(data.get("notes", ())),
                level_db=None if level is None else level / np.float32(2.0) - np.float32(_LEVEL_FLOOR_DB),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise PlanFileError(f"malformed speech activity ({exc})", field=label) from exc


#: Lowest level the stored level track holds, dB below full scale (0.5 dB steps up to 0 dB).
_LEVEL_FLOOR_DB = 127.5


def _track_u8(data: dict[str, Any], key: str, n_frames: int, label: str) -> np.ndarray | None:
    """The base64 uint8 track ``data[key]`` as float32 ``(n_frames,)``, or None when absent."""
    if key not in data:
        return None
    raw = np.frombuffer(base64.b64decode(data[key]), dtype=np.uint8)
    if raw.size != n_frames:
        raise PlanFileError(f"{key} holds {raw.size} frames, not n_frames={n_frames}; re-run cueplan analyse", field=f"{label}.{key}")
    return raw.astype(np.float32)


# --------------------------------------------------------------------------- alignment


@dataclass(frozen=True)
class MappingSegment(Record):
    """``t_audio = rate_ratio * t_subs + offset_s`` for subtitle times in ``[subs_start_s, subs_end_s)``."""

    subs_start_s: float
    subs_end_s: float
    rate_ratio: float
    offset_s: float

    def map_s(self, t_subs_s: float) -> float:
        """Audio time for a subtitle time, seconds."""
        return self.rate_ratio * t_subs_s + self.offset_s


@dataclass(frozen=True)
class Alignment(Record):
    """The subtitle-to-audio mapping: one segment per stretch between edits.

    ``confidence`` is 0..1 (how much better the best fit is than the runner-up);
    ``breaks_s`` are audio times where an edit was detected; ``rate_name`` names the
    frame-rate ratio found (e.g. ``"25/24"``, ``"1"``).
    """

    segments: tuple[MappingSegment, ...]
    confidence: float
    rate_name: str
    breaks_s: tuple[float, ...] = ()
    notes: tuple[str, ...] = ()

    def map_s(self, t_subs_s: float) -> float:
        """Audio time for a subtitle time using the segment that covers it."""
        for seg in self.segments:
            if t_subs_s < seg.subs_end_s:
                return seg.map_s(t_subs_s)
        return self.segments[-1].map_s(t_subs_s)


@dataclass(frozen=True)
class CueTiming(Record):
    """One cue after alignment and snapping, with its subtitle-QC flags.

    ``onset_error_ms`` / ``offset_error_ms``: signed difference (cue time after the global
    mapping minus the detected speech onset / offset), ``None`` when the cue has no speech.
    ``speech_s``: detected speech inside the aligned span. ``cps``: characters per second
    of the aligned cue. ``flags``: sorted subtitle-check names (``no-speech``, ``too-fast`` ...).
    """

    index: int
    aligned_start_s: float
    aligned_end_s: float
    onset_error_ms: float | None
    offset_error_ms: float | None
    speech_s: float
    cps: float
    flags: tuple[str, ...] = ()


@dataclass(frozen=True)
class UncoveredSpeech(Record):
    """A run of detected speech with no cue over it (the ``uncovered-speech`` check)."""

    start_s: float
    end_s: float
    confidence: float


# --------------------------------------------------------------------------- scores


@dataclass(frozen=True)
class CueScore(Record):
    """Masking scores of one cue over its aligned span's speech frames.

    Levels: ``speech_db`` / ``background_db`` are K-weighted (BS.1770) levels in LUFS of
    the speech and background components; ``sbld_lu`` their difference. Spectra are the
    18 ANSI S3.5 one-third-octave bands (160 Hz..8 kHz) as equivalent spectrum levels in
    dB SPL at the listening level, as the SII takes them. ``sii`` is for the analysis
    hearing profile; ``sii_by_profile`` maps profile names (always including ``normal``)
    to SII. ``None`` scores come with a plain-words ``reason`` and verdict ``no-score``.
    """

    index: int
    method: ScoreMethod
    speech_s: float
    speech_db: float | None
    background_db: float | None
    sbld_lu: float | None
    sii: float | None
    sii_short: float | None
    stoi: float | None
    confidence: float
    verdict: Verdict
    reason: str = ""
    speech_spectrum_db: tuple[float, ...] = ()
    background_spectrum_db: tuple[float, ...] = ()
    sii_by_profile: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class Analysis(Record):
    """Everything ``cueplan analyse`` measured: the input of planning, saved as analysis.json."""

    schema: int
    settings: dict[str, Any]
    inputs: tuple[InputFile, ...]
    audio: AudioInfo
    subtitles: SubtitleTrack
    loudness: LoudnessSummary
    activity: SpeechActivity
    alignment: Alignment
    timings: tuple[CueTiming, ...]
    uncovered: tuple[UncoveredSpeech, ...]
    scores: tuple[CueScore, ...]
    warnings: tuple[str, ...] = ()


# --------------------------------------------------------------------------- plan


@dataclass(frozen=True)
class GainEvent(Record):
    """One gain move over one or more cues.

    Full gain holds from ``start_s`` (first speech onset) to ``end_s`` (last speech
    offset); the ramp in occupies ``[start_s - ramp_in_ms/1000, start_s]`` and the ramp
    out ``[end_s, end_s + ramp_out_ms/1000]``. ``background_gain_db <= 0``,
    ``dialogue_gain_db >= 0``. Scores are in the unit of ``target_kind`` (SII or LU) for
    the worst cue of the event.
    """

    event_id: str
    start_s: float
    end_s: float
    ramp_in_ms: float
    ramp_out_ms: float
    background_gain_db: float
    dialogue_gain_db: float
    cue_indices: tuple[int, ...]
    reason: str
    target_kind: Literal["sii", "lu"]
    target: float
    score_before: float
    score_after: float
    reachable: bool


@dataclass(frozen=True)
class Scene(Record):
    """A stretch of programme ranked by how badly its dialogue is masked (``rank`` 1 = worst)."""

    scene_id: str
    start_s: float
    end_s: float
    cue_indices: tuple[int, ...]
    rank: int
    severity: float
    masked_s: float
    worst_cue_index: int | None
    reason: str


@dataclass(frozen=True, eq=False)
class Plan(Record):
    """The canonical plan (plan.json): the analysis it came from, the settings, events and scenes."""

    schema: int
    settings: dict[str, Any]
    analysis: Analysis
    events: tuple[GainEvent, ...]
    scenes: tuple[Scene, ...]
    KIND: ClassVar[str] = "cueplan-plan"
