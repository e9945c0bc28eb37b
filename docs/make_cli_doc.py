"""Write the command reference of docs/cli.md from the typer app, so that it cannot drift.

The reference is the part of docs/cli.md between :data:`BEGIN` and :data:`END`; everything
outside the markers (the worked examples) is written by hand and left as it is. The walk
goes through the click command tree of ``typer.main.get_command(planner.cli.app)``: every
command, every group (``app.add_typer(...)``) and its commands, hidden ones included (a
hidden command is still part of the interface, e.g. the one a group runs by default), and
for each command its arguments and options with their help text and defaults.

Usage, from the repository root::

    python docs/make_cli_doc.py          # rewrite the reference in docs/cli.md
    python docs/make_cli_doc.py --check  # exit 1 if docs/cli.md is out of date

Only the attributes that click and typer's own command classes share are used (``name``,
``help``, ``hidden``, ``params``, ``commands``; a parameter's ``opts``, ``secondary_opts``,
``required``, ``default``, ``help``, ``nargs``, ``is_flag``), so the walk does not depend on
typer's internals.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import typer
import typer.main

DOC_PATH = Path(__file__).resolve().parent / "cli.md"
BEGIN = "<!-- BEGIN GENERATED REFERENCE: python docs/make_cli_doc.py -->"
END = "<!-- END GENERATED REFERENCE -->"
PROG = "cueplan"

#: Value labels by Python annotation name (typer) or click type name, as the help shows them.
_VALUE_LABELS = {"Path": "PATH", "path": "PATH", "str": "TEXT", "text": "TEXT", "float": "NUMBER",
                 "int": "INTEGER", "integer": "INTEGER", "bool": "", "boolean": ""}  # fmt: skip


def walk(command: Any, path: tuple[str, ...]) -> Iterator[tuple[tuple[str, ...], Any]]:
    """Every command below ``command`` (itself first) with its full name path, in help order.

    Visible subcommands come in the order ``--help`` lists them, then hidden ones by name.
    """
    yield path, command
    subcommands = getattr(command, "commands", None)
    if subcommands is None:
        return
    listed = [name for name in command.list_commands(None) if name in subcommands]
    hidden = sorted(name for name in subcommands if name not in listed)
    for name in [*listed, *hidden]:
        yield from walk(subcommands[name], (*path, name))


def _value_label(param: Any) -> str:
    """PATH, TEXT, NUMBER or INTEGER (with its range), or ``flag``."""
    if getattr(param, "is_flag", False):
        return "flag"
    descriptor = getattr(param, "type_descriptor", None)  # typer's own command classes
    if descriptor is not None:
        annotation = descriptor.annotation
        name = getattr(annotation, "__name__", str(annotation))
        if name == "list":  # list[Path]: label the element
            name = getattr(annotation.__args__[0], "__name__", "str")
    else:  # classic click parameters
        name = getattr(getattr(param, "type", None), "name", "text")
    label = _VALUE_LABELS.get(name, name.upper())
    lo, hi = getattr(param, "min", None), getattr(param, "max", None)
    if lo is not None and hi is not None:
        label += f" {lo}..{hi}"
    elif lo is not None:
        label += f" ≥ {lo}"
    elif hi is not None:
        label += f" ≤ {hi}"
    return label


def _cell(text: str | None) -> str:
    """Text for a Markdown table cell (pipes escaped, one line)."""
    return " ".join((text or "").split()).replace("|", "\\|")


def _default(param: Any) -> str:
    if param.required:
        return "required"
    value = param.default
    if getattr(param, "is_flag", False):
        if param.secondary_opts:
            return f"`{param.secondary_opts[0] if not value else param.opts[0]}`"
        return "off" if not value else "on"
    if value is None or value == ():
        return "—"
    return f"`{value}`"


def _argument_name(param: Any) -> str:
    name = (getattr(param, "metavar", None) or param.name).upper()
    return f"{name}..." if param.nargs != 1 else name


def _usage(prog: str, path: tuple[str, ...], command: Any) -> str:
    words = [prog, *path]
    if any(p.param_type_name == "option" for p in command.params):
        words.append("[OPTIONS]")
    for p in command.params:
        if p.param_type_name == "argument":
            name = _argument_name(p)
            words.append(name if p.required else f"[{name}]")
    if getattr(command, "commands", None) is not None:
        words.append("COMMAND [ARGS]...")
    return " ".join(words)


def _command_section(prog: str, path: tuple[str, ...], command: Any) -> list[str]:
    """Heading, help, usage, argument and option tables of one command, as Markdown lines."""
    title = " ".join((prog, *path))
    out = [f"### `{title}`", ""]
    if command.hidden:
        group = " ".join((prog, *path[:-1]))
        out += [f"Not listed by `{group} --help`.", ""]
    help_text = (command.help or "").strip()
    if help_text:
        out += [" ".join(help_text.split()), ""]
    out += ["```", _usage(prog, path, command), "```", ""]
    arguments = [p for p in command.params if p.param_type_name == "argument"]
    options = [p for p in command.params if p.param_type_name == "option" and not p.hidden]
    if arguments:
        out += ["| argument | value | required | description |", "|---|---|---|---|"]
        for p in arguments:
            out.append(f"| `{_argument_name(p)}` | {_value_label(p)} | {'yes' if p.required else 'no'} | {_cell(p.help)} |")
        out.append("")
    if options:
        out += ["| option | value | default | description |", "|---|---|---|---|"]
        for p in options:
            flags = ", ".join(f"`{o}`" for o in p.opts)
            if p.secondary_opts:
                flags += " / " + ", ".join(f"`{o}`" for o in p.secondary_opts)
            out.append(f"| {flags} | {_value_label(p)} | {_default(p)} | {_cell(p.help)} |")
        out.append("")
    if getattr(command, "commands", None):
        names = ", ".join(f"`{' '.join(p)}`" for p, _ in walk(command, ()) if len(p) == 1)
        out += [f"Commands: {names}.", ""]
    return out


def reference_markdown(app: typer.Typer, *, prog: str = PROG) -> str:
    """The generated reference (Markdown) for every command and option of ``app``.

    ``prog`` is the program name shown in headings and usage lines.
    """
    lines = [
        "Every command accepts `--help`. Values: PATH a file or folder, TEXT a word or timecode,",
        "NUMBER a decimal number, INTEGER a whole number; a flag takes no value.",
        "",
    ]
    for path, command in walk(typer.main.get_command(app), ()):
        if path or any(not p.hidden for p in command.params):  # the root only for its own options
            lines += _command_section(prog, path, command)
    return "\n".join(lines).rstrip("\n") + "\n"


def updated_document(text: str, reference: str) -> str:
    """``text`` with the part between the markers replaced by ``reference``.

    Raises
    ------
    ValueError
        If the markers are missing, repeated or out of order.
    """
    if text.count(BEGIN) != 1 or text.count(END) != 1 or text.index(BEGIN) > text.index(END):
        raise ValueError(f"docs/cli.md must hold one {BEGIN!r} line and, after it, one {END!r} line")
    head, rest = text.split(BEGIN, 1)
    _, tail = rest.split(END, 1)
    return f"{head}{BEGIN}\n\n{reference}\n{END}{tail}"


def current_app() -> typer.Typer:
    """The cueplan command line as installed."""
    from planner.cli import app

    return app


def main(argv: list[str] | None = None) -> int:
    """Rewrite (or with ``--check`` only compare) the reference in docs/cli.md; exit status."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="exit 1 if docs/cli.md is out of date, write nothing")
    args = parser.parse_args(argv)
    text = DOC_PATH.read_text(encoding="utf-8")
    new = updated_document(text, reference_markdown(current_app()))
    if new == text:
        return 0
    if args.check:
        print("docs/cli.md is out of date: run `python docs/make_cli_doc.py`", file=sys.stderr)
        return 1
    from planner.io.files import atomic_write_text

    atomic_write_text(DOC_PATH, new)
    print(f"rewrote the reference in {DOC_PATH.name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
