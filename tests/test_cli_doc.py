"""docs/cli.md against the command line it documents: generated reference, coverage, examples.

The reference part of docs/cli.md is generated from the typer app by docs/make_cli_doc.py;
these tests regenerate it in memory and compare, check that every command and option of the
app appears in the committed file, test the generator on a small app built here (ground truth
written by hand), and check that every `cueplan ...` line of the hand-written examples names
a real command and only options that command has.
"""

from __future__ import annotations

import shlex
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType
from typing import Annotated, Any

import pytest
import typer
import typer.main

from planner.batch.cli import triage_app
from planner.cli import app

DOCS = Path(__file__).resolve().parent.parent / "docs"
REGENERATE = "docs/cli.md is out of date: run `python docs/make_cli_doc.py` and commit docs/cli.md"


def _load_generator() -> ModuleType:
    """docs/make_cli_doc.py as a module, compiled in memory (no bytecode cache in docs/)."""
    path = DOCS / "make_cli_doc.py"
    module = ModuleType("make_cli_doc")
    module.__file__ = str(path)
    exec(compile(path.read_text(encoding="utf-8"), str(path), "exec"), module.__dict__)  # noqa: S102
    return module


gen = _load_generator()
COMMITTED = (DOCS / "cli.md").read_text(encoding="utf-8")


def _generated_part(text: str) -> str:
    return text.split(gen.BEGIN, 1)[1].split(gen.END, 1)[0]


def _commands(group: Any) -> Iterator[tuple[tuple[str, ...], Any]]:
    # Ground truth of what exists: the click tree itself (the app's own objects).
    for name, command in getattr(group, "commands", {}).items():
        yield (name,), command
        for path, sub in _commands(command):
            yield (name, *path), sub


def test_committed_reference_is_what_the_app_generates() -> None:
    # Reference: the typer app as installed; the committed page must equal a fresh generation.
    fresh = gen.updated_document(COMMITTED, gen.reference_markdown(app))
    assert fresh == COMMITTED, REGENERATE


def test_every_command_and_option_is_documented() -> None:
    # Ground truth: every command path and option string of the app's click tree.
    reference = _generated_part(COMMITTED)
    missing = []
    for path, command in _commands(typer.main.get_command(app)):
        heading = f"### `cueplan {' '.join(path)}`"
        if heading not in reference:
            missing.append(heading)
            continue
        section = reference.split(heading, 1)[1].split("\n### ", 1)[0]
        for param in command.params:
            names = param.opts + param.secondary_opts if param.param_type_name == "option" else [param.name.upper()]
            missing += [f"cueplan {' '.join(path)} {n}" for n in names if f"`{n}" not in section]
    assert not missing, f"undocumented: {missing}; {REGENERATE}"


# --------------------------------------------------------------------------- the generator

toy = typer.Typer(add_completion=False, help="A toy programme.")
toy_group = typer.Typer(help="Grouped things.")


@toy.command()
def measure(
    source: Annotated[Path, typer.Argument(help="A file.")],
    level: Annotated[float, typer.Option("--level", "-l", help="Level in dB.")] = 3.5,
    count: Annotated[int, typer.Option("--count", min=1, help="How many | pipes.")] = 2,
    loud: Annotated[bool, typer.Option("--loud/--soft", help="Loudness.")] = False,
) -> None:
    """Measure a file."""


@toy_group.command("show")
def show(name: Annotated[str, typer.Argument(help="A name.")]) -> None:
    """Show one thing."""


@toy_group.command("secret", hidden=True)
def secret(force: Annotated[bool, typer.Option("--force", help="Redo.")] = False) -> None:
    """Run quietly."""


toy.add_typer(toy_group, name="things")


