"""plan.json, its schema and semantic checks, the CSV exports, and the OTIO and EDL exports.

Timecodes are checked against the PyPI ``timecode`` package (a reference used only in
tests; its frame numbers are 1-based) and against frame numbers the tests compute from the
definition (nearest frame, halves up, at the exact SMPTE ST 12-1 rate). The OTIO and EDL
files are read back through OpenTimelineIO's own readers (``otio_json`` and the
``otio-cmx3600-adapter`` plug-in).
"""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import json
import math
from collections.abc import Callable
from fractions import Fraction
from pathlib import Path
from typing import Any

import opentimelineio as otio
import pytest
from plan_factory import CueSpec, make_analysis
from timecode import Timecode

from planner.errors import OutputError, PlanFileError
from planner.io.exports import CUES_COLUMNS, EVENTS_COLUMNS, load_plan, plan_json, plan_schema, write_exports
from planner.model import GainEvent, InputFile, Plan
from planner.planning.scenes import make_plan
from planner.settings import PlanSettings

EXACT_FPS = {"25": Fraction(25), "23.976": Fraction(24000, 1001), "29.97": Fraction(30000, 1001)}

# Flagged cues at awkward times (fractions of frames, past the first DF minute boundary and
# past a tenth minute) and one clear cue.
SPECS = [
    CueSpec(1.013, 3.5, snr_db=-4.0, text="Where were you\non the night of the storm?"),
    CueSpec(4.2, 6.0, snr_db=1.0),
    CueSpec(59.55, 62.31, snr_db=2.0, text="Zwölf Uhr, sagte sie."),
    CueSpec(600.7, 603.9, snr_db=-1.5),
    CueSpec(640.0, 642.0, snr_db=20.0),
]


def _plan(fps: str = "25", drop_frame: bool = False, start: str = "10:00:00:00", **settings: object) -> Plan:
    analysis = make_analysis(SPECS, fps=fps, drop_frame=drop_frame, programme_start=start)
    return make_plan(analysis, PlanSettings(**settings))  # type: ignore[arg-type]


def _expected_frame(t_s: float, fps: str, drop_frame: bool, start: str) -> int:
    """0-based frame number: programme start (timecode package) + nearest frame to t_s, halves up."""
    origin = Timecode(fps, start, force_non_drop_frame=not drop_frame).frames - 1
    return origin + math.floor(Fraction(repr(t_s)) * EXACT_FPS[fps] + Fraction(1, 2))


def _label(frame: int, fps: str, drop_frame: bool) -> str:
    return str(Timecode(fps, frames=frame + 1, force_non_drop_frame=not drop_frame))


# --------------------------------------------------------------------------- plan.json


def test_plan_json_is_byte_identical_for_equal_plans() -> None:
    # Constructed: two plans built independently from the same specs and settings.
    first, second = plan_json(_plan()), plan_json(_plan())
    assert first == second
    assert first.encode("utf-8") == second.encode("utf-8")
    data = json.loads(first)
    assert list(data) == sorted(data) and data["kind"] == "cueplan-plan" and data["schema"] == 1


def test_plan_round_trips_through_the_file(tmp_path: Path) -> None:
    # Constructed: write, load, write again: the same bytes.
    plan = _plan()
    path = tmp_path / "plan.json"
    path.write_text(plan_json(plan), encoding="utf-8")
    loaded = load_plan(path)
    assert plan_json(loaded) == plan_json(plan)
    assert loaded.events == plan.events and loaded.scenes == plan.scenes


def test_schema_lists_every_record_field() -> None:
    # Ground truth: the record definitions in planner/model.py and planner/settings.py.
    defs = plan_schema()["$defs"]
    assert set(defs["event"]["properties"]) == {f.name for f in dataclasses.fields(GainEvent)}
    assert set(defs["planSettings"]["properties"]) == {f.name for f in dataclasses.fields(PlanSettings)}
    assert set(plan_schema()["properties"]) == {"kind"} | {f.name for f in dataclasses.fields(Plan)}


