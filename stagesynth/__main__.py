"""`python -m stagesynth` runs the command-line interface."""

from .cli import main

main()