def test_generator_writes_the_rows_of_a_known_app() -> None:
    # Ground truth: the toy app above, its rows written out by hand.
    text = gen.reference_markdown(toy, prog="toy")
    for row in [
        "### `toy measure`",
        "Measure a file.",
        "toy measure [OPTIONS] SOURCE",
        "| `SOURCE` | PATH | yes | A file. |",
        "| `--level`, `-l` | NUMBER | `3.5` | Level in dB. |",
        "| `--count` | INTEGER ≥ 1 | `2` | How many \\| pipes. |",
        "| `--loud` / `--soft` | flag | `--soft` | Loudness. |",
        "### `toy things`",
        "toy things COMMAND [ARGS]...",
        "### `toy things show`",
        "| `NAME` | TEXT | yes | A name. |",
        "### `toy things secret`",
        "Not listed by `toy things --help`.",
        "| `--force` | flag | off | Redo. |",
    ]:
        assert row in text, row
    # Order: commands as --help lists them, a group's hidden commands after its visible ones.
    assert text.index("### `toy things show`") < text.index("### `toy things secret`")


def test_generator_handles_the_triage_group_when_mounted() -> None:
    # Ground truth: the triage commands and options declared in planner/batch/cli.py.
    mounted = typer.Typer()
    mounted.add_typer(triage_app, name="triage")
    text = gen.reference_markdown(mounted)
    for needle in ["### `cueplan triage`", "### `cueplan triage report`", "### `cueplan triage show`",
                   "### `cueplan triage run`", "`--catalog`, `-c`", "`--min-confidence`", "`--workers`, `-w`",
                   "`--cluster`", "| `EPISODE` |", "| `SOURCE` |"]:  # fmt: skip
        assert needle in text, needle


@pytest.mark.parametrize(
    "text",
    ["no markers", f"{gen.END}\n{gen.BEGIN}\n", f"{gen.BEGIN}\n{gen.BEGIN}\n{gen.END}\n"],
    ids=["none", "reversed", "twice"],
)
def test_markers_must_be_present_once_and_in_order(text: str) -> None:
    with pytest.raises(ValueError, match="must hold one"):
        gen.updated_document(text, "x\n")


def test_text_outside_the_markers_is_kept() -> None:
    # Constructed: hand-written text on both sides of an outdated reference.
    text = f"# Title\nexamples\n{gen.BEGIN}\nold\n{gen.END}\ntail\n"
    assert gen.updated_document(text, "new\n") == f"# Title\nexamples\n{gen.BEGIN}\n\nnew\n\n{gen.END}\ntail\n"


# --------------------------------------------------------------------------- hand-written examples


def _example_lines() -> Iterator[str]:
    """Every `cueplan ...` command line inside the page's code blocks (continuations joined)."""
    hand_written = COMMITTED.split(gen.BEGIN, 1)[0]
    inside, pending = False, ""
    for line in hand_written.splitlines():
        if line.startswith("```"):
            inside = not inside
            continue
        if not inside:
            continue
        line = pending + line.split("  #", 1)[0].strip()
        if line.endswith("\\"):
            pending = line[:-1] + " "
            continue
        pending = ""
        if line.startswith("cueplan "):
            yield line.split(">", 1)[0].strip()


def _resolve(words: list[str]) -> tuple[Any, list[str]]:
    """The command an example runs and the words after its name.

    ``triage`` resolves on the app when mounted, else on ``planner.batch.cli.triage_app``,
    the group the app mounts under that name; a group whose first word is not one of its
    commands runs its hidden command (the rule of planner/batch/cli.py).
    """
    command: Any = typer.main.get_command(app)
    rest = words[1:]
    while rest and getattr(command, "commands", None) is not None:
        name = rest[0]
        if name in command.commands:
            command, rest = command.commands[name], rest[1:]
        elif name == "triage" and command is not None and "triage" not in command.commands:
            command, rest = typer.main.get_command(triage_app), rest[1:]
        else:
            hidden = [c for c in command.commands.values() if c.hidden]
            assert len(hidden) == 1, f"no command {name!r} in example {' '.join(words)!r}"
            command = hidden[0]
    return command, rest


def test_every_example_uses_real_commands_and_options() -> None:
    # Ground truth: the app's click tree; each option word of an example must be one of the
    # options of the command it runs.
    examples = list(_example_lines())
    assert len(examples) >= 20  # the three workflows and the demo
    for example in examples:
        command, rest = _resolve(shlex.split(example))
        known = {o for p in command.params if p.param_type_name == "option" for o in p.opts + p.secondary_opts}
        for word in rest:
            if word.startswith("-") and not word.lstrip("-").replace(".", "").isdigit():
                assert word.split("=", 1)[0] in known | {"--help"}, f"{word} in {example!r}"
