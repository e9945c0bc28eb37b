"""The progress callback every long stage accepts, so stages report without printing.

A stage calls ``progress(stage, done, total)`` with ``done``/``total`` in the stage's own
unit (seconds of audio, episodes). The CLI turns the calls into a rich progress bar on a
terminal and stays quiet otherwise; library callers may pass ``None``.
"""

from __future__ import annotations

from typing import Protocol


class Progress(Protocol):
    """Receives ``(stage name, amount done, total amount)``."""

    def __call__(self, stage: str, done: float, total: float) -> None: ...


def no_progress(stage: str, done: float, total: float) -> None:
    """A progress callback that does nothing."""
