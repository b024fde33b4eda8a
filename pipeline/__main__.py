"""``python -m pipeline`` is the same as the ``vzero`` command."""

from vzero.cli import entry

entry()
