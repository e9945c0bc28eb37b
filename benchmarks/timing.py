"""Run one command as a whole process and measure it: wall time, CPU time, peak resident memory.

With GNU time (``/usr/bin/time -v``, Debian package ``time``) the figures are the ones it
reports for the command; its peak resident set is that of the largest single process. A
command that starts worker processes uses more in all, so a sampler also sums the
proportional set size (``Pss`` of ``/proc/PID/smaps_rollup``: shared pages split between
the processes that map them) over the command's process tree every 50 ms. Without it the command is waited for with ``os.wait4``, which
returns the same kernel accounting (``getrusage`` of that one child), and the wall time is
taken around the wait. Either way the 1-minute load average is recorded with each run: the
machine is shared, and a ratio to the floor measured in the same run is steadier than
seconds.
"""

from __future__ import annotations

import os
import re
import subprocess
import tempfile
import threading
import time
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path

GNU_TIME = Path("/usr/bin/time")

_FIELDS = {
    "user_s": re.compile(r"User time \(seconds\): ([\d.]+)"),
    "sys_s": re.compile(r"System time \(seconds\): ([\d.]+)"),
    "peak_kib": re.compile(r"Maximum resident set size \(kbytes\): (\d+)"),
    "wall": re.compile(r"Elapsed \(wall clock\) time \(h:mm:ss or m:ss\): ([\d:.]+)"),
}


@dataclass(frozen=True)
class Run:
    """One measured run of a command."""

    wall_s: float
    user_s: float
    sys_s: float
    peak_rss_mb: float
    peak_tree_pss_mb: float
    load_1min: float
    tool: str

    def to_dict(self) -> dict[str, float | str]:
        """JSON-ready fields."""
        return asdict(self)


class CommandFailed(RuntimeError):
    """The measured command exited with a non-zero status."""


def have_gnu_time() -> bool:
    """Whether ``/usr/bin/time`` is GNU time (it takes ``-v``)."""
    if not GNU_TIME.is_file():
        return False
    done = subprocess.run([str(GNU_TIME), "-v", "true"], capture_output=True, text=True, check=False)
    return done.returncode == 0 and "Maximum resident set size" in done.stderr


def _tree_pss_kib(root: int) -> int:
    """Summed Pss (KiB) of ``root`` and every process descending from it; 0 when unreadable."""
    parents: dict[int, int] = {}
    for entry in os.scandir("/proc"):
        if entry.name.isdigit():
            try:
                with open(f"/proc/{entry.name}/stat", "rb") as fh:
                    # the fourth field, after the parenthesised command name (which may hold spaces)
                    parents[int(entry.name)] = int(fh.read().rsplit(b")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
    tree, frontier = {root}, [root]
    while frontier:
        frontier = [pid for pid, ppid in parents.items() if ppid in frontier and pid not in tree]
        tree.update(frontier)
    total = 0
    for pid in tree:
        try:
            with open(f"/proc/{pid}/smaps_rollup", "rb") as fh:
                for line in fh:
                    if line.startswith(b"Pss:"):
                        total += int(line.split()[1])
                        break
        except OSError:
            continue
    return total


class _TreeSampler(threading.Thread):
    """Polls the summed Pss of a process tree until stopped; keeps the largest value (KiB)."""

    def __init__(self, root: int) -> None:
        super().__init__(daemon=True)
        self.root, self.peak_kib = root, 0
        self._stop_event = threading.Event()

    def run(self) -> None:
        while not self._stop_event.wait(0.05):
            self.peak_kib = max(self.peak_kib, _tree_pss_kib(self.root))

    def stop(self) -> float:
        """Stop and return the peak in MB."""
        self._stop_event.set()
        self.join()
        return self.peak_kib / 1024.0


def _clock_s(text: str) -> float:
    seconds = 0.0
    for part in text.split(":"):
        seconds = seconds * 60.0 + float(part)
    return seconds


def measure(argv: Sequence[str], *, gnu_time: bool, env: dict[str, str] | None = None, stdout_path: Path | None = None) -> Run:
    """Run ``argv`` once and measure it; raises :class:`CommandFailed` with its stderr tail on failure."""
    load = os.getloadavg()[0]
    with tempfile.TemporaryDirectory(prefix="cueplan-time-") as tmp:
        report = Path(tmp) / "time.txt"
        err_path = Path(tmp) / "stderr.txt"
        out_target = stdout_path if stdout_path is not None else Path(os.devnull)
        full = [str(GNU_TIME), "-v", "-o", str(report), *argv] if gnu_time else list(argv)
        with open(out_target, "wb") as out, open(err_path, "wb") as err:
            t0 = time.perf_counter()
            proc = subprocess.Popen(full, stdout=out, stderr=err, env=env)
            sampler = _TreeSampler(proc.pid)
            sampler.start()
            _, status, usage = os.wait4(proc.pid, 0)
            wall = time.perf_counter() - t0
            tree_mb = sampler.stop()
            proc.returncode = os.waitstatus_to_exitcode(status)
        if proc.returncode != 0:
            tail = err_path.read_text(errors="replace")[-2000:]
            raise CommandFailed(f"{' '.join(argv)} exited with {proc.returncode}:\n{tail}")
        if not gnu_time:
            return Run(wall, usage.ru_utime, usage.ru_stime, usage.ru_maxrss / 1024.0, tree_mb, load, "os.wait4 (getrusage)")
        text = report.read_text()
    found = {k: rx.search(text) for k, rx in _FIELDS.items()}
    missing = [k for k, m in found.items() if m is None]
    if missing:
        raise CommandFailed(f"GNU time reported no {', '.join(missing)} for {' '.join(argv)}:\n{text}")
    return Run(
        wall_s=_clock_s(found["wall"].group(1)),  # type: ignore[union-attr]
        user_s=float(found["user_s"].group(1)),  # type: ignore[union-attr]
        sys_s=float(found["sys_s"].group(1)),  # type: ignore[union-attr]
        peak_rss_mb=int(found["peak_kib"].group(1)) / 1024.0,  # type: ignore[union-attr]
        peak_tree_pss_mb=tree_mb,
        load_1min=load,
        tool="GNU time -v",
    )
