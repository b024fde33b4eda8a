"""``vzero diff --rtol/--atol``: rounding noise is not a change, and the summary counts what changed."""

from __future__ import annotations

import pandas as pd
import pytest
from vzero.cli.diff import compare_parameters, compare_wells, counts, to_text


def _rates(rates: list[float], flags: list[str]) -> pd.DataFrame:
    n = len(rates)
    return pd.DataFrame({"plate": ["p"] * n, "well": [f"A{i + 1}" for i in range(n)], "rate": rates,
                         "rate_unit": ["uM/min"] * n, "flags": flags, "window_start_s": [0.0] * n,
                         "window_end_s": [90.0] * n, "note": [""] * n})


def test_rounding_noise_is_not_counted_but_real_changes_are():
    a = _rates([1.0, 2.0, 3.0, 4.0], ["", "", "", ""])
    b = _rates([1.0 * (1 + 1e-14), 2.0 * (1 + 1e-12), 3.3, 4.0], ["", "", "", "lag"])
    wells = compare_wells(a, b)
    assert list(wells["well"]) == ["A3", "A4"]  # 1e-14 and 1e-12 relative: noise under the default 1e-9
    assert len(compare_wells(a, b, rtol=0.0)) == 4  # with no tolerance every last-digit change shows
    assert len(compare_wells(a, b, rtol=0.2)) == 1  # a 10 % change inside a 20 % tolerance: only the flag
    assert len(compare_wells(a, b, rtol=0.0, atol=0.5)) == 1  # |3.3 - 3| = 0.3 <= 0.5


def test_parameters_within_tolerance_are_not_counted_and_summary_counts():
    a = pd.DataFrame({"group": ["g", "g"], "model": ["mm", "mm"], "parameter": ["Vmax", "Km"],
                      "estimate": [10.0, 100.0], "stderr": [1.0, 10.0], "ci_low": [8.0, 80.0],
                      "ci_high": [12.0, 120.0], "unit": ["uM/min", "uM"]})
    b = a.copy()
    b["estimate"] = [10.0 * (1 + 1e-13), 150.0]
    b["ci_high"] = [12.0 * (1 - 1e-13), 120.0]
    params = compare_parameters(a, b)
    assert list(params["parameter"]) == ["Km"]
    wells = compare_wells(_rates([1.0, 2.0], ["", ""]), _rates([1.5, 2.0], ["", "noisy"]))
    n = counts(wells, params)
    assert n == {"wells": 2, "rates": 1, "flags": 1, "parameters": 1}
    text = to_text({"recipe_diff": "", "wells": wells, "parameters": params, "n_wells": 2, "counts": n,
                    "rtol": 1e-9, "atol": 0.0})
    assert "summary: 2 of 2 wells changed (1 in rate, 1 in flags), 1 parameters changed" in text


def test_diff_command_line_takes_tolerances(tmp_path, capsys):
    from vzero.cli.main import main
    from vzero.run.runner import run

    from tests.conftest import linear_plate

    recipe = linear_plate(tmp_path / "in", noise=1e-3, seed=2)
    a = run(recipe, tmp_path / "a").audit_path
    recipe.write_text(recipe.read_text("utf-8").replace('end: "300 s"', 'end: "285 s"'), "utf-8")
    b = run(recipe, tmp_path / "b").audit_path
    assert main(["diff", str(a), str(b)]) == 0
    assert "summary: 96 of 96 wells changed" in capsys.readouterr().out
    assert main(["diff", str(a), str(b), "--rtol", "10", "--atol", "1"]) == 0  # every change is inside these
    out = capsys.readouterr().out
    assert "summary: 0 of 96 wells changed (0 in rate, 0 in flags)" in out and "rtol 10 and atol 1" in out
    with pytest.raises(SystemExit) as stop:
        main(["diff", str(a), str(b), "--rtol", "-1"])
    assert stop.value.code == 2 and "expected a tolerance of 0 or more" in capsys.readouterr().err
