"""A readable summary of an audit file (``vzero inspect``)."""

from __future__ import annotations

import json
from pathlib import Path

from pipeline.errors import AuditFileError


def summary(path: str | Path) -> str:
    """Provenance, inputs, steps with timings and warnings, and flagged wells, as text."""
    from pipeline import reader

    with reader.open_audit(path) as f:
        a = f.attrs
        lines = [
            f"audit file {path}",
            f"  format {a['format']} {a['format_version']}, made by vzero {a['vzero_version']} on {a['created']}",
            f"  recipe {a.get('recipe_name', '')!s} (sha256 {str(a['recipe_sha256'])[:16]}...)",
            "  versions: " + ", ".join(f"{k} {v}" for k, v in json.loads(a["versions"]).items()),
        ]
        if "derived_from" in a:
            lines.append(f"  rerun of: {json.loads(a['derived_from'])}")
        lines.append("inputs:")
        for ds in f["inputs"].values():
            lines.append(f"  {ds.attrs['name']} ({ds.attrs['size']} bytes, sha256 {str(ds.attrs['sha256'])[:16]}...)")
        lines.append("steps:")
        for label, g in f["steps"].items():
            lines.append(f"  {label}  {g.attrs['plugin']} {g.attrs['version']}  {float(g.attrs['seconds']):.3f} s  "
                         f"params {g.attrs['parameters']}")
            for w in json.loads(g.attrs["warnings"]):
                lines.append(f"      warning: {w}")
        failed = json.loads(a.get("failed_plates", "{}"))
        for plate, err in failed.items():
            lines.append(f"failed plate {plate}: {err}")
        if "rates" in f["results"]:
            rates = reader.read_table(f["results/rates"]).frame
            if "flags" in rates:
                flagged = rates[rates["flags"].astype(str) != ""]
                lines.append(f"flagged wells: {len(flagged)} of {len(rates)}")
                for _, row in flagged.head(50).iterrows():
                    lines.append(f"  {row.get('plate', '')} {row['well']}: {row['flags']}")
                if len(flagged) > 50:
                    lines.append(f"  ... {len(flagged) - 50} more")
        if "fits" in f["results"]:
            fits = reader.read_table(f["results/fits"]).frame
            lines.append("fitted parameters:")
            for _, row in fits.iterrows():
                lines.append(f"  {row['group']} {row['model']} {row['parameter']} = {row['estimate']:.6g} "
                             f"± {row['stderr']:.3g} {row['unit']}")
    if not lines:
        raise AuditFileError(f"{path}: empty audit file")
    return "\n".join(lines)
