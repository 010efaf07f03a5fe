"""``python -m core``: the batch command (see :mod:`core.cli`)."""

import sys

from core.cli import main

if __name__ == "__main__":
    sys.exit(main())
