"""``python -m slicer.cli``: the command line (see :func:`slicer.cli.main`)."""

import sys

from slicer.cli import main

if __name__ == "__main__":  # not when a test imports every module
    sys.exit(main())
