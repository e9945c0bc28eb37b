"""Timeline exports of a plan: OpenTimelineIO (plan.otio) and CMX 3600 EDL (plan.edl).

Both place the programme at its programme-start timecode at the plan's frame rate
(``AnalysisSettings.fps`` / ``drop_frame`` / ``programme_start``). Times convert to the
nearest video frame (:func:`planner.io.timecode.seconds_to_video_frames`).

- plan.otio: one audio track holding the programme as a clip whose media time is the
  timecode; a marker per gain event (full-gain span; details under ``metadata["cueplan"]``)
  and per at-risk or masked cue.
- plan.edl: one audio event per gain event, source and record timecode both the
  programme timecode, reel naming the stem moved, the move in comment lines. Written by
  the ``otio-cmx3600-adapter`` plug-in, which writes no ``FCM`` line; this module adds
  ``FCM: DROP FRAME`` or ``FCM: NON-DROP FRAME`` after the title. The adapter labels
  29.97/59.94 timecode drop-frame whenever the rate is an NTSC rate, so non-drop EDLs are
  built at the nominal rate (30, 60, 24), where frame *n* has the same label as frame *n*
  counted non-drop at the NTSC rate (ST 12-1 non-drop counts nominal frames per second).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import opentimelineio as otio

from planner.io.files import atomic_output, atomic_write_text
from planner.io.timecode import (
    FrameRate,
    frame_rate,
    frames_to_timecode,
    seconds_to_video_frames,
    timecode_to_frames,
)
from planner.model import SCHEMA_VERSION, GainEvent, Plan

#: Marker colours (OpenTimelineIO's named colours): events the plan fixes, events it
#: cannot fully fix, masked cues and at-risk cues.
EVENT_COLOUR = otio.schema.MarkerColor.GREEN
UNREACHABLE_COLOUR = otio.schema.MarkerColor.YELLOW
CUE_COLOURS = {"masked": otio.schema.MarkerColor.RED, "at-risk": otio.schema.MarkerColor.ORANGE}

#: EDL reel names (at most 8 characters) by the stems an event moves.
REELS = {(True, False): "BKGD", (False, True): "DIAL", (True, True): "DIALBKGD", (False, False): "NOMOVE"}


@dataclass(frozen=True)
class TimecodeClock:
    """Seconds to frames and timecode labels at a plan's rate and programme start."""

    rate: FrameRate
    origin: int  # frame count of the programme's first frame

    @classmethod
    def of(cls, plan: Plan) -> TimecodeClock:
        """The clock of a plan, from the analysis settings it records."""
        s = plan.analysis.settings
        rate = frame_rate(str(s.get("fps", "25")), bool(s.get("drop_frame", False)))
        return cls(rate, timecode_to_frames(str(s.get("programme_start", "00:00:00:00")), rate))

    def frames(self, t_s: float) -> int:
        """Absolute frame count (programme start included) of the frame nearest ``t_s``."""
        return self.origin + seconds_to_video_frames(t_s, self.rate)

    def timecode(self, t_s: float) -> str:
        """Timecode label of the frame nearest ``t_s``."""
        return frames_to_timecode(self.frames(t_s), self.rate)

    def describe(self) -> str:
        """The rate, counting and start in words, for file headers."""
        counting = "DF" if self.rate.drop_frame else "NDF"
        return f"timecode {self.rate.name} fps {counting}, programme start {frames_to_timecode(self.origin, self.rate)}"


def _rt(frames: int, rate: float) -> otio.opentime.RationalTime:
    return otio.opentime.RationalTime(frames, rate)


def _span(clock: TimecodeClock, start_s: float, end_s: float) -> tuple[int, int]:
    first = clock.frames(start_s)
    return first, max(first + 1, clock.frames(end_s))


def _event_words(e: GainEvent) -> str:
    parts = [f"background {e.background_gain_db:+.1f} dB" if e.background_gain_db else "",
             f"dialogue {e.dialogue_gain_db:+.1f} dB" if e.dialogue_gain_db else ""]  # fmt: skip
    return ", ".join(p for p in parts if p) or "no move"


