"""The ``cueplan`` command line (typer): parses options, calls the API, prints with rich.

Errors the user can fix (:class:`~planner.errors.InputError`, refused outputs) print one
line on stderr and exit with code 2; nothing is written. Other project errors exit 1.
"""

from __future__ import annotations

import os

# Small products run faster on one BLAS thread than on threads that wait for each other on
# a 2-core machine (measured, benchmarks/README.md); set before numpy loads, user values win.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import contextlib
import errno
import json
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Annotated, Any, TypeVar

import typer
from rich.console import Console

from planner.allocator import reuse_freed_buffers
from planner.errors import CueplanError, InputError, OutputError

app = typer.Typer(
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    help="Find masked dialogue and mistimed subtitles, plan cue-level gain moves, render and verify.",
)

EXIT_BAD_INPUT = 2
EXIT_FAILED = 1

F = TypeVar("F", bound=Callable[..., Any])

# ----------------------------------------------------------------------------- shared options
OutDir = Annotated[Path, typer.Option("--out", "-o", help="Analysis folder to write (created if missing).")]
Quiet = Annotated[bool, typer.Option("--quiet", "-q", help="No progress bars; one line per stage at most.")]
Fps = Annotated[str, typer.Option("--fps", help="Frame rate for timecodes: 23.976, 24, 25, 29.97, 30, 50, 59.94.")]
DropFrame = Annotated[bool, typer.Option("--df/--ndf", help="Drop-frame timecode (29.97 and 59.94 only).")]
ProgrammeStart = Annotated[
    str, typer.Option("--programme-start", help="Timecode of the programme's first sample, e.g. 10:00:00:00.")
]
Vad = Annotated[str, typer.Option("--vad", help="Speech detector: neural (robust to music) or fast.")]
Profile = Annotated[Path | None, typer.Option("--profile", help="House-style TOML file (subtitle checks).")]
Hearing = Annotated[str, typer.Option("--hearing", help="Hearing profile: normal, age-60, age-70, age-80.")]
Audiogram = Annotated[
    Path | None, typer.Option("--audiogram", help="CSV or JSON audiogram (frequency_hz, threshold_db_hl).")
]
ListeningLevel = Annotated[
    float,
    typer.Option("--listening-level", help="dB SPL at which a programme measuring -23 LUFS is heard (default 62)."),
]
AsJson = Annotated[bool, typer.Option("--json", help="Print JSON instead of tables.")]

stdout = Console(soft_wrap=False)
stderr = Console(stderr=True)


def _fail(message: str, code: int) -> None:
    stderr.print(f"[bold red]error:[/] {message}", highlight=False, markup=True)
    raise typer.Exit(code)


@contextlib.contextmanager
def _errors() -> Iterator[None]:
    """Turn project errors into one line on stderr and an exit code, with no traceback."""
    try:
        yield
    except (InputError, OutputError) as exc:
        _fail(str(exc), EXIT_BAD_INPUT)
    except CueplanError as exc:
        _fail(str(exc), EXIT_FAILED)
    except OSError as exc:
        if exc.errno != errno.ENOSPC:
            raise
        _fail(
            f"the disk is full ({exc.filename or 'while writing'}); nothing was written under the final names. "
            "Free space and run again: a render needs room for its output (about 1 GB per hour of 24-bit "
            "stereo) and as much again for its scratch copy (1.4 GB per hour of stereo, 4 GB of 5.1)",
            EXIT_FAILED,
        )
    except KeyboardInterrupt:
        _fail("interrupted; nothing was written under the final names", 130)


def _progress(quiet: bool):  # type: ignore[no-untyped-def]
    from planner.report.progress import progress_reporter

    return progress_reporter(stderr, quiet=quiet)


