"""The plan on disk: canonical plan.json (write, validate, load) and the CSV exports.

``plan.json`` is the plan's record form (:meth:`planner.model.Plan.to_dict`) plus a
``"kind"`` marker, written with sorted keys, two-space indent, fixed separators and floats
as Python's shortest round-trip repr, so equal plans give byte-identical files. Loading
validates against the JSON Schema shipped in ``planner/schema/plan.schema.json`` and then
checks what a schema cannot (times in order, ramps that fit, input hashes), naming the
field and the event in every error. The timeline exports (OTIO, EDL) are in
:mod:`planner.io.timeline`. Layout: docs/plan-format.md.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterable, Iterator, Mapping, Sequence
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

import jsonschema

from planner.errors import PlanFileError
from planner.io.files import atomic_output, atomic_write_text, sha256_file
from planner.io.timeline import TimecodeClock, write_edl, write_otio
from planner.model import SCHEMA_VERSION, GainEvent, Plan

__all__ = [
    "plan_json",
    "plan_json_chunks",
    "load_plan",
    "write_cues_csv",
    "write_events_csv",
    "write_otio",
    "write_edl",
    "write_exports",
    "CUES_COLUMNS",
    "EVENTS_COLUMNS",
]

#: Time slack when checking ramps against neighbours and the programme, seconds (1 µs:
#: the resolution the planner rounds times to).
_SLACK_S = 1e-6

#: Columns of cues.csv, in order (docs/plan-format.md).
CUES_COLUMNS = (
    "index", "start_s", "end_s", "aligned_start_s", "aligned_end_s", "tc_in", "tc_out",
    "onset_error_ms", "offset_error_ms", "speech_s", "cps", "flags", "speech_db", "background_db",
    "sbld_lu", "sii", "sii_short", "stoi", "method", "confidence", "verdict", "text",
)  # fmt: skip

#: Columns of events.csv, in order (docs/plan-format.md): one row per event and moved stem.
EVENTS_COLUMNS = (
    "event_id", "tc_in", "tc_out", "duration_s", "stem", "gain_db", "ramp_in_ms", "ramp_out_ms",
    "reason", "cue_ids", "text", "score_kind", "score_before", "score_after", "reachable",
)  # fmt: skip


# --------------------------------------------------------------------------- plan.json


def plan_json(plan: Plan) -> str:
    """Canonical JSON text of a plan (sorted keys, fixed layout, ends with a newline).

    The plan passes once through its record form first, so a value given as ``3`` where
    the record holds a float is written ``3.0``, as a loaded plan would write it.
    """
    return "".join(plan_json_chunks(plan))


def plan_json_chunks(plan: Plan) -> Iterator[str]:
    """:func:`plan_json` piece by piece, so that a hash of it needs no copy of the whole text."""
    data = {"kind": Plan.KIND, **Plan.from_dict(plan.to_dict()).to_dict()}
    encoder = json.JSONEncoder(sort_keys=True, indent=2, separators=(",", ": "), ensure_ascii=False, allow_nan=False)
    yield from encoder.iterencode(data)
    yield "\n"


@cache
def plan_schema() -> dict[str, Any]:
    """The JSON Schema of plan.json shipped with the package."""
    text = resources.files("planner").joinpath("schema/plan.schema.json").read_text(encoding="utf-8")
    return json.loads(text)


def _field(path: Iterable[Any]) -> str:
    out = ""
    for part in path:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "(top level)"


def _event_id(data: Any, path: Sequence[Any]) -> str | None:
    if len(path) >= 2 and path[0] == "events" and isinstance(path[1], int):
        try:
            value = data["events"][path[1]].get("event_id")
        except (AttributeError, IndexError, KeyError, TypeError):
            return None
        return value if isinstance(value, str) else None
    return None


def _validate_schema(data: Any, path: Path) -> None:
    validator = jsonschema.Draft202012Validator(plan_schema())
    errors = sorted(validator.iter_errors(data), key=lambda e: (list(map(str, e.absolute_path)), e.message))
    if not errors:
        return
    err = errors[0]
    where = list(err.absolute_path)
    if err.validator == "additionalProperties":
        extra = sorted(set(err.instance) - set(err.schema.get("properties", {})))
        where, message = [*where, extra[0]], f"unknown field {extra[0]!r}; remove it or check its spelling"
    elif err.validator == "required":
        message = f"{err.message}; add the field back (see docs/plan-format.md)"
    else:
        message = f"{err.message}; fix the value (see docs/plan-format.md)"
    raise PlanFileError(message, path=path, field=_field(where), event_id=_event_id(data, where))


def load_plan(path: str | Path, *, audio_paths: Mapping[str, Path] | None = None) -> Plan:
    """Read and check a plan.json.

    Parameters
    ----------
    path : str or Path
        The plan file.
    audio_paths : mapping of role to Path, optional
        Audio the plan is about to be applied to, by input role (``"mix"``,
        ``"dialogue"``, ``"background"``); each must match the SHA-256 recorded in the plan.

    Raises
    ------
    PlanFileError
        For invalid JSON, a schema violation, an inconsistent event (start not before
        end, a ramp that does not fit, overlapping events, unknown cues), a schema version
        this tool does not read, or audio that does not match the plan; ``field`` and
        ``event_id`` say where.
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise PlanFileError(f"cannot read the plan ({exc.strerror}); check the path", path=path) from exc
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise PlanFileError(f"not valid JSON ({exc}); restore the file or re-run the plan", path=path) from exc
    if isinstance(data, dict) and data.get("schema") != SCHEMA_VERSION and isinstance(data.get("schema"), int):
        raise PlanFileError(
            f"schema version {data['schema']} is not the version this tool reads ({SCHEMA_VERSION}); "
            "re-run the plan with this version",
            path=path,
            field="schema",
        )
    _validate_schema(data, path)
    data.pop("kind")
    try:
        plan = Plan.from_dict(data, where="plan")
    except PlanFileError as exc:  # the same error, now naming the file
        bare = exc.message.split(": ", 1)[1] if exc.field or exc.event_id else exc.message
        field = exc.field.removeprefix("plan.") if exc.field else None
        raise PlanFileError(bare, path=path, field=field, event_id=exc.event_id) from exc
    _check_events(plan, path)
    if audio_paths:
        check_audio(plan, audio_paths, path)
    return plan


