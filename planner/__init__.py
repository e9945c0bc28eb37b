"""cueplan: find masked dialogue, align subtitles, plan cue-level gain moves, render and verify."""

__version__ = "0.1.0"
