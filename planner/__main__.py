"""``python -m planner`` runs the cueplan command line."""

from planner.cli import main

main()