def _check_events(plan: Plan, path: Path) -> None:
    """Checks a schema cannot express; each error names the event and its field."""
    duration_s = plan.analysis.audio.duration_s
    known = {c.index for c in plan.analysis.subtitles.cues}
    seen: set[str] = set()
    order = sorted(range(len(plan.events)), key=lambda i: plan.events[i].start_s)
    for i in order:
        e = plan.events[i]

        def fail(name: str, message: str, e: GainEvent = e, i: int = i) -> None:
            raise PlanFileError(message, path=path, field=f"events[{i}].{name}", event_id=e.event_id)

        if e.event_id in seen:
            fail("event_id", f"event id {e.event_id!r} is used twice; give each event its own id")
        seen.add(e.event_id)
        if not e.start_s < e.end_s:
            fail("end_s", f"end_s={e.end_s!r} must be after start_s={e.start_s!r}; fix the times")
        if e.end_s > duration_s + _SLACK_S:
            fail("end_s", f"end_s={e.end_s!r} is after the programme's end ({duration_s:.3f} s); fix the time")
        if e.start_s - e.ramp_in_ms / 1000.0 < -_SLACK_S:
            fail("ramp_in_ms", f"ramp_in_ms={e.ramp_in_ms!r} would start before the programme; shorten it to "
                 f"at most {1000.0 * e.start_s:.0f} ms")
        if e.end_s + e.ramp_out_ms / 1000.0 > duration_s + _SLACK_S:
            fail("ramp_out_ms", f"ramp_out_ms={e.ramp_out_ms!r} would run past the programme's end; shorten it "
                 f"to at most {1000.0 * (duration_s - e.end_s):.0f} ms")
        unknown = sorted(set(e.cue_indices) - known)
        if unknown:
            fail("cue_indices", f"cue {unknown[0]} is not in the subtitles of this plan; remove it")
    for a, b in zip(order, order[1:]):
        ea, eb = plan.events[a], plan.events[b]
        if eb.start_s < ea.end_s:
            raise PlanFileError(
                f"starts at {eb.start_s!r} s, inside event {ea.event_id} (until {ea.end_s!r} s); merge the events "
                "or move one",
                path=path, field=f"events[{b}].start_s", event_id=eb.event_id,
            )
        gap_s = (eb.start_s - eb.ramp_in_ms / 1000.0) - (ea.end_s + ea.ramp_out_ms / 1000.0)
        if gap_s < -_SLACK_S:
            raise PlanFileError(
                f"ramp_in_ms={eb.ramp_in_ms!r} overlaps the ramp out of event {ea.event_id}; the two ramps may "
                f"take at most {1000.0 * (eb.start_s - ea.end_s):.0f} ms together",
                path=path, field=f"events[{b}].ramp_in_ms", event_id=eb.event_id,
            )


def check_audio(plan: Plan, audio_paths: Mapping[str, Path], path: Path) -> None:
    """Raise PlanFileError unless each audio file (by role) has the SHA-256 the plan records."""
    roles = {f.role: (i, f) for i, f in enumerate(plan.analysis.inputs)}
    for role in sorted(audio_paths):
        given = Path(audio_paths[role])
        if role not in roles:
            raise PlanFileError(
                f"the plan was made without a {role} input, but {given} was given as {role}; "
                "pass the audio the plan was made from",
                path=path, field="analysis.inputs",
            )
        i, recorded = roles[role]
        if sha256_file(given) != recorded.sha256:
            raise PlanFileError(
                f"{given} does not match the {role} audio this plan was made from ({recorded.path}, SHA-256 "
                f"{recorded.sha256[:12]}...); pass that file, or re-run the analysis on this one",
                path=path, field=f"analysis.inputs[{i}].sha256",
            )


# --------------------------------------------------------------------------- CSV


def _num(value: float | None, places: int) -> str:
    return "" if value is None else f"{value:.{places}f}"


