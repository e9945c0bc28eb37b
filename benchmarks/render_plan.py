"""Render an analysis folder's plan without verifying: ``python -m benchmarks.render_plan DIR OUT``.

The benchmark's render-only row: it reads ``DIR/plan.json``, opens the audio the plan
names and calls :func:`planner.render.renderer.render` with the default
:class:`~planner.settings.RenderSettings` (EBU R 128), as ``cueplan render`` does before
its verify pass, with the command line's allocator setting (:mod:`planner.allocator`).
"""

from __future__ import annotations

import sys
from pathlib import Path

from planner.allocator import reuse_freed_buffers
from planner.io.audio import open_programme
from planner.io.exports import load_plan
from planner.folder import input_paths
from planner.render.renderer import render
from planner.settings import RenderSettings


def main(folder: Path, out_path: Path) -> None:
    """Render ``folder``'s plan to ``out_path``."""
    plan = load_plan(folder / "plan.json")
    inputs = input_paths(plan.analysis, folder)
    programme = open_programme(mix=inputs.mix, dialogue=inputs.dialogue, background=inputs.background)
    render(plan, programme, out_path, RenderSettings())


if __name__ == "__main__":
    if len(sys.argv) != 3:
        sys.exit("usage: python -m benchmarks.render_plan DIR OUT")
    reuse_freed_buffers()
    main(Path(sys.argv[1]), Path(sys.argv[2]))