def build_timeline(plan: Plan) -> otio.schema.Timeline:
    """The OpenTimelineIO timeline of a plan (see module docstring)."""
    clock = TimecodeClock.of(plan)
    rate = float(clock.rate.fps)
    n = max(1, seconds_to_video_frames(plan.analysis.audio.duration_s, clock.rate))
    timeline = otio.schema.Timeline(name="cueplan plan", global_start_time=_rt(clock.origin, rate))
    timeline.metadata["cueplan"] = {
        "schema": SCHEMA_VERSION,
        "fps": clock.rate.name,
        "drop_frame": clock.rate.drop_frame,
        "programme_start": frames_to_timecode(clock.origin, clock.rate),
    }
    audio = [f for f in plan.analysis.inputs if f.role in ("mix", "dialogue")]
    available = otio.opentime.TimeRange(_rt(clock.origin, rate), _rt(n, rate))
    reference: Any = (
        otio.schema.ExternalReference(target_url=audio[0].path, available_range=available)
        if audio
        else otio.schema.MissingReference()
    )
    clip = otio.schema.Clip(name="programme", media_reference=reference, source_range=available)
    for e in plan.events:
        first, last = _span(clock, e.start_s, e.end_s)
        marker = otio.schema.Marker(
            name=f"{e.event_id} {_event_words(e)}",
            marked_range=otio.opentime.TimeRange(_rt(first, rate), _rt(last - first, rate)),
            color=EVENT_COLOUR if e.reachable else UNREACHABLE_COLOUR,
        )
        marker.metadata["cueplan"] = {
            "type": "event",
            **e.to_dict(),
            "tc_in": clock.timecode(e.start_s),
            "tc_out": clock.timecode(e.end_s),
        }
        clip.markers.append(marker)
    texts = {c.index: c.text for c in plan.analysis.subtitles.cues}
    timings = {t.index: t for t in plan.analysis.timings}
    for s in plan.analysis.scores:
        if s.verdict not in CUE_COLOURS or s.index not in timings:
            continue
        t = timings[s.index]
        first, last = _span(clock, t.aligned_start_s, t.aligned_end_s)
        marker = otio.schema.Marker(
            name=f"cue {s.index} {s.verdict}",
            marked_range=otio.opentime.TimeRange(_rt(first, rate), _rt(last - first, rate)),
            color=CUE_COLOURS[s.verdict],
        )
        marker.metadata["cueplan"] = {
            "type": "cue",
            "index": s.index,
            "verdict": s.verdict,
            "method": s.method,
            "sii": s.sii,
            "sbld_lu": s.sbld_lu,
            "aligned_start_s": t.aligned_start_s,
            "aligned_end_s": t.aligned_end_s,
            "tc_in": clock.timecode(t.aligned_start_s),
            "tc_out": clock.timecode(t.aligned_end_s),
            "text": texts.get(s.index, ""),
        }
        clip.markers.append(marker)
    track = otio.schema.Track(name="programme", kind=otio.schema.TrackKind.Audio)
    track.append(clip)
    timeline.tracks.append(track)
    return timeline


def write_otio(plan: Plan, path: str | Path, *, inputs: Iterable[str | Path] = ()) -> None:
    """plan.otio: the plan's timeline as OpenTimelineIO JSON, written atomically."""
    timeline = build_timeline(plan)
    with atomic_output(path, inputs=inputs) as tmp:
        otio.adapters.write_to_file(timeline, str(tmp), adapter_name="otio_json")


def edl_text(plan: Plan) -> str:
    """CMX 3600 text of the plan's events (see module docstring)."""
    clock = TimecodeClock.of(plan)
    # Non-drop labels are those of the nominal integer rate (module docstring).
    rate = float(clock.rate.fps) if clock.rate.drop_frame else float(clock.rate.nominal)
    timeline = otio.schema.Timeline(name="CUEPLAN GAIN EVENTS")
    track = otio.schema.Track(name="A1", kind=otio.schema.TrackKind.Audio)
    cursor = 0
    for e in sorted(plan.events, key=lambda e: e.start_s):
        first, last = _span(clock, e.start_s, e.end_s)
        first = max(first, cursor)  # events closer than a frame share it: the later one gives way
        last = max(last, first + 1)
        if first > cursor:
            track.append(otio.schema.Gap(source_range=otio.opentime.TimeRange(_rt(0, rate), _rt(first - cursor, rate))))
        clip = otio.schema.Clip(
            name=e.event_id, source_range=otio.opentime.TimeRange(_rt(first, rate), _rt(last - first, rate))
        )
        reel = REELS[(e.background_gain_db < 0, e.dialogue_gain_db > 0)]
        clip.metadata["cmx_3600"] = {
            "reel": reel,
            "comments": [
                f"CUEPLAN {e.event_id}: {_event_words(e).upper()}, RAMP IN {e.ramp_in_ms:.0f} MS, "
                f"RAMP OUT {e.ramp_out_ms:.0f} MS",
                f"CUES {' '.join(str(i) for i in e.cue_indices)}; {e.target_kind.upper()} "
                f"{e.score_before:.2f} TO {e.score_after:.2f}{'' if e.reachable else ' (SHORT OF TARGET)'}",
            ],
        }
        track.append(clip)
        cursor = last
    timeline.tracks.append(track)
    timeline.tracks.append(otio.schema.Track(name="V", kind=otio.schema.TrackKind.Video))  # the adapter needs one
    if not plan.events:
        return f"TITLE: {timeline.name}\n{_fcm(clock.rate)}\n"
    text = otio.adapters.write_to_string(timeline, adapter_name="cmx_3600", rate=rate, style="avid")
    head, _, body = text.partition("\n")
    return f"{head}\n{_fcm(clock.rate)}\n{body.lstrip(chr(10))}"


def _fcm(rate: FrameRate) -> str:
    return "FCM: DROP FRAME" if rate.drop_frame else "FCM: NON-DROP FRAME"


def write_edl(plan: Plan, path: str | Path, *, inputs: Iterable[str | Path] = ()) -> None:
    """plan.edl: CMX 3600 EDL of the gain events with the FCM line for the plan's counting."""
    atomic_write_text(path, edl_text(plan), inputs=inputs)
