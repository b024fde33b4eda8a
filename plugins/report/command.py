"""``vzero report RUN.h5 [--out DIR]``: rebuild the HTML report and figures from an audit file.

Useful for runs made without a report step, or after the report itself improves: the numbers come from the
audit file unchanged; only the presentation is rebuilt. Files are written to a temporary name and renamed.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from vzero.errors import OutputExistsError, VzeroError

HELP = "Rebuild the HTML report and figures of a finished run from its audit file."
EXAMPLE = "vzero report runs/today/run.h5 --out runs/today"


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("audit", help="the audit file of a run (run.h5)")
    p.add_argument("--out", "-o", help="folder for report.html and figures/ (default: the audit file's folder)")
    p.add_argument("--max-panels", type=int, default=384,
                   help="most wells drawn per progress-curve figure (default 384)")
    p.add_argument("--force", action="store_true", help="replace an existing report.html in --out")
    p.add_argument("--no-verify", action="store_true",
                   help="read the audit file without checking its digests first (the output says so)")


def write_files(out: Path, files: dict[str, bytes], force: bool) -> None:
    """Write ``files`` under ``out`` as one set (:func:`vzero.run.swap.replace_set`): a failure or a kill
    while writing leaves the previous report whole, and no temporary file outlives the next call."""
    from vzero.run.swap import replace_set

    target = out / "report.html"
    if target.exists() and not force:
        raise OutputExistsError(f"{target} already exists", hint="Pass --force to replace it, or choose --out.")
    replace_set(out, files, "report")


def run(args: argparse.Namespace) -> int:
    from vzero.audit.verify import check_intact
    from vzero.plugins.report.build import build
    from vzero.plugins.report.sources import from_audit

    if args.max_panels < 24:
        raise VzeroError(f"--max-panels {args.max_panels}: too few to show a plate", hint="Use 24 or more.")
    audit = Path(args.audit)
    out = Path(args.out) if args.out else audit.parent
    if (out / "report.html").exists() and not args.force:
        raise OutputExistsError(f"{out / 'report.html'} already exists",
                                hint="Pass --force to replace it, or choose another --out.")
    check_intact(audit, check=not args.no_verify, say=lambda text: print(text, file=sys.stderr))
    report_input = from_audit(audit, max_panels=args.max_panels)
    files = build(report_input)
    write_files(out, files, args.force)
    if not getattr(args, "quiet", False):
        n = sum(1 for k in files if k.endswith(".png"))
        print(f"wrote {out / 'report.html'} and {n} figures (PNG and SVG) in {out / 'figures'}/")
    return 0
