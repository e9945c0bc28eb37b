"""The project's exception hierarchy.

Every error the tool raises on purpose derives from :class:`CueplanError`. Errors caused
by what the user gave (a file, an option, a hand-edited plan) are :class:`InputError`,
which is also a :class:`ValueError`, so library callers can catch either. Only the CLI
turns them into an exit code (2) and a one-line message; nothing here prints.

Messages say what is wrong and what to do, in the form
``"name=value must be ...; pass ..."`` where a value is at fault.
"""

from __future__ import annotations

from pathlib import Path


class CueplanError(Exception):
    """Root of every error raised on purpose by cueplan."""


class InputError(CueplanError, ValueError):
    """Something the user supplied is wrong; the message says what to do instead.

    Parameters
    ----------
    message : str
        One sentence: what is wrong, then what to do.
    path : str or Path, optional
        The offending file, when there is one; prefixed to the message.
    """

    def __init__(self, message: str, *, path: str | Path | None = None) -> None:
        self.path = None if path is None else str(path)
        self.message = message
        super().__init__(f"{self.path}: {message}" if self.path else message)


class AudioInputError(InputError):
    """An audio file is missing, unreadable, of an unsupported layout, or does not match its partner stem."""


class SubtitleInputError(InputError):
    """A subtitle file cannot be read as SRT or WebVTT.

    Parameters
    ----------
    line : int, optional
        1-based line number in the file where the problem was found.
    snippet : str, optional
        The offending text, shortened.
    """

    def __init__(
        self,
        message: str,
        *,
        path: str | Path | None = None,
        line: int | None = None,
        snippet: str | None = None,
    ) -> None:
        self.line = line
        self.snippet = snippet
        where = f"line {line}: " if line is not None else ""
        shown = f" (found {snippet!r})" if snippet else ""
        super().__init__(f"{where}{message}{shown}", path=path)


class SettingsError(InputError):
    """An option or profile value is out of range or unknown."""


class PlanFileError(InputError):
    """A plan or analysis file is invalid, hand-edited wrongly, or does not match the audio.

    Parameters
    ----------
    field : str, optional
        JSON path of the offending field, e.g. ``events[3].background_gain_db``.
    event_id : str, optional
        The gain event the field belongs to.
    """

    def __init__(
        self,
        message: str,
        *,
        path: str | Path | None = None,
        field: str | None = None,
        event_id: str | None = None,
    ) -> None:
        self.field = field
        self.event_id = event_id
        parts = [p for p in (f"event {event_id}" if event_id else "", field or "") if p]
        prefix = f"{', '.join(parts)}: " if parts else ""
        super().__init__(f"{prefix}{message}", path=path)


class OutputError(CueplanError, OSError):
    """An output cannot be written where asked (it would overwrite an input, or the folder is unusable)."""