Edit = Callable[[dict[str, Any]], None]


def _edited(tmp_path: Path, edit: Edit) -> Path:
    data = json.loads(plan_json(_plan()))
    edit(data)
    path = tmp_path / "plan.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    return path


def _set(key: str, value: object, event: int = 0) -> Edit:
    def edit(data: dict[str, Any]) -> None:
        data["events"][event][key] = value

    return edit


@pytest.mark.parametrize(
    ("edit", "field", "match"),
    [
        (_set("background_gain_db", 3.0), "events[0].background_gain_db", "3.0 is greater than the maximum of 0"),
        (_set("dialogue_gain_db", -1.0), "events[0].dialogue_gain_db", "less than the minimum of 0"),
        (_set("colour", "red"), "events[0].colour", "unknown field 'colour'"),
        (_set("end_s", 0.5), "events[0].end_s", "must be after start_s"),
        (_set("ramp_in_ms", 5000.0), "events[0].ramp_in_ms", "before the programme"),
        (_set("ramp_in_ms", 55000.0, event=1), "events[1].ramp_in_ms", "overlaps the ramp out of event E001"),
        (_set("ramp_out_ms", 1.0e6, event=-1), "events[2].ramp_out_ms", "past the programme's end"),
        (_set("cue_indices", [99]), "events[0].cue_indices", "cue 99 is not in the subtitles"),
        (_set("event_id", "E002"), "events[1].event_id", "used twice"),
    ],
    ids=["positive-cut", "negative-lift", "unknown-field", "end-before-start", "ramp-before-start",
         "ramps-overlap", "ramp-past-end", "unknown-cue", "duplicate-id"],
)  # fmt: skip
def test_hand_edits_are_refused_naming_field_and_event(tmp_path: Path, edit: Edit, field: str, match: str) -> None:
    # Constructed: one bad value written into an otherwise valid plan.
    path = _edited(tmp_path, edit)
    with pytest.raises(PlanFileError, match=match) as info:
        load_plan(path)
    assert info.value.field == field
    expected_id = json.loads(path.read_text())["events"][int(field.split("[")[1].split("]")[0])]["event_id"]
    assert info.value.event_id == expected_id
    assert str(path) in str(info.value)


def test_unknown_top_level_field_and_schema_version(tmp_path: Path) -> None:
    # Constructed: a field the layout does not have; a future schema version.
    with pytest.raises(PlanFileError, match="unknown field 'notes'") as info:
        load_plan(_edited(tmp_path, lambda d: d.update(notes="x")))
    assert info.value.field == "notes" and info.value.event_id is None
    with pytest.raises(PlanFileError, match="schema version 2") as info:
        load_plan(_edited(tmp_path, lambda d: d.update(schema=2)))
    assert info.value.field == "schema"


def test_invalid_json_is_refused(tmp_path: Path) -> None:
    # Constructed: a truncated file.
    path = tmp_path / "plan.json"
    path.write_text('{"kind": "cueplan-plan",', encoding="utf-8")
    with pytest.raises(PlanFileError, match="not valid JSON"):
        load_plan(path)


def test_audio_hash_must_match(tmp_path: Path) -> None:
    # Constructed: an input file whose SHA-256 is recorded in the plan, and a different file.
    good, bad = tmp_path / "dialogue.wav", tmp_path / "other.wav"
    good.write_bytes(b"RIFF dialogue audio")
    bad.write_bytes(b"RIFF other audio")
    inputs = [InputFile(role="dialogue", path="dialogue.wav", sha256=hashlib.sha256(good.read_bytes()).hexdigest())]
    plan = make_plan(make_analysis(SPECS, inputs=inputs), PlanSettings())
    path = tmp_path / "plan.json"
    path.write_text(plan_json(plan), encoding="utf-8")
    assert load_plan(path, audio_paths={"dialogue": good}).events == plan.events
    with pytest.raises(PlanFileError, match="does not match the dialogue audio") as info:
        load_plan(path, audio_paths={"dialogue": bad})
    assert info.value.field == "analysis.inputs[0].sha256"
    with pytest.raises(PlanFileError, match="without a mix input"):
        load_plan(path, audio_paths={"mix": good})


