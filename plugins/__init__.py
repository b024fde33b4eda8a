"""vzero's built-in stage methods.

Each module here is a pluggy plugin registered through the ``vzero.plugins`` entry-point group declared in
pyproject.toml, exactly as a third-party package registers its own; nothing in :mod:`pipeline` imports
these modules by name.
"""
