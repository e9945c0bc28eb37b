"""Colours of the reports, one place for the terminal and the HTML page.

The palette is the eight-colour set of Okabe and Ito ("Color Universal Design", 2008),
chosen to stay distinguishable with the common colour-vision deficiencies; every colour
also comes with a symbol or pattern, so nothing is told by colour alone.
"""

from __future__ import annotations

#: Verdict colours (hex RGB): masked vermillion, at-risk orange, clear bluish green, no-score grey.
VERDICT_COLOURS = {"masked": "#D55E00", "at-risk": "#E69F00", "clear": "#009E73", "no-score": "#999999"}
#: Episode action classes, by the verdict colour of the same urgency.
ACTION_COLOURS = {"ok": VERDICT_COLOURS["clear"], "targeted-gains": VERDICT_COLOURS["at-risk"], "remix-needed": VERDICT_COLOURS["masked"]}
#: Speech with no cue (reddish purple), planned moves (blue), detected speech (sky blue).
UNCOVERED_COLOUR = "#CC79A7"
MOVE_COLOUR = "#0072B2"
SPEECH_COLOUR = "#56B4E9"
#: Scenes with an at-risk or masked line: darker for the worse ranks (greys), three ranks a
#: shade; scenes with none: the lightest grey.
SCENE_COLOURS = ("#3b3b3b", "#6b6b6b", "#9b9b9b", "#c4c4c4")
CLEAR_SCENE_COLOUR = "#e6e6e6"
