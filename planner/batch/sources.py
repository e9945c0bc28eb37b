"""Finding the episodes of a triage SOURCE: a folder of files paired by name, or a CSV manifest.

Folder rules (docs/triage.md, "Sources"): every file below the folder (sorted, hidden files
skipped) whose suffix is an audio one (:data:`AUDIO_SUFFIXES`) or a subtitle one
(:data:`SUBTITLE_SUFFIXES`) is grouped by its path without suffix; a stem carries its role
before the suffix (``ep01.dialogue.wav``, ``ep01.background.wav``). A group with subtitles
and a mix, or subtitles and both stems, is an episode (with both, the stems are used and the
mix is listed as not used); every other file is listed as unpaired with the reason.

Manifest rules: a UTF-8 CSV with a header holding at least ``audio`` and ``subtitles``, and
optionally ``dialogue``, ``background``, ``fps`` and ``episode``; relative paths are relative
to the manifest's folder. Each row gives a mix (``audio``) or both stems. A file that is
missing is the episode's failure, found when it runs; a malformed manifest is a
:class:`~planner.errors.InputError` before anything runs.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

from planner.errors import InputError
from planner.settings import FRAME_RATES

AUDIO_SUFFIXES = (".wav", ".bwf", ".flac")
SUBTITLE_SUFFIXES = (".srt", ".vtt")
STEM_ROLES = ("dialogue", "background")
MANIFEST_COLUMNS = ("audio", "subtitles", "dialogue", "background", "fps", "episode")
_REQUIRED_COLUMNS = ("audio", "subtitles")


@dataclass(frozen=True)
class EpisodeJob:
    """The files of one episode (absolute paths) and its frame rate, as one triage task.

    ``fps`` overrides the analysis settings' frame rate for this episode when not ``None``.
    """

    episode_id: str
    subtitles: Path
    mix: Path | None = None
    dialogue: Path | None = None
    background: Path | None = None
    fps: str | None = None

    def roles(self) -> tuple[tuple[str, Path | None], ...]:
        """``(role, path)`` for every role, in catalogue order (mix, dialogue, background, subtitles)."""
        return (("mix", self.mix), ("dialogue", self.dialogue), ("background", self.background), ("subtitles", self.subtitles))


@dataclass(frozen=True)
class Unpaired:
    """A file of the source that is not part of any episode, and why (path relative to the source)."""

    path: str
    reason: str


@dataclass(frozen=True)
class Discovery:
    """What a source holds: the episodes (by id) and the files left out."""

    jobs: tuple[EpisodeJob, ...]
    unpaired: tuple[Unpaired, ...]


def discover(source: str | Path) -> Discovery:
    """The episodes of a folder or a ``.csv`` manifest.

    Raises
    ------
    InputError
        If the source does not exist, is neither a folder nor a CSV file, or the manifest is
        malformed (the message names the row and column).
    """
    path = Path(source)
    if path.is_dir():
        return discover_folder(path)
    if path.is_file() and path.suffix.lower() == ".csv":
        return read_manifest(path)
    if not path.exists():
        raise InputError("the triage source does not exist; pass a folder of episodes or a CSV manifest", path=path)
    raise InputError("the triage source is neither a folder nor a .csv manifest; pass one of those", path=path)


def _split_name(rel: Path) -> tuple[str, str] | None:
    """(episode key, role) of a file by its name, or None when it is neither audio nor subtitles."""
    suffix = rel.suffix.lower()
    base = rel.with_suffix("").as_posix()
    if suffix in SUBTITLE_SUFFIXES:
        return base, "subtitles"
    if suffix not in AUDIO_SUFFIXES:
        return None
    for role in STEM_ROLES:
        if base.lower().endswith(f".{role}"):
            return base[: -len(role) - 1], role
    return base, "mix"


def discover_folder(folder: Path) -> Discovery:
    """Episodes of a folder, paired by file name (module docstring); ids are the paths without suffix."""
    root = folder.resolve()
    groups: dict[str, dict[str, list[Path]]] = {}
    for path in sorted(root.rglob("*")):
        rel = path.relative_to(root)
        if any(part.startswith(".") for part in rel.parts):
            continue
        if path.is_dir() and path.suffix.lower() not in AUDIO_SUFFIXES + SUBTITLE_SUFFIXES:
            continue  # a folder named like an input is kept, so that it fails as its episode's input
        named = _split_name(rel)
        if named is not None:
            groups.setdefault(named[0], {}).setdefault(named[1], []).append(rel)
    jobs, unpaired = [], []
    for key in sorted(groups):
        files = groups[key]
        dup = [role for role, paths in sorted(files.items()) if len(paths) > 1]
        if dup:
            unpaired += [Unpaired(p.as_posix(), f"more than one {dup[0]} file for {key}; keep one") for p in files[dup[0]]]
            continue
        one = {role: paths[0] for role, paths in files.items()}
        has_stems = "dialogue" in one and "background" in one
        if "subtitles" not in one:
            unpaired += [Unpaired(p.as_posix(), f"no subtitle file {key}.srt or {key}.vtt") for p in one.values()]
            continue
        if not has_stems and "mix" not in one:
            missing = "no audio" if not (set(one) & set(STEM_ROLES)) else "only one stem"
            unpaired += [Unpaired(p.as_posix(), f"{missing} for {key}; add {key}.wav or both stems") for p in one.values()]
            continue
        if has_stems and "mix" in one:
            unpaired.append(Unpaired(one["mix"].as_posix(), "not used: the dialogue and background stems are analysed"))
        elif not has_stems:
            for role in set(one) & set(STEM_ROLES):
                unpaired.append(Unpaired(one[role].as_posix(), f"not used: only the {role} stem; the mix is analysed"))
        jobs.append(
            EpisodeJob(
                episode_id=key,
                subtitles=root / one["subtitles"],
                mix=None if has_stems else root / one["mix"],
                dialogue=root / one["dialogue"] if has_stems else None,
                background=root / one["background"] if has_stems else None,
            )
        )
    return Discovery(jobs=tuple(jobs), unpaired=tuple(sorted(unpaired, key=lambda u: u.path)))


def read_manifest(manifest: Path) -> Discovery:
    """Episodes of a CSV manifest (module docstring); ids from ``episode`` or the audio path without suffix."""
    try:
        text = manifest.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the manifest ({exc}); pass a UTF-8 CSV file", path=manifest) from None
    try:
        rows = list(csv.reader(text.splitlines()))
    except csv.Error as exc:
        raise InputError(f"the manifest is not valid CSV ({exc}); fix the file", path=manifest) from None
    if not rows or not any(cell.strip() for cell in rows[0]):
        raise InputError("the manifest is empty; give a header row (audio,subtitles,...) and one row per episode", path=manifest)
    header = [cell.strip().lower() for cell in rows[0]]
    unknown = [c for c in header if c not in MANIFEST_COLUMNS]
    if unknown:
        raise InputError(
            f"unknown manifest column {unknown[0]!r}; columns are {', '.join(MANIFEST_COLUMNS)}", path=manifest
        )
    missing = [c for c in _REQUIRED_COLUMNS if c not in header]
    if missing:
        raise InputError(f"the manifest has no {missing[0]!r} column; the header needs audio and subtitles", path=manifest)
    if len(set(header)) != len(header):
        raise InputError("a manifest column appears twice; name each column once", path=manifest)
    base = manifest.resolve().parent
    jobs: list[EpisodeJob] = []
    seen: dict[str, int] = {}
    for line, row in enumerate(rows[1:], start=2):
        if not any(cell.strip() for cell in row):
            continue
        if len(row) != len(header):
            raise InputError(f"row {line} has {len(row)} fields, the header {len(header)}; fix the row", path=manifest)
        job = _manifest_job(dict(zip(header, (c.strip() for c in row))), base, line, manifest)
        if job.episode_id in seen:
            raise InputError(
                f"row {line}: episode {job.episode_id!r} is also on row {seen[job.episode_id]}; give each episode once",
                path=manifest,
            )
        seen[job.episode_id] = line
        jobs.append(job)
    if not jobs:
        raise InputError("the manifest lists no episodes; add one row per episode under the header", path=manifest)
    return Discovery(jobs=tuple(sorted(jobs, key=lambda j: j.episode_id)), unpaired=())


def _manifest_job(cells: dict[str, str], base: Path, line: int, manifest: Path) -> EpisodeJob:
    def path_of(column: str) -> Path | None:
        value = cells.get(column, "")
        return None if not value else (base / value if not Path(value).is_absolute() else Path(value))

    mix, dialogue, background, subtitles = (path_of(c) for c in ("audio", "dialogue", "background", "subtitles"))
    if subtitles is None:
        raise InputError(f"row {line}: the subtitles cell is empty; give each episode its subtitle file", path=manifest)
    if mix is not None and (dialogue is not None or background is not None):
        raise InputError(f"row {line}: both audio and stems are given; give either a mix or both stems", path=manifest)
    if mix is None and (dialogue is None or background is None):
        raise InputError(
            f"row {line}: no audio; give the mix in 'audio', or both 'dialogue' and 'background'", path=manifest
        )
    fps = cells.get("fps") or None
    if fps is not None and fps not in FRAME_RATES:
        raise InputError(f"row {line}: fps={fps!r} must be one of {', '.join(FRAME_RATES)}; fix the cell", path=manifest)
    named = cells.get("episode", "")
    if not named:
        stem = (mix or dialogue or subtitles).with_suffix("")
        if mix is None and stem.name.lower().endswith(".dialogue"):
            stem = stem.with_name(stem.name[: -len(".dialogue")])
        named = Path(*stem.relative_to(base).parts).as_posix() if stem.is_relative_to(base) else stem.as_posix()
    return EpisodeJob(episode_id=named, subtitles=subtitles, mix=mix, dialogue=dialogue, background=background, fps=fps)
