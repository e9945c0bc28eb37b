"""The invented demo scenario and the synthesized test programmes it is built from.

- :mod:`planner.demo.lines`: the spoken fixture lines (``load_lines``, ``Line``).
- :mod:`planner.demo.backgrounds`: seeded pink noise, music bed, babble, rain (``make_background``).
- :mod:`planner.demo.synth`: programmes with known truth (``synth_programme``,
  ``SynthProgramme``), out-of-step subtitles (``distort_cues``), files (``write_programme``).
- :mod:`planner.demo.scenario`: the three-minute demo (``build_demo``, ``DemoFiles``).
"""

from planner.demo.scenario import DemoFiles, build_demo
from planner.demo.synth import (
    Line,
    SynthProgramme,
    distort_cues,
    load_lines,
    make_background,
    synth_programme,
    write_programme,
)

__all__ = [
    "DemoFiles",
    "Line",
    "SynthProgramme",
    "build_demo",
    "distort_cues",
    "load_lines",
    "make_background",
    "synth_programme",
    "write_programme",
]
