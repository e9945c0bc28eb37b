"""docs/formats.md against the files cueplan writes: column lists, keys, tables, versions.

Ground truth is what the code writes: the column constants of the CSV writers, the keys of
an analysis.json and an alignment.json written here, the tables of a catalogue created here
(SQLite's own ``PRAGMA table_info``), and the version constants.
"""

from __future__ import annotations

import dataclasses
import json
import re
import sqlite3
from pathlib import Path

import pytest
from plan_factory import CueSpec, make_analysis

from planner import folder, runs
from planner.batch.catalogue import CATALOGUE_VERSION, Catalogue
from planner.batch.summary import SUMMARY_VERSION
from planner.demo.synth import synth_programme, write_programme
from planner.io.exports import CUES_COLUMNS, EVENTS_COLUMNS
from planner.model import SCHEMA_VERSION
from planner.render.renderer import RenderReport
from planner.render.verify import VERIFY_COLUMNS, VerifyReport, VerifyRow
from planner.settings import AnalysisSettings

DOC = (Path(__file__).resolve().parent.parent / "docs" / "formats.md").read_text(encoding="utf-8")


def _section(heading: str) -> str:
    """The text under a heading, up to the next heading of the same or a higher level."""
    level = heading.split(" ", 1)[0]
    body = DOC.split(f"\n{heading}\n", 1)[1]
    stop = re.search(rf"\n#{{1,{len(level)}}} ", body)
    return body[: stop.start()] if stop else body


def _first_column(text: str) -> list[str]:
    """The backticked names in the first cell of each table row (header and rule skipped)."""
    names = []
    for line in text.splitlines():
        m = re.match(r"\| `([^`]+)` \|", line)
        if m:
            names.append(m.group(1))
    return names


@pytest.mark.parametrize(
    ("heading", "columns"),
    [("### cues.csv", CUES_COLUMNS), ("### events.csv", EVENTS_COLUMNS), ("### verify.csv", VERIFY_COLUMNS)],
    ids=["cues", "events", "verify"],
)
def test_csv_columns_are_listed_in_order(heading: str, columns: tuple[str, ...]) -> None:
    # Ground truth: the column constants the writers put in the header row.
    assert _first_column(_section(heading)) == list(columns)


def test_analysis_json_keys() -> None:
    # Ground truth: the keys of an analysis.json text written by planner.pipeline.analysis_json.
    data = json.loads(folder.analysis_json(make_analysis([CueSpec(1.0, 3.0, snr_db=0.0)])))
    assert sorted(_first_column(_section("## analysis.json"))) == sorted(data)
    activity = _section("## analysis.json").split("| `activity` |", 1)[1].split("\n", 1)[0]
    for key in data["activity"]:
        assert f"`{key}`" in activity, key


def test_alignment_json_keys(tmp_path: Path) -> None:
    # Ground truth: an alignment.json written by `cueplan align`'s pipeline function on a short
    # synthesized programme.
    files = write_programme(synth_programme(n_lines=3, seed=1, snr_db=15.0), tmp_path)
    inputs = folder.Inputs(subtitles=files["subtitles"], mix=files["mix"])
    runs.run_alignment(inputs, tmp_path / "qc", AnalysisSettings(vad="fast"))
    data = json.loads((tmp_path / "qc" / "alignment.json").read_text(encoding="utf-8"))
    text = _section("## alignment.json")
    assert sorted(_first_column(text)) == sorted(data)
    rows = {name: text.split(f"| `{name}` |", 1)[1].split("\n", 1)[0] for name in ("alignment", "timings", "uncovered")}
    for key in [*data["alignment"], *data["alignment"]["segments"][0]]:
        assert f"`{key}`" in rows["alignment"], key
    for key in data["timings"][0]:
        assert f"`{key}`" in rows["timings"], key


def _table_after(marker: str) -> str:
    """The first table after a line holding ``marker`` in the verify.json / render.json section."""
    section = _section("### verify.json and render.json")
    return section.split(marker, 1)[1].split("\n\n|", 1)[1].split("\n\n", 1)[0]


def test_verify_and_render_json_keys() -> None:
    # Ground truth: the record fields (pipeline writes {"file": ..., **record.to_dict()}).
    verify = _table_after("`verify.json`:")
    assert sorted(_first_column("|" + verify)) == sorted({"file"} | {f.name for f in dataclasses.fields(VerifyReport)})
    row = verify.split("| `rows` |", 1)[1].split("\n", 1)[0]
    for f in dataclasses.fields(VerifyRow):
        assert f"`{f.name}`" in row, f.name
    render = _table_after("`render.json`:")
    assert sorted(_first_column("|" + render)) == sorted({"file"} | {f.name for f in dataclasses.fields(RenderReport)})


def test_catalogue_tables_and_columns(tmp_path: Path) -> None:
    # Ground truth: SQLite's own description of a freshly created catalogue.
    path = tmp_path / "catalogue.sqlite"
    Catalogue(path).close()
    db = sqlite3.connect(path)
    tables = [r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY rowid")]
    listed = {}
    for m in re.finditer(r"^- `(\w+)`: ((?:`\w+`(?:,\s*)?)+)", _section("## The triage catalogue"), re.M):
        listed[m.group(1)] = re.findall(r"`(\w+)`", m.group(2))
    assert sorted(listed) == sorted(tables)
    for table in tables:
        assert listed[table] == [r[1] for r in db.execute(f"PRAGMA table_info({table})")], table
    db.close()


def test_version_history_names_the_current_versions() -> None:
    # Ground truth: the version constants of the code.
    history = _section("## Version history")
    assert f"| schema {SCHEMA_VERSION} |" in history
    assert f"| catalogue {CATALOGUE_VERSION} |" in history
    assert f"summary rules version {SUMMARY_VERSION}" in history
