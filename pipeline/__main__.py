"""``python -m pipeline`` is the same as the ``vzero`` command."""

from pipeline.cli import entry

entry()
