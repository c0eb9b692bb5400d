"""``python -m slicer.cli``: the command line (see :func:`slicer.cli.main`)."""

import sys

from slicer.cli import main

sys.exit(main())