def _analysis_settings(**kwargs: Any):  # type: ignore[no-untyped-def]
    from planner.analysis.hearing import load_audiogram
    from planner.analysis.sii import SII_BANDS_HZ
    from planner.settings import AnalysisSettings

    audiogram = kwargs.pop("audiogram")
    if audiogram is not None:
        # Stored on the SII bands, so the plan carries the thresholds it was scored with.
        profile = load_audiogram(audiogram)
        kwargs["hearing"] = "audiogram"
        kwargs["audiogram_hz"] = tuple(float(f) for f in SII_BANDS_HZ)
        kwargs["audiogram_db_hl"] = tuple(float(t) for t in profile.thresholds_db_hl)
    return AnalysisSettings(**kwargs)


# ----------------------------------------------------------------------------- commands
@app.command()
def inspect(
    audio: Annotated[Path, typer.Argument(help="WAV/BWF or FLAC file (mono, stereo or 5.1).")],
    subtitles: Annotated[Path | None, typer.Argument(help="SRT or WebVTT file.")] = None,
    as_json: AsJson = False,
    quiet: Quiet = False,
) -> None:
    """Summarise an audio file (layout, duration, loudness, true peak) and its subtitles."""
    from planner import pipeline
    from planner.report import terminal

    with _errors(), _progress(quiet) as progress:
        result = pipeline.inspect(audio, subtitles, progress=progress)
    if as_json:
        stdout.print_json(json.dumps(result.to_dict()))
    else:
        terminal.print_inspection(stdout, result)


def _inputs(files: list[Path], dialogue: Path | None, background: Path | None):  # type: ignore[no-untyped-def]
    """AUDIO SUBS, or SUBS alone with --dialogue and --background."""
    from planner.folder import Inputs

    if (dialogue is None) != (background is None):
        raise InputError("stems need both --dialogue FILE and --background FILE; pass both, or a mix as AUDIO")
    if dialogue is not None:
        if len(files) != 1:
            raise InputError(f"with stems give only the subtitle file as argument (got {len(files)}); pass SUBS")
        return Inputs(subtitles=files[0], dialogue=dialogue, background=background)
    if len(files) != 2:
        raise InputError(f"expected AUDIO SUBS (got {len(files)} file arguments); pass the mix and the subtitle file")
    return Inputs(subtitles=files[1], mix=files[0])


Files = Annotated[list[Path], typer.Argument(help="AUDIO SUBS (a mix and its subtitles), or SUBS alone with stems.")]
Dialogue = Annotated[Path | None, typer.Option("--dialogue", help="Dialogue stem (with --background).")]
Background = Annotated[Path | None, typer.Option("--background", help="Background stem: music and effects.")]


@app.command()
def align(
    audio: Annotated[Path, typer.Argument(help="The programme audio (mix).")],
    subtitles: Annotated[Path, typer.Argument(help="SRT or WebVTT file.")],
    out: OutDir,
    fps: Fps = "25",
    df: DropFrame = False,
    programme_start: ProgrammeStart = "00:00:00:00",
    vad: Vad = "neural",
    profile: Profile = None,
    quiet: Quiet = False,
) -> None:
    """Align the subtitles to the speech and flag every cue problem (retimed subtitles, cues.csv)."""
    from planner import runs
    from planner.folder import Inputs
    from planner.report import terminal

    with _errors():
        settings = _analysis_settings(vad=vad, fps=fps, drop_frame=df, programme_start=programme_start, audiogram=None)
        inputs = Inputs(subtitles=subtitles, mix=audio)
        with _progress(quiet) as progress:
            result = runs.run_alignment(inputs, out, settings, style_path=profile, progress=progress)
    terminal.print_alignment_summary(stdout, result.plan.analysis)
    _print_written(result.written)


