"""``cueplan triage``: batch triage into a catalogue, its ranked report, and one episode from it.

Mounted by the main command line as ``app.add_typer(triage_app, name="triage")``::

    cueplan triage SOURCE --catalog FILE [--workers N] [--cluster ADDRESS] [--force] [--quiet]
    cueplan triage report --catalog FILE [--action A] [--min-confidence X] [--csv]
    cueplan triage show EPISODE --catalog FILE

``triage SOURCE`` runs the batch (the hidden ``run`` command): a first argument that is not
a subcommand name is taken as the source. Exit codes: 0 when every episode is done, 1 when
any failed, 2 for bad input (a bad source or manifest, an unusable catalogue, a bad option),
with one line on stderr and no traceback.
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Annotated, Any

import typer
from rich.console import Console
from rich.text import Text
from typer.core import TyperGroup

from planner.errors import CueplanError, InputError, OutputError

EXIT_FAILED = 1
EXIT_BAD_INPUT = 2
_RUN = "run"


class _TriageGroup(TyperGroup):
    """A group whose first argument, when not a subcommand name, is the SOURCE of the run command."""

    # ``ctx`` is typer's own click Context (typer vendors click); Any keeps the override exact.
    def parse_args(self, ctx: Any, args: list[str]) -> list[str]:
        if args and args[0] not in self.commands and args[0] not in ctx.help_option_names:
            args = [_RUN, *args]
        return super().parse_args(ctx, args)

    def list_commands(self, ctx: Any) -> list[str]:
        return [name for name in super().list_commands(ctx) if name != _RUN]


triage_app = typer.Typer(
    cls=_TriageGroup,
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    help="Triage an archive: `triage SOURCE --catalog FILE` runs every episode; `report` ranks them; `show` prints one. `triage SOURCE --help` lists the run options.",
)

Catalog = Annotated[Path, typer.Option("--catalog", "-c", help="The SQLite catalogue file.")]


def _consoles() -> tuple[Console, Console]:
    return Console(soft_wrap=False), Console(stderr=True)


@contextlib.contextmanager
def _errors(stderr: Console) -> Iterator[None]:
    """Project errors become one line on stderr and an exit code, with no traceback."""
    try:
        yield
    except (InputError, OutputError) as exc:
        stderr.print(Text.assemble(("error: ", "bold red"), str(exc)), highlight=False)
        raise typer.Exit(EXIT_BAD_INPUT) from None
    except CueplanError as exc:
        stderr.print(Text.assemble(("error: ", "bold red"), str(exc)), highlight=False)
        raise typer.Exit(EXIT_FAILED) from None
    except KeyboardInterrupt:
        stderr.print("interrupted; finished episodes are in the catalogue, rerun to go on", highlight=False)
        raise typer.Exit(130) from None


@triage_app.command(_RUN, hidden=True)
def run(
    source: Annotated[Path, typer.Argument(help="Folder of episodes (ep01.wav + ep01.srt ...) or a CSV manifest.")],
    catalog: Catalog,
    workers: Annotated[int | None, typer.Option("--workers", "-w", help="Local worker processes (default: CPU count).")] = None,
    cluster: Annotated[
        str | None, typer.Option("--cluster", help="Dask scheduler address (tcp://host:port) to run the episodes on.")
    ] = None,
    force: Annotated[bool, typer.Option("--force", help="Redo episodes that are already done and current.")] = False,
    vad: Annotated[str, typer.Option("--vad", help="Speech detector: neural (robust to music) or fast.")] = "neural",
    fps: Annotated[str, typer.Option("--fps", help="Frame rate for timecodes unless the manifest gives one.")] = "25",
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress output.")] = False,
) -> None:
    """Analyse and plan every episode of SOURCE into the catalogue (finished episodes are skipped)."""
    from planner.batch.display import TriageProgress, print_run
    from planner.batch.triage import TriageSettings, run_triage
    from planner.settings import AnalysisSettings

    stdout, stderr = _consoles()
    with _errors(stderr):
        settings = TriageSettings(analysis=AnalysisSettings(vad=vad, fps=fps))  # type: ignore[arg-type]
        display = TriageProgress(stderr, quiet=quiet)
        with display.shown():
            summary = run_triage(
                source,
                catalog,
                workers=workers,
                cluster=cluster,
                force=force,
                settings=settings,
                progress=display.episodes,
                on_stage=display.stage,
            )
    print_run(stdout, summary)
    if summary.failed:
        raise typer.Exit(EXIT_FAILED)


@triage_app.command("report")
def report(
    catalog: Catalog,
    action: Annotated[
        str | None, typer.Option("--action", help="Only episodes of this action class: ok, targeted-gains, remix-needed.")
    ] = None,
    min_confidence: Annotated[
        float | None, typer.Option("--min-confidence", help="Only episodes whose confidence is at least this (0..1).")
    ] = None,
    as_csv: Annotated[bool, typer.Option("--csv", help="Write CSV to stdout instead of a table.")] = False,
) -> None:
    """The catalogue's episodes ranked worst first: score, confidence, action class, worst scene and why."""
    from planner.batch.display import print_report, write_report_csv
    from planner.batch.reports import triage_report

    stdout, stderr = _consoles()
    with _errors(stderr):
        rows = triage_report(catalog, action=action, min_confidence=min_confidence)
    if as_csv:
        write_report_csv(sys.stdout, rows)
    else:
        print_report(stdout, rows)


@triage_app.command("show")
def show(
    episode: Annotated[str, typer.Argument(help="Episode id, as `triage report` lists it.")],
    catalog: Catalog,
) -> None:
    """One episode's report from the catalogue: figures, worst scenes, at-risk and masked cues."""
    from planner.batch.display import print_episode
    from planner.batch.reports import episode_report

    stdout, stderr = _consoles()
    with _errors(stderr):
        result: Any = episode_report(catalog, episode)
    print_episode(stdout, result)
