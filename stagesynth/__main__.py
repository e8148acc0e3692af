"""`python -m stagesynth` runs the command-line interface."""

import sys

try:
    from stagesynth.cli import main
except KeyboardInterrupt:  # Ctrl-C while the libraries load: nothing was written
    sys.stderr.write("stagesynth: interrupted, nothing changed\n")
    sys.exit(130)

main()
