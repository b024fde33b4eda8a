"""``vzero review RUN.h5``: a page on which a scientist decides, well by well, about the flagged wells.

The page is one self-contained HTML file (no server, no network, works from a file share): it steps
through the flagged sample wells of a run (keyboard or mouse), shows each well's reads with its rate line on
the well's own scale, its rate, its flags in words with the measured values behind them and whether the fit
used it, and records a decision per well, keep or exclude, with a reason. The decisions are saved as a
recipe fragment ``review-decisions.yaml``: one ``review:`` item per decided well, ``{plate, well, decision,
reason}`` (:mod:`vzero.plugins.kinetics.exclusions`), offered as a download and shown as text to copy.
Included in the recipe (``include: [review-decisions.yaml]``, or ``vzero rerun RUN.h5 --recipe RECIPE
--recipe review-decisions.yaml --out DIR``; see :mod:`vzero.includes`) it is applied: each excluded well
carries the flag ``excluded``, and every decided well its decision and reason in the rates table's ``note``
column; the audit file stores the decisions (root attribute ``review``) and the fragment's text with the
recipe.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from vzero.errors import OutputExistsError, VzeroError

HELP = "Write a page for deciding, well by well, about a run's flagged wells (saves a recipe fragment)."
EXAMPLE = "vzero review runs/today/run.h5"


def configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("audit", help="the audit file of a run (run.h5)")
    p.add_argument("--out", "-o", help="the page to write (default: review.html beside the audit file)")
    p.add_argument("--force", action="store_true", help="replace an existing page")
    p.add_argument("--no-verify", action="store_true",
                   help="read the audit file without checking its digests first (the output says so)")


def page_data(inp: Any) -> dict[str, Any]:
    """What the review page shows, as plain data: the run's name and id, and one record per flagged sample
    well (see :func:`vzero.plugins.report.panels.well_records`) with its reads drawn as an SVG."""
    from vzero.plugins.report import build as report_build
    from vzero.plugins.report import content, panels

    tables = inp.tables
    rates = report_build._frame(tables, "rates")
    rates_t = tables.get("rates")
    rate_units = dict(rates_t.units) if hasattr(rates_t, "units") else {}
    rate_unit = rate_units.get("rate", "") or (str(rates["rate_unit"].iloc[0]) if "rate_unit" in rates
                                               and len(rates) else "")
    options = content.fit_options(inp.recipe)
    used = reasons = None
    if not rates.empty and options["present"]:
        used, reasons = content.fit_use(rates, options, inp.models)
    records = panels.well_records(rates, inp.traces, used, reasons, inp.recipe, content.pretty_unit(rate_unit),
                                  rate_units)
    for rec in records:
        rec["svg"] = panels.sparkline_svg(rec, width=560, height=260)
        rec.pop("t"), rec.pop("y")  # drawn already: the page needs no raw reads
    return {"run": str(inp.provenance.get("run_id", "")), "recipe": str(inp.recipe.get("name", "")),
            "source": str(inp.provenance.get("source", "")), "wells": records,
            "previous": previous_decisions(inp.recipe, records)}


def previous_decisions(recipe: Any, records: list[dict[str, Any]]) -> dict[str, dict[str, str]]:
    """The decisions the run's recipe already holds (its ``review:`` list, from an included fragment), by the
    panel id of each well on the page: the page starts from them, so that a second review extends the first
    and the saved fragment (same file name) replaces the old one with every decision in it."""
    from vzero.plugins.kinetics.wells import is_well, normalise_well

    ids = {(str(r["plate"]), normalise_well(str(r["well"]))): str(r["id"]) for r in records if is_well(str(r["well"]))}
    out: dict[str, dict[str, str]] = {}
    for item in recipe.get("review", []) or []:
        if not isinstance(item, dict) or not is_well(str(item.get("well", ""))):
            continue
        key = ids.get((str(item.get("plate", "")), normalise_well(str(item["well"]))))
        if key and item.get("decision") in ("keep", "exclude"):
            out[key] = {"choice": str(item["decision"]), "reason": str(item.get("reason", ""))}
    return out


def render(data: dict[str, Any]) -> str:
    """The review page's HTML (jinja2, autoescape on; the well data travel as JSON in a script element)."""
    import jinja2
    from vzero.plugins.report.build import RESEARCH_NOTE

    env = jinja2.Environment(loader=jinja2.PackageLoader("vzero.plugins.report", "templates"), autoescape=True,
                             undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    # JSON inside <script>: "</" and "<!--" must not end or confuse the element
    blob = json.dumps(data, ensure_ascii=False, default=str)
    blob = blob.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
    return env.get_template("review.html.j2").render(data=data, blob=blob, research_note=RESEARCH_NOTE)


def run(args: argparse.Namespace) -> int:
    from vzero.plugins.report.sources import from_audit
    from vzero.run.swap import replace_set

    audit = Path(args.audit)
    if not audit.exists():
        raise VzeroError(f"{audit}: no such audit file", hint="Give the run.h5 of a finished run.")
    out = Path(args.out) if args.out else audit.parent / "review.html"
    if out.exists() and not args.force:
        raise OutputExistsError(f"{out} already exists", hint="Pass --force to replace it, or choose --out.")
    from vzero.audit.verify import check_intact

    check_intact(audit, check=not getattr(args, "no_verify", False),
                 say=lambda text: print(text, file=sys.stderr))
    data = page_data(from_audit(audit))
    replace_set(out.parent, {out.name: render(data).encode("utf-8")}, "review")  # whole or not at all
    if not getattr(args, "quiet", False):
        print(f"wrote {out}: {len(data['wells'])} flagged sample wells to review; open it in a browser")
    return 0
