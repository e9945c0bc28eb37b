"""Progress display for long stages: a rich bar with ETA on a terminal, one line per stage otherwise."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

from rich.console import Console
from rich.progress import BarColumn, Progress, TaskID, TextColumn, TimeRemainingColumn

from planner.progress import Progress as ProgressCallback
from planner.progress import no_progress


@contextlib.contextmanager
def progress_reporter(console: Console, *, quiet: bool = False) -> Iterator[ProgressCallback]:
    """Yield a progress callback drawing on ``console``.

    On a terminal: one bar per stage with the amount done and the time remaining. Not on
    a terminal (a log, CI): one line when each stage starts, unless ``quiet``. With
    ``quiet`` on a terminal: nothing.
    """
    if quiet:
        yield no_progress
        return
    if not console.is_terminal:
        seen: set[str] = set()

        def line(stage: str, done: float, total: float) -> None:
            if stage not in seen:
                seen.add(stage)
                console.print(f"{stage} ...", highlight=False)

        yield line
        return
    bars = Progress(
        TextColumn("{task.description:<18}"),
        BarColumn(),
        TextColumn("{task.percentage:>3.0f}%"),
        TimeRemainingColumn(),
        console=console,
        transient=True,
    )
    tasks: dict[str, TaskID] = {}

    def update(stage: str, done: float, total: float) -> None:
        if stage not in tasks:
            tasks[stage] = bars.add_task(stage, total=max(total, 1e-9))
        bars.update(tasks[stage], completed=min(done, total), total=max(total, 1e-9))

    with bars:
        yield update
