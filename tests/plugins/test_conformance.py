"""Every registered stage method and fit model passes the conformance kit that plugin authors use
(:mod:`vzero.testing`, docs/plugins.md). A stage or model registered without an example here fails."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from vzero.data import Table, Traces
from vzero.manager import make_manager
from vzero.stage import RawInput, Stage, StageInput
from vzero.testing import check_model, check_stage

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
PLUGINS = make_manager(autoload=False)
REGISTRY = PLUGINS.registry
STAGES = sorted((e.kind, e.name) for e in REGISTRY if isinstance(e.component, type) and issubclass(e.component, Stage))
MODELS = REGISTRY.names("model")

RATES_CSV = b"substrate (uM),rate (uM/min),group\n1,0.9,a\n2,1.6,a\n5,2.9,a\n10,3.8,a\n20,4.4,a\n"
SETTINGS = {
    ("import", "table"): {"signal_unit": "AU"},
    ("import", "rates-table"): {"group_column": "group"},
    ("blank", "mean"): {"match": "substrate"},
    ("rates", "window"): {"start": "0 s", "end": "90 s"},
    ("rates", "auto"): {"epsilon": "6220 M^-1 cm^-1", "pathlength": "0.55 cm"},
    ("rates", "polynomial"): {"window": "120 s"},
    ("rates", "progress"): {"epsilon": "6220 M^-1 cm^-1", "pathlength": "0.55 cm"},
    ("rates", "lag-decay"): {},
    ("rates", "model-choice"): {"epsilon": "6220 M^-1 cm^-1", "pathlength": "0.55 cm"},
    ("convert", "beer-lambert"): {"epsilon": "6220 M^-1 cm^-1", "pathlength": "0.55 cm"},
    ("convert", "standard-curve"): {},
    ("fit", "nls"): {"profile": False},
    ("fit", "curves"): {"profile": False, "models": ["michaelis-menten"]},
    ("report", "html"): {"max_panels": 24},
}


def _raw(key: str, name: str, data: bytes) -> RawInput:
    return RawInput(key, name, data, hashlib.sha256(data).hexdigest())


def _input(artifacts, inputs=None, plate=True):
    return StageInput(artifacts=artifacts, plate={"name": "demo-plate", "files": {}} if plate else None,
                      inputs=inputs or {}, recipe={}, registry=REGISTRY, warn=lambda _: None)


@pytest.fixture(scope="module")
def demo():
    """The demo plate carried through one method of each kind (each step itself checked by the kit)."""
    raws = {"data": _raw("data", "demo_plate.csv", (CONFIGS / "demo_plate.csv").read_bytes()),
            "layout": _raw("layout", "demo_layout.csv", (CONFIGS / "demo_layout.csv").read_bytes())}
    out = {"raws": raws}
    out["imported"] = _run("import", "table", {}, raws)
    out["traces"] = _run("blank", "mean", {"traces": out["imported"]["traces"]})["traces"]
    signal_rates = _run("rates", "window", {"traces": out["traces"]})["rates"]
    out["signal_rates"] = signal_rates
    out["rates"] = _run("convert", "beer-lambert", {"traces": out["traces"], "rates": signal_rates})["rates"]
    return out


def _run(kind, method, artifacts, inputs=None, plate=True):
    cls = REGISTRY.get(kind, method).component
    # The report stamps the time it was built into report.html, so its files differ from run to run; the
    # names of the files it returns and everything else are still compared.
    return check_stage(cls, _input(artifacts, inputs, plate), SETTINGS[(kind, method)],
                       same_files=kind != "report").artifacts


def _standards():
    t = np.arange(0.0, 60.0, 10.0)
    levels = np.array([0.0, 1.0, 2.0, 4.0])
    signal = np.vstack([50.0 + 120.0 * levels[:, None] + 0.0 * t, 50.0 + 2.4 * t])
    wells = pd.DataFrame({"well": ["A1", "A2", "A3", "A4", "B1"], "role": ["standard"] * 4 + ["sample"],
                          "product": [*levels, np.nan]})
    traces = Traces("p", t, signal, np.isfinite(signal), np.zeros_like(signal, bool), wells, "RFU",
                    {"product": "uM"})
    frame = pd.DataFrame({"plate": "p", "well": wells["well"], "role": wells["role"], "rate": [0.0] * 4 + [2.4],
                          "rate_stderr": 0.0, "rate_unit": "RFU/s", "method": "window", "flags": "",
                          "window_start_s": 0.0, "window_end_s": 50.0, "n_points": 6, "lag_s": np.nan})
    return {"traces": traces, "rates": Table(frame, {"rate": "RFU/s", "rate_stderr": "RFU/s", "window_start_s": "s",
                                                      "window_end_s": "s", "lag_s": "s"}, {"signal_unit": "RFU"})}


def test_every_registered_stage_has_an_example():
    assert set(STAGES) == set(SETTINGS)


@pytest.mark.parametrize(("kind", "method"), STAGES)
def test_registered_stage_passes_the_kit(kind, method, demo):
    if kind == "import":
        inputs = demo["raws"] if method == "table" else {"data": _raw("data", "rates.csv", RATES_CSV)}
        _run(kind, method, {}, inputs)
    elif kind == "blank":
        _run(kind, method, {"traces": demo["imported"]["traces"]})
    elif kind == "rates":
        _run(kind, method, {"traces": demo["traces"]})
    elif method == "standard-curve":
        _run(kind, method, _standards())
    elif kind == "convert":
        _run(kind, method, {"traces": demo["traces"], "rates": demo["signal_rates"]})
    elif kind == "fit":
        _run(kind, method, {"rates": demo["rates"], "traces": {"demo-plate": demo["traces"]}}, plate=False)
    else:
        fits = _run("fit", "nls", {"rates": demo["rates"], "traces": {"demo-plate": demo["traces"]}}, plate=False)
        _run(kind, method, {"rates": demo["rates"], "traces": {"demo-plate": demo["traces"]}, **fits}, plate=False)


def _points(variables):
    """Points spanning each variable's range in the demo and reference data sets (µM, nM)."""
    s = np.repeat(np.geomspace(0.5, 200.0, 8), 3)
    i = np.tile([0.0, 2.0, 10.0], 8)
    x = {"substrate": s, "inhibitor": i if "substrate" in variables else np.geomspace(0.01, 100.0, 24),
         "enzyme": np.full(24, 5.0)}
    return {k: x[k] for k in variables}


