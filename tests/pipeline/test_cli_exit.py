"""The console entry point's quick exit (vzero.cli.main.entry): it leaves through os._exit after running the
exit handlers itself through CPython's private ``atexit._run_exitfuncs``. These tests pin what that must keep:
handlers registered with atexit still run, buffered output is flushed, and main's exit code is the process's.
"""

from __future__ import annotations

import subprocess
import sys

SCRIPT = """
import atexit, sys
from vzero.cli.main import entry
atexit.register(lambda: print("handler ran", flush=True))
print("buffered line")  # left in the buffer: entry must flush it
sys.argv = ["vzero"] + sys.argv[1:]
entry()
"""


def _run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-c", SCRIPT, *args], capture_output=True, text=True, timeout=120,
                          check=False)


def test_exit_handlers_run_and_output_is_flushed() -> None:
    done = _run("plugins")  # a command that returns from main (no SystemExit on the way)
    assert done.returncode == 0, done.stderr
    assert "buffered line" in done.stdout and "handler ran" in done.stdout


def test_the_exit_code_is_mains() -> None:
    done = _run("verify", "no-such-file.h5")  # main returns the code of a refused audit file
    assert done.returncode not in (0, 1), (done.returncode, done.stderr)
    assert "handler ran" in done.stdout
