"""The ``cueplan`` command line (typer): parses options, calls the API, prints with rich."""

from __future__ import annotations

import typer

app = typer.Typer(no_args_is_help=True, add_completion=False, help="Find masked dialogue, plan gain moves, render and verify.")


def main() -> None:
    """Console-script entry point."""
    app()
