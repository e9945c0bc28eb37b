"""The triage catalogue: one SQLite file holding every episode's inputs, status, summary and cues.

Tables (docs/triage.md lists every column):

- ``catalogue_schema(version)``: one row, :data:`CATALOGUE_VERSION`;
- ``episodes``: one row per episode id: input paths and SHA-256, the settings fingerprint,
  ``status`` (``running``, ``done``, ``failed`` with ``message``), the
  :class:`~planner.batch.summary.EpisodeSummary` columns (worst scenes and warnings as JSON),
  ``attempts`` and the timing columns :data:`TIMING_COLUMNS`;
- ``cues``: one row per cue of a ``done`` episode (:class:`~planner.batch.summary.CatalogueCue`).

Each change is one transaction (``BEGIN IMMEDIATE`` ... ``COMMIT``): marking an episode
running clears its old summary and cues; finishing writes the episode row and all its cue
rows together, so a process killed at any point leaves either the whole episode or none
of it. The database runs in WAL mode, so reports can read while a batch writes. Every value
goes in through SQL parameters; column names come only from the constants below.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import sqlite3
from collections.abc import Iterator, Mapping, Sequence
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from planner.batch.summary import CatalogueCue, EpisodeSummary, canonical_json
from planner.errors import CueplanError, InputError

#: Layout version of the catalogue's tables; a file of another version is refused.
CATALOGUE_VERSION = 1
STATUSES = ("running", "done", "failed")
INPUT_ROLES = ("mix", "dialogue", "background", "subtitles")
#: Columns that differ between two runs of the same work; left out of comparisons.
TIMING_COLUMNS = ("started_at", "finished_at", "elapsed_s")
_JSON_FIELDS = {"worst_scenes": "worst_scenes_json", "warnings": "warnings_json"}


def _sql_type(tp: Any) -> str:
    text = str(tp)
    return "REAL" if "float" in text else "INTEGER" if "int" in text else "TEXT"


#: Summary columns in EpisodeSummary field order, with their SQL types.
SUMMARY_COLUMNS: tuple[tuple[str, str], ...] = tuple(
    (_JSON_FIELDS.get(f.name, f.name), "TEXT" if f.name in _JSON_FIELDS else _sql_type(f.type))
    for f in dataclasses.fields(EpisodeSummary)
)
INPUT_COLUMNS: tuple[tuple[str, str], ...] = tuple(
    (f"{role}_{what}", "TEXT") for role in INPUT_ROLES for what in ("path", "sha256")
)
CUE_COLUMNS: tuple[tuple[str, str], ...] = tuple(
    (f.name, "TEXT" if f.name == "flags" else _sql_type(f.type)) for f in dataclasses.fields(CatalogueCue)
)

_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS catalogue_schema (version INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS episodes (
    episode_id TEXT PRIMARY KEY,
    status TEXT NOT NULL CHECK (status IN ('running', 'done', 'failed')),
    message TEXT NOT NULL DEFAULT '',
    {", ".join(f"{name} {kind}" for name, kind in INPUT_COLUMNS)},
    fps TEXT,
    settings_fingerprint TEXT NOT NULL,
    settings_json TEXT NOT NULL,
    {", ".join(f"{name} {kind}" for name, kind in SUMMARY_COLUMNS)},
    attempts INTEGER NOT NULL DEFAULT 0,
    started_at TEXT,
    finished_at TEXT,
    elapsed_s REAL
);
CREATE TABLE IF NOT EXISTS cues (
    episode_id TEXT NOT NULL REFERENCES episodes(episode_id) ON DELETE CASCADE,
    {", ".join(f"{name} {kind}" for name, kind in CUE_COLUMNS)},
    PRIMARY KEY (episode_id, cue_index)
);
"""


def utc_now() -> str:
    """The current time, ISO 8601 UTC to the microsecond."""
    return datetime.now(timezone.utc).isoformat(timespec="microseconds")


