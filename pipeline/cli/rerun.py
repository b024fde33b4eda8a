"""``vzero rerun``: the command; the work is :func:`vzero.run.rerun.rerun`."""

from __future__ import annotations

import argparse
import sys

from vzero.cli.say import report_result
from vzero.run.rerun import rerun

HELP = "Reprocess the raw inputs stored in an audit file with a new or the stored recipe."
EXAMPLE = ("vzero rerun runs/2024-03/run.h5 --recipe new-window.yaml --out runs/2024-03-rerun\n"
           "  vzero rerun runs/today/run.h5 --recipe recipe.yaml --recipe review-decisions.yaml --out runs/reviewed\n"
           "  vzero rerun received/run.h5 --plugin my_rates.py --out runs/received-again")


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("old", help="the audit file (run.h5) whose stored inputs are reprocessed")
    p.add_argument("--recipe", action="append", default=[], metavar="YAML",
                   help="the new recipe (default: the recipe stored in the old file); given again, each further "
                        "file is a fragment merged into it, like the recipe's include: key (data only: "
                        "exclusions, overrides, review, assay)")
    p.add_argument("--out", "-o", required=True, help="folder for the new run.h5 and tables")
    p.add_argument("--force", action="store_true", help="replace an existing run in --out")
    p.add_argument("--plugin", action="append", default=[], metavar="FILE",
                   help="a plugin file (or module name) the stored recipe uses; its code runs on this machine. "
                        "Files are checked against the sha256 the old run recorded. Repeat for each plugin.")
    p.add_argument("--allow-changed-plugins", action="store_true",
                   help="run plugin files whose code differs from the old run's (recorded in the new file)")
    p.add_argument("--no-verify", action="store_true",
                   help="read the audit file without checking its digests first (the output says so)")


def run(args: argparse.Namespace) -> int:
    from vzero.audit.verify import check_intact

    check_intact(args.old, check=not args.no_verify, say=_warn)
    recipes = list(args.recipe or [])
    result = rerun(args.old, args.out, recipe=recipes[0] if recipes else None, fragments=recipes[1:],
                   plugins=args.plugin,
                   allow_changed_plugins=args.allow_changed_plugins, force=args.force)
    report_result(args, result)
    return int(result.exit_code)


def _warn(text: str) -> None:
    print(text, file=sys.stderr)