# --------------------------------------------------------------------------- CSV


def _read_csv(path: Path) -> tuple[str, list[dict[str, str]]]:
    lines = path.read_text(encoding="utf-8").splitlines()
    return lines[0], list(csv.DictReader(lines[1:]))


@pytest.mark.parametrize(
    ("fps", "drop_frame"), [("25", False), ("23.976", False), ("29.97", True)], ids=["25", "23.976", "29.97DF"]
)
def test_events_csv_timecodes_and_header(tmp_path: Path, fps: str, drop_frame: bool) -> None:
    # Reference: the `timecode` package labels the frames the test computes from the event times.
    plan = _plan(fps, drop_frame, start="01:00:00:00", move="both")
    paths = write_exports(plan, tmp_path)
    header, rows = _read_csv(paths["events"])
    counting = "DF" if drop_frame else "NDF"
    start_label = _label(_expected_frame(0.0, fps, drop_frame, "01:00:00:00"), fps, drop_frame)
    assert header.startswith(f"# cueplan events; timecode {fps} fps {counting}, programme start {start_label}")
    assert tuple(rows[0]) == EVENTS_COLUMNS
    by_id = {e.event_id: e for e in plan.events}
    assert {r["event_id"] for r in rows} == set(by_id)
    for row in rows:
        e = by_id[row["event_id"]]
        assert row["tc_in"] == _label(_expected_frame(e.start_s, fps, drop_frame, "01:00:00:00"), fps, drop_frame)
        assert row["tc_out"] == _label(_expected_frame(e.end_s, fps, drop_frame, "01:00:00:00"), fps, drop_frame)
        gain = e.background_gain_db if row["stem"] == "background" else e.dialogue_gain_db
        assert float(row["gain_db"]) == pytest.approx(gain)
        assert row["cue_ids"] == ";".join(str(i) for i in e.cue_indices)
    stems = sorted(r["stem"] for r in rows if r["event_id"] == "E001")
    assert stems == ["background", "dialogue"]  # "both" moves give one row per stem


def test_cues_csv_has_one_row_per_cue(tmp_path: Path) -> None:
    # Constructed: five cues, the first with two lines of text and one QC value known (pad 0.2 s).
    paths = write_exports(_plan(), tmp_path)
    header, rows = _read_csv(paths["cues"])
    assert header == "# cueplan cues; timecode 25 fps NDF, programme start 10:00:00:00"
    assert tuple(rows[0]) == CUES_COLUMNS and len(rows) == len(SPECS)
    assert rows[0]["text"] == "Where were you / on the night of the storm?"
    assert rows[0]["onset_error_ms"] == "-200" and rows[0]["sbld_lu"] == "-4.0"
    assert rows[0]["verdict"] == "masked" and rows[4]["verdict"] == "clear"
    # 1.013 s at 25 fps is frame 25.325 -> 25, one second past 10:00:00:00.
    assert rows[0]["tc_in"] == "10:00:01:00"


# --------------------------------------------------------------------------- OTIO and EDL

RATES = [("25", False), ("23.976", False), ("29.97", True), ("29.97", False)]
RATE_IDS = ["25", "23.976", "29.97DF", "29.97NDF"]


