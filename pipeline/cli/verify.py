"""``vzero verify``: the command; the checks are :func:`vzero.audit.verify.verify`."""

from __future__ import annotations

import argparse
import sys

from vzero.audit.verify import verify
from vzero.errors import AuditFileError

HELP = "Recompute every hash in an audit file (inputs, recipe, tables) and report tampering or damage."
EXAMPLE = "vzero verify runs/today/run.h5"


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("audit", nargs="+", help="audit files (run.h5) to check")


def run(args: argparse.Namespace) -> int:
    worst = 0
    for path in args.audit:
        try:
            report = verify(path)
        except AuditFileError as exc:
            print(f"{path}: DAMAGED OR NOT AN AUDIT FILE: {exc}", file=sys.stderr)
            worst = 2
            continue
        if report.ok:
            if not args.quiet:
                print(report.text())
        else:
            print(report.text(), file=sys.stderr)
            worst = 2
    return worst
