"""The mean-blank step's every output, against a hand calculation: corrected reads, the reads it cannot
correct, the columns it adds, its settings' defaults and bounds, and the wording limits of its warnings."""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from vzero.data import Traces
from vzero.params import validate
from vzero.plugins.blank import MeanBlank
from vzero.stage import StageInput


def _run(signal: np.ndarray, roles: list[str], substrate: list[float], settings: dict) -> tuple:
    t = np.arange(signal.shape[1], dtype=float)
    names = [f"A{i + 1}" for i in range(len(roles))]
    wells = pd.DataFrame({"well": names, "role": roles, "substrate": substrate})
    mask = np.isfinite(signal)
    traces = Traces("p", t, np.nan_to_num(signal, nan=0.0) + np.where(mask, 0.0, np.nan), mask,
                    np.zeros_like(mask), wells, "AU", {"substrate": "uM"})
    checked, problems = validate(MeanBlank.params, settings)
    assert not problems
    warnings: list[str] = []
    out = MeanBlank(**checked).run(StageInput({"traces": traces}, {"name": "p"}, {}, {}, None, warnings.append))
    return out.artifacts["traces"], warnings


def test_a_read_missing_in_every_blank_leaves_that_read_uncorrected_and_masked() -> None:
    sample = np.array([1.0, 1.2, 1.4, 1.6])
    b1 = np.array([0.2, np.nan, 0.3, np.nan])
    b2 = np.array([0.4, np.nan, np.nan, np.nan])
    out, warnings = _run(np.vstack([sample, b1, b2]), ["sample", "blank", "blank"], [1, 1, 1], {})
    # per-read mean of the finite blank reads: 0.3, none, 0.3, none
    assert_allclose(out.signal[0, [0, 2]], [0.7, 1.1], atol=1e-12)
    assert list(out.mask[0]) == [True, False, True, False]
    assert not np.isfinite(out.signal[0, 1]) or not out.mask[0, 1]
    assert list(out.wells["blanks"]) == ["A2;A3", "A2;A3", "A2;A3"]
    assert list(out.wells["blank_match"]) == ["matched", "matched", "matched"]
    assert warnings == []  # match "none": every blank applies, nothing to warn about


def test_min_reads_default_and_bound() -> None:
    settings, problems = validate(MeanBlank.params, {})
    assert not problems and settings["min_reads"] == 1
    assert validate(MeanBlank.params, {"min_reads": 0})[1]
    assert not validate(MeanBlank.params, {"min_reads": 1})[1]
    # a blank with exactly one usable read is used by default and skipped at min_reads 2
    sig = np.vstack([np.full(4, 1.0), [0.5, np.nan, np.nan, np.nan], np.full(4, 0.1)])
    roles, sub = ["sample", "blank", "blank"], [1, 1, 1]
    out, warnings = _run(sig, roles, sub, {})
    assert out.wells["blanks"][0] == "A2;A3" and warnings == []
    out, warnings = _run(sig, roles, sub, {"min_reads": 2})
    assert out.wells["blanks"][0] == "A3"
    assert len(warnings) == 1 and "A2 have fewer than 2 usable read(s)" in warnings[0]


def test_unmatched_wells_are_listed_up_to_eight() -> None:
    # substrate matching; the sample levels 2..n have no blank of their own and fall back to the nearest
    for n_unmatched, ellipsis in ((8, False), (9, True)):
        n = n_unmatched + 2
        sig = np.vstack([np.full(3, 1.0)] * (n - 1) + [np.full(3, 0.25)])
        roles = ["sample"] * (n - 1) + ["blank"]
        sub = [1.0] + [2.0 + i for i in range(n_unmatched)] + [1.0]
        out, warnings = _run(sig, roles, sub, {"match": "substrate"})
        assert_allclose(out.signal[: n - 1], 0.75, atol=1e-12)
        (text,) = warnings
        listed = text.split("well(s) (")[1].split(")")[0]
        assert f"for {n_unmatched} well(s)" in text and "used the blanks of the nearest level" in text
        assert listed.count("A") == 8 and listed.endswith(", ...") == ellipsis
        assert list(out.wells["blank_match"])[:2] == ["matched", "nearest level"]


def test_wells_without_any_usable_blank_are_named_and_get_no_correction() -> None:
    sig = np.vstack([np.full(3, 1.0), np.full(3, np.nan)])
    for match in ("substrate", "none"):
        out, warnings = _run(sig, ["sample", "blank"], [1, 1], {"match": match})
        assert not out.mask[0].any()
        assert any("no usable blank on the plate: left without a rate" in w and "(A1)" in w for w in warnings)
        assert out.wells["blank_match"][0] == "none"


def test_a_well_that_falls_back_to_the_plates_blanks_is_named() -> None:
    # a sample without substrate (0) beside blanks at 1: no same or nearest substrate level, so the mean of all
    # usable blanks is used and the warning says so; with match "none" the same blanks are the match itself
    sig = np.vstack([np.array([1.0, 1.2, 1.4]), np.array([0.1, 0.1, 0.1])])
    out, warnings = _run(sig, ["sample", "blank"], [0, 1], {"match": "substrate"})
    assert out.wells["blank_match"][0] == "plate"
    assert_allclose(out.signal[0], [0.9, 1.1, 1.3], atol=1e-12)
    (text,) = warnings
    assert "used the mean of all usable blanks" in text and "(A1)" in text
    out, warnings = _run(sig, ["sample", "blank"], [0, 1], {"match": "none"})
    assert out.wells["blank_match"][0] == "matched" and warnings == []