def _field_num(record: object, name: str, places: int) -> str:
    """A record's numeric field formatted, or empty when the record or the value is missing."""
    return _num(None if record is None else getattr(record, name), places)


def _csv_text(comment: str, columns: Sequence[str], rows: Iterable[Sequence[str]]) -> str:
    buf = io.StringIO()
    buf.write(f"# {comment}\n")
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(columns)
    writer.writerows(rows)
    return buf.getvalue()


def _one_line(text: str) -> str:
    return " / ".join(part.strip() for part in text.splitlines() if part.strip())


def write_cues_csv(plan: Plan, path: str | Path, *, inputs: Iterable[str | Path] = ()) -> None:
    """cues.csv: one row per cue (file times, aligned times and timecodes, QC flags, scores)."""
    clock = TimecodeClock.of(plan)
    a = plan.analysis
    timings = {t.index: t for t in a.timings}
    scores = {s.index: s for s in a.scores}
    rows = []
    for cue in a.subtitles.cues:
        t, s = timings.get(cue.index), scores.get(cue.index)
        rows.append([
            str(cue.index), _num(cue.start_s, 3), _num(cue.end_s, 3),
            _field_num(t, "aligned_start_s", 3), _field_num(t, "aligned_end_s", 3),
            clock.timecode(t.aligned_start_s) if t else "", clock.timecode(t.aligned_end_s) if t else "",
            _field_num(t, "onset_error_ms", 0), _field_num(t, "offset_error_ms", 0),
            _field_num(t, "speech_s", 2), _field_num(t, "cps", 1), ";".join(t.flags) if t else "",
            _field_num(s, "speech_db", 1), _field_num(s, "background_db", 1), _field_num(s, "sbld_lu", 1),
            _field_num(s, "sii", 3), _field_num(s, "sii_short", 3), _field_num(s, "stoi", 3),
            s.method if s else "", _field_num(s, "confidence", 2), s.verdict if s else "", _one_line(cue.text),
        ])  # fmt: skip
    atomic_write_text(path, _csv_text(f"cueplan cues; {clock.describe()}", CUES_COLUMNS, rows), inputs=inputs)


def _stems(event: GainEvent, move: str) -> list[tuple[str, float]]:
    rows = [(name, gain) for name, gain in (("dialogue", event.dialogue_gain_db), ("background", event.background_gain_db)) if gain]
    return rows or [("dialogue" if move == "dialogue" else "background", 0.0)]


def write_events_csv(plan: Plan, path: str | Path, *, inputs: Iterable[str | Path] = ()) -> None:
    """events.csv: one row per event and stem moved; TC in/out are where full gain starts/ends."""
    clock = TimecodeClock.of(plan)
    texts = {c.index: _one_line(c.text) for c in plan.analysis.subtitles.cues}
    move = str(plan.settings.get("move", "background"))
    rows = []
    for e in plan.events:
        places = 3 if e.target_kind == "sii" else 1
        for stem, gain in _stems(e, move):
            rows.append([
                e.event_id, clock.timecode(e.start_s), clock.timecode(e.end_s), _num(e.end_s - e.start_s, 3),
                stem, f"{gain:+.1f}", _num(e.ramp_in_ms, 0), _num(e.ramp_out_ms, 0), e.reason,
                ";".join(str(i) for i in e.cue_indices), " | ".join(texts.get(i, "") for i in e.cue_indices),
                e.target_kind, _num(e.score_before, places), _num(e.score_after, places),
                "yes" if e.reachable else "no",
            ])  # fmt: skip
    comment = f"cueplan events; {clock.describe()}; TC in/out = full gain, ramps lie outside; scored from {_method(plan)}"
    atomic_write_text(path, _csv_text(comment, EVENTS_COLUMNS, rows), inputs=inputs)


def _method(plan: Plan) -> str:
    methods = sorted({s.method for s in plan.analysis.scores if s.method != "none"})
    return "+".join(methods) if methods else "no scores"


def write_exports(plan: Plan, out_dir: str | Path, *, inputs: Iterable[str | Path] = ()) -> dict[str, Path]:
    """Write plan.json, cues.csv, events.csv, plan.otio and plan.edl into ``out_dir``.

    Returns the written paths by name (``"plan"``, ``"cues"``, ``"events"``, ``"otio"``,
    ``"edl"``). ``inputs`` are refused as targets (never written over).
    """
    out = Path(out_dir)
    paths = {
        "plan": out / "plan.json",
        "cues": out / "cues.csv",
        "events": out / "events.csv",
        "otio": out / "plan.otio",
        "edl": out / "plan.edl",
    }
    inputs = tuple(inputs)
    with atomic_output(paths["plan"], inputs=inputs) as tmp, tmp.open("w", encoding="utf-8", newline="\n") as f:
        f.writelines(plan_json_chunks(plan))  # plan_json piece by piece: no copy of the whole text
    write_cues_csv(plan, paths["cues"], inputs=inputs)
    write_events_csv(plan, paths["events"], inputs=inputs)
    write_otio(plan, paths["otio"], inputs=inputs)
    write_edl(plan, paths["edl"], inputs=inputs)
    return paths