@app.command()
def analyse(
    files: Files,
    out: OutDir,
    dialogue: Dialogue = None,
    background: Background = None,
    fps: Fps = "25",
    df: DropFrame = False,
    programme_start: ProgrammeStart = "00:00:00:00",
    vad: Vad = "neural",
    hearing: Hearing = "normal",
    audiogram: Audiogram = None,
    listening_level: ListeningLevel = 62.0,
    profile: Profile = None,
    quiet: Quiet = False,
) -> None:
    """Align, score every cue for masking, plan gain moves, and write the analysis folder."""
    from planner import runs
    from planner.report import terminal

    with _errors():
        inputs = _inputs(files, dialogue, background)
        settings = _analysis_settings(
            vad=vad, fps=fps, drop_frame=df, programme_start=programme_start, hearing=hearing,
            audiogram=audiogram, listening_level_db_spl=listening_level,
        )  # fmt: skip
        with _progress(quiet) as progress:
            result = runs.run_analysis(inputs, out, settings, style_path=profile, progress=progress)
    terminal.print_run_summary(stdout, result.plan, result.written)


Strength = Annotated[
    str, typer.Option("--strength", help="0..1 or a step: gentle, moderate, strong, full (trade clarity for change).")
]


@app.command()
def plan(
    folder: Annotated[Path, typer.Argument(help="An analysis folder written by cueplan analyse.")],
    target_sii: Annotated[float | None, typer.Option("--target-sii", help="Target SII per cue (default 0.75).")] = None,
    target_lu: Annotated[
        float | None, typer.Option("--target-lu", help="Target speech-over-background difference in LU instead.")
    ] = None,
    strength: Strength = "full",
    max_cut_db: Annotated[float, typer.Option("--max-cut-db", help="Largest background cut, dB.")] = 12.0,
    move: Annotated[str, typer.Option("--move", help="What moves: background, dialogue or both.")] = "background",
    hearing: Annotated[str | None, typer.Option("--hearing", help="Plan for another hearing profile.")] = None,
) -> None:
    """Plan again from a saved analysis with other settings (reads no audio; report.html is left as it was)."""
    from planner.folder import replan
    from planner.report import terminal
    from planner.settings import STRENGTH_STEPS, PlanSettings

    with _errors():
        if target_sii is not None and target_lu is not None:
            raise InputError("give --target-sii or --target-lu, not both")
        try:
            strength_value = STRENGTH_STEPS[strength] if strength in STRENGTH_STEPS else float(strength)
        except ValueError:
            raise InputError(
                f"--strength={strength!r} must be a number from 0 to 1 or one of {', '.join(STRENGTH_STEPS)}"
            ) from None
        kwargs: dict[str, Any] = {"strength": strength_value, "max_cut_db": max_cut_db, "move": move}
        if target_lu is not None:
            kwargs.update(target_kind="lu", target_lu=target_lu)
        elif target_sii is not None:
            kwargs.update(target_kind="sii", target_sii=target_sii)
        result = replan(folder, PlanSettings(**kwargs), hearing=hearing)
    terminal.print_run_summary(stdout, result.plan, result.written)


@app.command()
def render(
    folder: Annotated[Path, typer.Argument(help="An analysis folder with plan.json.")],
    out: Annotated[Path, typer.Option("--out", "-o", help="Rendered file (.wav or .flac); never an input.")],
    loudness: Annotated[
        str, typer.Option("--loudness", help="ebu-r128, atsc-a85, off, or a target in LUFS such as -24.")
    ] = "ebu-r128",
    true_peak: Annotated[float | None, typer.Option("--true-peak", help="True-peak ceiling, dBTP.")] = None,
    stems_out: Annotated[Path | None, typer.Option("--stems-out", help="Folder for processed stems.")] = None,
    quiet: Quiet = False,
) -> None:
    """Render the clearer-dialogue version from the plan, then re-score it (verify.csv)."""
    from planner import runs
    from planner.report import terminal
    from planner.settings import RenderSettings

    with _errors():
        settings = RenderSettings(loudness=loudness, true_peak_dbtp=true_peak)
        with _progress(quiet) as progress:
            result = runs.run_render(folder, out, settings, stems_out=stems_out, progress=progress)
    terminal.print_render(stdout, result.render, result.verify)
    _print_written(result.written)