class Catalogue:
    """An open catalogue file. Use as a context manager; only one process should write at a time.

    Parameters
    ----------
    path : str or Path
        The SQLite file.
    create : bool, keyword-only
        Create the file and its tables when missing (a batch run); ``False`` for reports,
        which refuse a missing file.

    Raises
    ------
    InputError
        The file is missing (``create=False``), is not an SQLite database, or holds a
        catalogue of another layout version.
    """

    def __init__(self, path: str | Path, *, create: bool = True) -> None:
        self.path = Path(path)
        if not create and not self.path.is_file():
            raise InputError("no catalogue here; run `cueplan triage SOURCE --catalog FILE` first", path=self.path)
        if create and not self.path.parent.is_dir():
            raise InputError("the catalogue's folder does not exist; create it or choose another path", path=self.path)
        try:
            self._db = sqlite3.connect(self.path, isolation_level=None, timeout=30.0)
            self._db.row_factory = sqlite3.Row
            self._db.execute("PRAGMA foreign_keys = ON")
            if create:
                self._db.execute("PRAGMA journal_mode = WAL")
                self._setup()
            self._check_version()
        except sqlite3.DatabaseError as exc:
            with contextlib.suppress(Exception):
                self._db.close()
            raise InputError(f"not a usable catalogue ({exc}); pass a catalogue file or a new path", path=self.path) from None

    def _setup(self) -> None:
        with self.transaction():
            # Statement by statement: executescript() would commit on its own, outside the transaction.
            for statement in filter(str.strip, _SCHEMA.split(";")):
                self._db.execute(statement)
            if self._db.execute("SELECT COUNT(*) FROM catalogue_schema").fetchone()[0] == 0:
                self._db.execute("INSERT INTO catalogue_schema (version) VALUES (?)", (CATALOGUE_VERSION,))

    def _check_version(self) -> None:
        row = self._db.execute("SELECT version FROM catalogue_schema").fetchone()
        if row is None or row[0] != CATALOGUE_VERSION:
            found = "none" if row is None else row[0]
            raise InputError(
                f"catalogue layout version {found}, this cueplan writes {CATALOGUE_VERSION}; pass a new --catalog file",
                path=self.path,
            )

    def close(self) -> None:
        """Close the database connection."""
        self._db.close()

    def __enter__(self) -> Catalogue:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextlib.contextmanager
    def transaction(self) -> Iterator[sqlite3.Connection]:
        """One write transaction: committed when the block ends, rolled back on any exception."""
        self._db.execute("BEGIN IMMEDIATE")
        try:
            yield self._db
        except BaseException:
            self._db.execute("ROLLBACK")
            raise
        self._db.execute("COMMIT")

    # ------------------------------------------------------------------ reading
    def episode(self, episode_id: str) -> dict[str, Any] | None:
        """The episode's row as a dict (JSON columns decoded), or None."""
        row = self._db.execute("SELECT * FROM episodes WHERE episode_id = ?", (episode_id,)).fetchone()
        return None if row is None else _decode(row)

    def episodes(self) -> list[dict[str, Any]]:
        """Every episode row, by episode id."""
        return [_decode(r) for r in self._db.execute("SELECT * FROM episodes ORDER BY episode_id")]

    def cues(self, episode_id: str) -> list[dict[str, Any]]:
        """The cue rows of an episode, by cue index (``flags`` as a tuple)."""
        rows = self._db.execute("SELECT * FROM cues WHERE episode_id = ? ORDER BY cue_index", (episode_id,))
        return [{**dict(r), "flags": tuple(f for f in (r["flags"] or "").split(",") if f)} for r in rows]

    # ------------------------------------------------------------------ writing
    def mark_running(
        self, episode_id: str, *, paths: Mapping[str, str | None], fps: str, fingerprint: str, settings_json: str
    ) -> None:
        """Start (or restart) an episode: status ``running``, paths and settings recorded, old results removed.

        ``paths`` maps roles of :data:`INPUT_ROLES` to input paths (absent roles: ``None``).
        ``attempts`` counts the starts of this episode across runs.
        """
        with self.transaction() as db:
            row = db.execute("SELECT attempts FROM episodes WHERE episode_id = ?", (episode_id,)).fetchone()
            attempts = 1 if row is None else row[0] + 1
            db.execute("DELETE FROM cues WHERE episode_id = ?", (episode_id,))
            db.execute("DELETE FROM episodes WHERE episode_id = ?", (episode_id,))
            fields = {
                "episode_id": episode_id,
                "status": "running",
                **{f"{role}_path": paths.get(role) for role in INPUT_ROLES},
                "fps": fps,
                "settings_fingerprint": fingerprint,
                "settings_json": settings_json,
                "attempts": attempts,
                "started_at": utc_now(),
            }
            _insert(db, "episodes", fields)

    def record_done(
        self,
        episode_id: str,
        summary: EpisodeSummary,
        cues: Sequence[CatalogueCue],
        *,
        sha256: Mapping[str, str | None],
        elapsed_s: float,
    ) -> None:
        """Finish an episode: the SHA-256 of the inputs analysed, its summary and every cue row, in one transaction."""
        fields = {}
        for f in dataclasses.fields(EpisodeSummary):
            value = getattr(summary, f.name)
            if f.name in _JSON_FIELDS:
                value = canonical_json([v if isinstance(v, str) else dataclasses.asdict(v) for v in value])
            fields[_JSON_FIELDS.get(f.name, f.name)] = value
        cue_rows = [{**dataclasses.asdict(c), "flags": ",".join(c.flags)} for c in cues]
        with self.transaction() as db:
            self._finish(db, episode_id, "done", "", {**_hashes(sha256), **fields}, elapsed_s)
            for row in cue_rows:
                _insert(db, "cues", {"episode_id": episode_id, **row})

    def record_failed(self, episode_id: str, message: str, *, sha256: Mapping[str, str | None], elapsed_s: float) -> None:
        """Finish an episode as ``failed`` with its message and the hashes of the inputs that could be read."""
        with self.transaction() as db:
            self._finish(db, episode_id, "failed", message, _hashes(sha256), elapsed_s)

    def _finish(
        self, db: sqlite3.Connection, episode_id: str, status: str, message: str, fields: dict[str, Any], elapsed_s: float
    ) -> None:
        row = db.execute("SELECT status FROM episodes WHERE episode_id = ?", (episode_id,)).fetchone()
        if row is None or row[0] != "running":
            raise CueplanError(
                f"{self.path}: episode {episode_id!r} is not marked running; another run may be writing this catalogue"
            )
        db.execute("DELETE FROM cues WHERE episode_id = ?", (episode_id,))
        values = {"status": status, "message": message, **fields, "finished_at": utc_now(), "elapsed_s": float(elapsed_s)}
        assignments = ", ".join(f"{name} = ?" for name in values)
        db.execute(f"UPDATE episodes SET {assignments} WHERE episode_id = ?", (*values.values(), episode_id))


def _hashes(sha256: Mapping[str, str | None]) -> dict[str, str | None]:
    return {f"{role}_sha256": sha256.get(role) for role in INPUT_ROLES}


def _insert(db: sqlite3.Connection, table: str, fields: Mapping[str, Any]) -> None:
    names = ", ".join(fields)
    marks = ", ".join("?" for _ in fields)
    db.execute(f"INSERT INTO {table} ({names}) VALUES ({marks})", tuple(fields.values()))


def _decode(row: sqlite3.Row) -> dict[str, Any]:
    out = dict(row)
    for name in _JSON_FIELDS.values():
        if out.get(name) is not None:
            out[name] = json.loads(out[name])
    return out
