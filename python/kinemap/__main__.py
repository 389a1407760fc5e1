"""``python -m kinemap`` runs the command line (see :mod:`kinemap.cli`)."""

import sys

from .cli import main

if __name__ == "__main__":
    sys.exit(main())