@app.command()
def verify(
    folder: Annotated[Path, typer.Argument(help="An analysis folder with plan.json.")],
    rendered: Annotated[Path, typer.Argument(help="The rendered audio to re-score.")],
    quiet: Quiet = False,
) -> None:
    """Re-score every planned cue on rendered audio and write verify.csv."""
    from planner import runs
    from planner.report import terminal

    with _errors():
        with _progress(quiet) as progress:
            report, written = runs.run_verify(folder, rendered, progress=progress)
    terminal.print_verify(stdout, report)
    _print_written(written)


@app.command()
def report(
    folder: Annotated[Path, typer.Argument(help="An analysis folder with plan.json.")],
    top: Annotated[int, typer.Option("--top", min=1, help="How many scenes and lines to list.")] = 10,
    view: Annotated[str, typer.Option("--for", help="editor, mixer or archive.")] = "editor",
    plain: Annotated[bool, typer.Option("--plain", help="Plain text: no colour, no box drawing.")] = False,
    as_json: AsJson = False,
    html: Annotated[bool, typer.Option("--html", help="Also (re)write report.html in the folder.")] = False,
) -> None:
    """The worst scenes ranked, for the subtitle editor, the mixer or the archive producer."""
    from planner import runs
    from planner.report import terminal

    with _errors():
        if view not in ("editor", "mixer", "archive"):
            raise InputError(f"--for={view!r} must be one of editor, mixer, archive; pass one of those")
        loaded = runs.load_report_inputs(folder)
        written = runs.write_report_html(folder, loaded) if html else {}
    if as_json:
        stdout.print_json(json.dumps(terminal.report_json(loaded.plan, view=view, top=top, verify_rows=loaded.verify)))  # type: ignore[arg-type]
    else:
        console = Console(no_color=True, highlight=False, soft_wrap=False) if plain else stdout
        terminal.print_report(console, loaded.plan, top=top, view=view, verify_rows=loaded.verify, plain=plain)  # type: ignore[arg-type]
    _print_written(written)


@app.command()
def demo(
    out: Annotated[Path, typer.Option("--out", "-o", help="Folder for the demo scenario.")] = Path("cueplan-demo"),
    vad: Vad = "neural",
    quiet: Quiet = False,
) -> None:
    """Build the invented demo scenario (mix, stems, subtitles) and run the whole pipeline on it."""
    from planner import pipeline, runs
    from planner.folder import Inputs
    from planner.demo.scenario import build_demo
    from planner.report import terminal

    with _errors():
        with _progress(quiet) as progress:
            files = build_demo(out, progress=progress)
        stdout.print(f"demo scenario written to {out}/ (an invented scene; see {files.truth.name})")
        with _progress(quiet) as progress:
            inspection = pipeline.inspect(files.mix, files.subtitles, progress=progress)
        terminal.print_inspection(stdout, inspection)
        settings = _analysis_settings(vad=vad, audiogram=None)
        inputs = Inputs(subtitles=files.subtitles, mix=files.mix)
        with _progress(quiet) as progress:
            result = runs.run_analysis(inputs, out / "analysis", settings, progress=progress)
    terminal.print_run_summary(stdout, result.plan, result.written)
    terminal.print_report(stdout, result.plan, top=5, view="editor")
    stdout.print(f"report: {result.written.get('report', out / 'analysis' / 'report.html')}")


def _print_written(written: dict[str, Path]) -> None:
    for name, path in written.items():
        stdout.print(f"  {name:<10} {path}", highlight=False)


def _mount_triage() -> None:
    from planner.batch.cli import triage_app

    app.add_typer(triage_app, name="triage")


_mount_triage()


def main() -> None:
    """Console-script entry point."""
    reuse_freed_buffers()
    app()


if __name__ == "__main__":  # pragma: no cover
    main()
