"""``python -m beadmd``: the same command line as ``beadmd``."""

import sys

from .cli import main

sys.exit(main())
