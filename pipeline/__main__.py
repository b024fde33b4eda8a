"""``python -m pipeline`` is the same as the ``vzero`` command."""

import sys

from pipeline.cli import main

sys.exit(main())
