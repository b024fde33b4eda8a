"""The ``vzero`` command line: ``main`` builds the parser and runs a command; one module per larger command
(``rerun``, ``verify``, ``diff``, ``inspect``); ``say`` holds what every command prints."""
