"""``vzero demo``: generate the invented demo plate, run the demo recipe on it, and compare with the truth."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from vzero import hookimpl

RECIPE = Path(__file__).with_name("demo.yaml")


def write_demo(folder: Path) -> Path:
    """Write the demo data, layout and recipe into ``folder``; return the recipe path."""
    from vzero.plugins.demo.simulate import layout, simulate

    folder.mkdir(parents=True, exist_ok=True)
    simulate().to_csv(folder / "demo_plate.csv", index=False)
    layout().to_csv(folder / "demo_layout.csv", index=False)
    recipe = folder / "demo.yaml"
    recipe.write_text(RECIPE.read_text("utf-8"), "utf-8")
    return recipe


def _configure(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", "-o", default="vzero-demo", help="folder for the demo files and run (default vzero-demo)")
    p.add_argument("--force", action="store_true", help="replace an existing demo run")


def _run(args: argparse.Namespace) -> int:
    from vzero.plugins.demo.simulate import TRUTH
    from vzero.run.runner import run

    folder = Path(args.out)
    recipe = write_demo(folder / "inputs")
    result = run(recipe, folder / "run", force=args.force)
    if not args.quiet:
        print(f"demo inputs: {folder / 'inputs'}/ ; run: {result.out_dir}/")
        print(compare(result.fits, TRUTH))
        print(verdicts(result.tables))
        print("Results are for research use; they do not replace your lab's validated procedures.")
    return result.exit_code


def compare(fits: Any, truth: Any) -> str:
    """A text table of fitted parameters beside the true ones."""
    lines = [f"{'group':<16} {'model':<18} {'parameter':<8} {'fitted':>10} {'± stderr':>9} {'true':>8}  unit"]
    true_by = {"vmax": "vmax_um_per_min", "k_half": "k_half_um", "km": "k_half_um", "h": "hill", "kcat": "kcat_per_s"}
    for t in truth:
        sel = fits[(fits["group"] == t.group)]
        for _, row in sel.iterrows():
            key = str(row["parameter"]).lower().replace("0.5", "_half").replace("k_m", "km")
            attr = true_by.get(key)
            true = getattr(t, attr) if attr and (row["model"] == "hill" or key != "h") else None
            if true is not None and row["model"] == "michaelis-menten" and t.hill != 1.0:
                true = None
            true_text = f"{true:8.4g}" if true is not None else f"{'':8}"
            lines.append(f"{t.group:<16} {row['model']:<18} {row['parameter']:<8} {row['estimate']:10.4g} "
                         f"{row['stderr']:9.2g} {true_text}  {row['unit']}")
    return "\n".join(lines)


def verdicts(tables: dict[str, Any]) -> str:
    """One line per group: the selected model and the cooperativity verdict, in words."""
    lines = []
    comparison = tables.get("model_comparison")
    coop = tables.get("cooperativity")
    if comparison is not None:
        for group, rows in comparison.frame.groupby("group", sort=True):
            lines.append(f"{group}: selected model {rows['selected_model'].iloc[0]} "
                         f"({rows['selection_reason'].iloc[0]})")
    if coop is not None:
        for _, row in coop.frame.iterrows():
            lines.append(f"{row['group']}: cooperativity {row['verdict']} (h = {row['h']:.3g}, 95% interval "
                         f"{row['ci_low']:.3g} to {row['ci_high']:.3g})")
    return "\n".join(lines)


@hookimpl
def vzero_commands(commands: Any) -> None:
    commands.add("demo", "Generate the invented demo plate, run the demo recipe, and show fitted vs true values.",
                 _configure, _run, "vzero demo --out vzero-demo")
