"""What the command line prints: progress on stderr, the summary of a finished run.

Kept apart from :mod:`vzero.cli.main` so that every command module can use it without importing the parser.
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import Any


def say(args: argparse.Namespace, text: str) -> None:
    if not getattr(args, "quiet", False):
        print(text)


class Progress:
    """Progress of a run on stderr: a bar redrawn in place on a terminal for batches and for the pooled
    steps (fits, report) of any run, one line per plate
    with ``-v``, nothing with ``-q`` or when stderr is not a terminal (unless ``-v``). Colour only on a
    terminal and never when ``NO_COLOR`` is set (https://no-color.org)."""

    def __init__(self, *, verbose: bool = False, quiet: bool = False, stream: Any = None) -> None:
        self.stream = stream or sys.stderr
        tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.verbose = verbose and not quiet
        self.bar = tty and not quiet and not verbose
        self.colour = tty and not os.environ.get("NO_COLOR")
        self.failed = 0
        self._drawn = False

    def __call__(self, event: Any) -> None:
        if event.error:
            self.failed += 1
        if self.verbose:
            if event.plate:
                state = self._red("failed: " + event.error.splitlines()[0]) if event.error else "done"
                print(f"  [{event.done}/{event.total}] plate {event.plate} {state} ({event.seconds:.1f} s)",
                      file=self.stream)
            elif event.step:
                print(f"  {event.step} on the pooled plates ({event.seconds:.1f} s)", file=self.stream)
        elif self.bar and (event.total > 1 or event.step):  # batches, and long pooled steps such as fits
            width = 30
            filled = width * event.done // event.total
            failed = f"  {self._red(f'{self.failed} failed')}" if self.failed else ""
            what = f"  {event.step}" if event.step else ""
            line = f"\r  [{'#' * filled}{'.' * (width - filled)}] {event.done}/{event.total} plates{failed}" \
                   f"  {event.seconds:.0f} s{what}\x1b[K"
            self.stream.write(line)
            self.stream.flush()
            self._drawn = True

    def _red(self, text: str) -> str:
        return f"\x1b[31m{text}\x1b[0m" if self.colour else text

    def finish(self) -> None:
        if self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False


#: How the runner's warning about a file read from outside the recipe's folder begins.
OUTSIDE = "read a file outside the recipe's folder"


def report_result(args: argparse.Namespace, result: Any) -> None:
    rates = result.rates
    written = sorted(p.name + ("/" if p.is_dir() else "") for p in result.out_dir.iterdir())
    say(args, f"wrote {result.out_dir}/: {', '.join(written)}")
    if len(rates):
        flagged = int((rates.get("flags", "").astype(str) != "").sum()) if "flags" in rates else 0
        say(args, f"{len(rates)} wells, {flagged} flagged")
    from vzero.errors import sentence

    outside = [w for w in result.warnings if w.startswith(OUTSIDE)]
    for w in outside:  # always every one: what a recipe took from elsewhere on this machine
        print(f"note: {sentence(w)}", file=sys.stderr)
    others = [w for w in result.warnings if not w.startswith(OUTSIDE)]
    for w in others[: 20 if args.verbose else 5]:
        say(args, f"warning: {sentence(w)}")
    if len(others) > 5 and not args.verbose:
        say(args, f"... {len(others) - 5} more warnings (vzero inspect {result.audit_path}).")
    for plate, err in result.failed.items():
        print(f"plate {plate} failed: {sentence(err)}", file=sys.stderr)
    if result.failed_items:
        shown = ", ".join(result.failed_items[:10]) + (", ..." if len(result.failed_items) > 10 else "")
        print(f"{len(result.failed_items)} well(s) without a result: {shown} (see the flags in rates.csv).",
              file=sys.stderr)