@pytest.mark.parametrize(("fps", "drop_frame"), RATES, ids=RATE_IDS)
def test_otio_markers_land_on_the_plan_frames(tmp_path: Path, fps: str, drop_frame: bool) -> None:
    # Reference: OpenTimelineIO's otio_json reader; frames from the definition; labels from
    # the `timecode` package and from OpenTimelineIO's own to_timecode.
    start = "00:59:50:00"
    plan = _plan(fps, drop_frame, start=start)
    timeline = otio.adapters.read_from_file(str(write_exports(plan, tmp_path)["otio"]))
    rate = float(EXACT_FPS[fps])
    assert timeline.global_start_time.rate == pytest.approx(rate)
    assert timeline.metadata["cueplan"]["drop_frame"] is drop_frame
    (clip,) = timeline.find_clips()
    events = {m.metadata["cueplan"]["event_id"]: m for m in clip.markers if m.metadata["cueplan"]["type"] == "event"}
    assert set(events) == {e.event_id for e in plan.events} and events
    for e in plan.events:
        marker = events[e.event_id]
        first = marker.marked_range.start_time
        assert first.rate == pytest.approx(rate)
        assert first.value == _expected_frame(e.start_s, fps, drop_frame, start)
        assert first.value + marker.marked_range.duration.value == _expected_frame(e.end_s, fps, drop_frame, start)
        label = _label(int(first.value), fps, drop_frame)
        assert otio.opentime.to_timecode(first, rate, drop_frame) == label
        assert marker.metadata["cueplan"]["tc_in"] == label
        assert marker.metadata["cueplan"]["background_gain_db"] == e.background_gain_db
    cues = [m for m in clip.markers if m.metadata["cueplan"]["type"] == "cue"]
    flagged = [s.index for s in plan.analysis.scores if s.verdict in ("at-risk", "masked")]
    assert sorted(m.metadata["cueplan"]["index"] for m in cues) == flagged


@pytest.mark.parametrize(("fps", "drop_frame"), RATES, ids=RATE_IDS)
def test_edl_events_land_on_the_plan_frames(tmp_path: Path, fps: str, drop_frame: bool) -> None:
    # Reference: the otio-cmx3600-adapter reader at the plan's rate (it reads ';' as
    # drop-frame and ':' as non-drop); frames from the definition; labels from `timecode`.
    start = "01:00:00:00"
    plan = _plan(fps, drop_frame, start=start)
    text = write_exports(plan, tmp_path)["edl"].read_text(encoding="utf-8")
    lines = text.splitlines()
    assert lines[1] == ("FCM: DROP FRAME" if drop_frame else "FCM: NON-DROP FRAME")
    timeline = otio.adapters.read_from_string(text, "cmx_3600", rate=float(EXACT_FPS[fps]))
    (track,) = [t for t in timeline.tracks if t.kind == otio.schema.TrackKind.Audio]
    clips = list(track.find_clips())
    assert [c.name for c in clips] == [e.event_id for e in plan.events]
    for clip, e in zip(clips, plan.events):
        first, last = _expected_frame(e.start_s, fps, drop_frame, start), _expected_frame(e.end_s, fps, drop_frame, start)
        assert clip.source_range.start_time.value == first
        assert clip.source_range.duration.value == last - first
        record_in = track.range_of_child(clip).start_time - track.source_range.start_time
        assert record_in.value == first
        event_line = next(line for line in lines if line.split()[0] == f"{clips.index(clip) + 1:03d}")
        assert event_line.split()[-4] == _label(first, fps, drop_frame)
        assert clip.metadata["cmx_3600"]["reel"] == "BKGD"
        assert any(f"BACKGROUND {e.background_gain_db:+.1f} DB" in c for c in clip.metadata["cmx_3600"]["comments"])


def test_exports_never_write_over_an_input(tmp_path: Path) -> None:
    # Constructed: an input file where an export would go; it must stay as it was.
    source = tmp_path / "events.csv"
    source.write_text("not ours", encoding="utf-8")
    with pytest.raises(OutputError, match="refusing to write over the input"):
        write_exports(_plan(), tmp_path, inputs=[source])
    assert source.read_text(encoding="utf-8") == "not ours"