def _data(variables, x):
    if "substrate" in variables:  # a saturating curve, slowed by inhibitor where there is one
        return 10.0 * x["substrate"] / (20.0 * (1 + x.get("inhibitor", 0.0) / 5.0) + x["substrate"])
    return 1.0 + 9.0 / (1.0 + x["inhibitor"] / 1.5)  # falling with inhibitor


@pytest.mark.parametrize("name", MODELS)
def test_registered_model_passes_the_kit(name):
    model = REGISTRY.get("model", name).component
    x = _points(model.variables)
    start = check_model(model, x, _data(model.variables, x))
    assert len(start) == len(model.params)


def test_the_kit_catches_a_stage_that_mutates_its_input(demo):
    from vzero.plugins.kinetics import BlankMethod

    class Scribbler(BlankMethod):
        method = "scribbler"

        def correct(self, traces, warn):
            traces.signal[0, 0] = 123.0  # writes into the input
            return traces.signal * 1.0

    traces = demo["imported"]["traces"]
    copy = traces.evolve(signal=traces.signal.copy())
    with pytest.raises(AssertionError, match="changed the artifacts it was given"):
        check_stage(Scribbler, _input({"traces": copy}))


def test_the_kit_catches_a_wrong_jacobian():
    from dataclasses import replace

    mm = REGISTRY.get("model", "michaelis-menten").component
    wrong = replace(mm, jac=lambda p, x: [x["substrate"] / (p[1] + x["substrate"]), 0.0 * x["substrate"]])
    x = _points(mm.variables)
    with pytest.raises(AssertionError, match="d/dKm of the jacobian differs"):
        check_model(wrong, x, _data(mm.variables, x))


def test_the_kit_catches_a_stage_that_is_not_deterministic(demo):
    from vzero.plugins.kinetics import RateMethod, RateResult

    class Dice(RateMethod):
        method = "dice"

        def kernel(self, time, signal, plate):
            return RateResult(v0=np.random.default_rng().normal(size=len(signal)))  # unseeded on purpose

    with pytest.raises(AssertionError, match="not deterministic"):
        check_stage(Dice, _input({"traces": demo["traces"]}))


def test_the_kit_catches_an_unknown_flag(demo):
    from vzero.plugins.kinetics import ImportMethod
    from vzero.stage import StageOutput

    class Odd(ImportMethod):
        method = "odd"

        def read(self, data):
            table = demo["signal_rates"]
            frame = table.frame.assign(flags="wobbly")
            return StageOutput(artifacts={"rates": table.with_frame(frame)})

    with pytest.raises(AssertionError, match="column 'flags' holds unknown names 'wobbly'"):
        check_stage(Odd, _input({}))
