"""``python -m vzero`` is the same as the ``vzero`` command."""

from vzero.cli.main import entry

entry()
