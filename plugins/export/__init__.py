"""Built-in exporters and the ``vzero export`` command: an audit file to open formats (CSV, xlsx, EnzymeML v2).

Registered through the ``vzero_commands`` hook like any plugin command. Kept light at import time: the
writers are imported when the command runs. Formats are described in docs/exports.md.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from vzero import hookimpl

HELP = "Write an audit file's results to an open format: csv, xlsx or enzymeml (EnzymeML v2 JSON)."
EXAMPLE = "vzero export runs/today/run.h5 --format enzymeml --out today.enzymeml.json"
SUFFIX = {"csv": ".csv", "xlsx": ".xlsx", "enzymeml": ".enzymeml.json"}


def default_out(audit: str | Path, fmt: str, table: str = "rates") -> Path:
    """``run.h5`` beside which ``run-rates.csv``, ``run.xlsx`` or ``run.enzymeml.json`` is written."""
    p = Path(audit)
    stem = f"{p.stem}-{table}" if fmt == "csv" else p.stem
    return p.with_name(stem + SUFFIX[fmt])


def export(audit: str | Path, fmt: str, out: str | Path | None = None, *, table: str = "rates") -> Path:
    """Export ``audit`` as ``fmt`` to ``out`` (default: beside the audit file); returns the path written.

    The file is written under a temporary name and renamed, so a failed export leaves no partial file.
    """
    import os

    target = Path(out) if out else default_out(audit, fmt, table)
    tmp = target.with_name(f".{target.name}.partial")
    try:
        if fmt == "csv":
            from vzero.plugins.export.tables import write_csv

            write_csv(audit, tmp, table)
        elif fmt == "xlsx":
            from vzero.plugins.export.tables import write_xlsx

            write_xlsx(audit, tmp)
        elif fmt == "enzymeml":
            from vzero.plugins.export.enzymeml import write_enzymeml

            write_enzymeml(audit, tmp)
        else:
            from vzero.errors import VzeroError

            raise VzeroError(f"unknown export format {fmt!r}; choose csv, xlsx or enzymeml")
        os.replace(tmp, target)
    except OSError as exc:  # a full disk, a read-only folder: one sentence naming the file
        from vzero.errors import OutputWriteError

        raise OutputWriteError.from_os(exc, target) from None
    finally:
        tmp.unlink(missing_ok=True)
    return target


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("audit", help="the audit file (run.h5)")
    p.add_argument("--format", "-f", required=True, choices=sorted(SUFFIX), help="what to write")
    p.add_argument("--out", "-o", help="file to write (default: beside the audit file)")
    p.add_argument("--table", default="rates", help="for csv: which results table (default rates)")
    p.add_argument("--no-verify", action="store_true",
                   help="read the audit file without checking its digests first (the output says so)")


def run(args: argparse.Namespace) -> int:
    import sys

    from vzero.audit.verify import check_intact

    check_intact(args.audit, check=not args.no_verify, say=lambda text: print(text, file=sys.stderr))
    path = export(args.audit, args.format, args.out, table=args.table)
    if not args.quiet:
        print(f"wrote {path}")
    return 0


@hookimpl
def vzero_check_recipe(recipe: Any, where: Any) -> list[str]:
    """The recipe's assay block (conditions that flow into the exports)."""
    from vzero.plugins.export.assay import check_assay

    return check_assay(recipe, where)


@hookimpl
def vzero_commands(commands: Any) -> None:
    commands.add("export", HELP, configure, run, EXAMPLE)
