"""Safe file outputs: temporary name in the target folder, rename when complete, never over an input."""

from __future__ import annotations

import contextlib
import hashlib
import os
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path

from planner.errors import OutputError

_HASH_BLOCK_BYTES = 1 << 20


def sha256_file(path: str | Path) -> str:
    """Hex SHA-256 of a file, read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(_HASH_BLOCK_BYTES), b""):
            digest.update(chunk)
    return digest.hexdigest()


def refuse_inputs(target: str | Path, inputs: Iterable[str | Path]) -> None:
    """Raise OutputError if ``target`` is (or links to) one of ``inputs``."""
    t = Path(target)
    for src in inputs:
        s = Path(src)
        same = t.resolve() == s.resolve()
        if not same and t.exists() and s.exists():
            same = os.path.samefile(t, s)
        if same:
            raise OutputError(f"{t}: refusing to write over the input file {s}; choose another output path")


@contextlib.contextmanager
def atomic_output(target: str | Path, *, inputs: Iterable[str | Path] = ()) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it onto ``target`` only if the block succeeds.

    The temporary file is removed on any exception (including KeyboardInterrupt), so an
    interrupted write never leaves a partial file under the final name.
    """
    target = Path(target)
    refuse_inputs(target, inputs)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{folder}: output folder does not exist; create it or choose another path")
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=folder)
    os.close(fd)
    tmp = Path(tmp_name)
    # mkstemp creates 0600; give the output the permissions an ordinary open() would.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        yield tmp
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def atomic_write_text(target: str | Path, text: str, *, inputs: Iterable[str | Path] = ()) -> None:
    """Write UTF-8 text (LF line ends) atomically."""
    with atomic_output(target, inputs=inputs) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")


def atomic_write_bytes(target: str | Path, data: bytes, *, inputs: Iterable[str | Path] = ()) -> None:
    """Write bytes atomically."""
    with atomic_output(target, inputs=inputs) as tmp:
        tmp.write_bytes(data)
