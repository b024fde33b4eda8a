"""The survivor classifier of ``bench.mutate --effect``: its output comparison, line tracer and verdicts.

Cheap checks of the machinery only (a full mutation run is on demand, never in CI): :func:`compare` on
hand-made outputs at and either side of its tolerance, :class:`LineTracer` on a toy module written here,
and :func:`effect_verdict` with the battery's process replaced by fixed outputs.
"""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path

import pytest

from bench import mutate as mu
from bench.effect_battery import ABS_FLOOR, REL_TOL, LineTracer, compare


def test_identical_outputs_do_not_differ() -> None:
    out = {"a": [1.0, float("nan"), "x", 3, True, None], "b": []}
    assert compare(out, {k: list(v) for k, v in out.items()}) == {}


def test_floats_differ_beyond_the_relative_tolerance_only() -> None:
    base = {"v0": [1.0, 2.0]}
    assert compare(base, {"v0": [1.0 + 0.5 * REL_TOL, 2.0]}) == {}  # inside
    got = compare(base, {"v0": [1.0, 2.0 * (1 + 4 * REL_TOL)]})  # outside: reported with its size
    assert list(got) == ["v0"]
    assert got["v0"] == pytest.approx(4 * REL_TOL / (1 + 4 * REL_TOL), rel=1e-6)
    assert compare({"x": [0.25 * ABS_FLOOR]}, {"x": [-0.5 * ABS_FLOOR]}) == {}  # both below the floor
    assert compare({"x": [0.0]}, {"x": [2 * ABS_FLOOR]}) == {"x": 1.0}  # not below it


@pytest.mark.parametrize(("a", "b"), [(1, 2), (float("nan"), 1.0), ("flag", "flags"), (1.0, math.inf),
                                      (True, 1), (None, 0.0)])
def test_exact_kinds_differ_on_any_change(a: object, b: object) -> None:
    # flags and counts (ints), texts, NaN and infinity, bool against int, a missing value: exactly
    assert compare({"k": [a]}, {"k": [b]}) == {"k": math.inf}


def test_missing_keys_and_lengths_differ() -> None:
    assert compare({"a": [1.0], "b": [2.0]}, {"a": [1.0]}) == {"b": math.inf}
    assert compare({"a": [1.0]}, {"a": [1.0, 1.0]}) == {"a": math.inf}


TOY = '''\
LIMIT = 3


def sign(x):
    if x > LIMIT:
        return 1
    return -1
'''


def test_line_tracer_sees_the_lines_that_ran_and_only_those(tmp_path: Path) -> None:
    path = tmp_path / "toy_effect_module.py"
    path.write_text(TOY, encoding="utf-8")
    tracer = LineTracer({str(path): {1, 6, 7}})  # the constant, the taken branch's return, the other one
    spec = importlib.util.spec_from_file_location("toy_effect_module", path)
    assert spec is not None
    assert spec.loader is not None
    mod = importlib.util.module_from_spec(spec)
    with tracer.active():
        spec.loader.exec_module(mod)  # module-level line 1 runs here
        assert mod.sign(1) == -1  # line 7, not line 6
    assert tracer.reached() == [f"{path}:1", f"{path}:7"]
    assert sys.gettrace() != tracer._global  # the tracer is removed after (bound methods compare by ==)
    with tracer.active():
        assert mod.sign(5) == 1
    assert tracer.reached() == [f"{path}:1", f"{path}:6", f"{path}:7"]


def _baseline(outputs: dict, reached: set[str], unstable: set[str] = frozenset()) -> mu.EffectBaseline:
    base = mu.EffectBaseline.__new__(mu.EffectBaseline)
    base.outputs, base.reached, base.unstable = outputs, reached, set(unstable)
    return base


@pytest.fixture
def fake_battery(monkeypatch: pytest.MonkeyPatch) -> dict:
    """Replaces the copy and the battery's process: the mutant's outputs are whatever the test puts here."""
    got: dict = {}

    def copy_tree(dest: Path) -> None:
        (dest / "vzero" / "plugins" / "fit").mkdir(parents=True)

    monkeypatch.setattr(mu, "_copy_tree", copy_tree)
    monkeypatch.setattr(mu, "_battery", lambda copy, out, trace, timeout: got)
    return got


def test_verdicts(fake_battery: dict) -> None:
    m = mu.mutants("plugins/fit/compare.py")[0]
    site = f"vzero/plugins/fit/compare.py:{m.line}"
    base = {"v0": [1.0, 2.0], "noisy": [0.5]}
    fake_battery.update(outputs={"v0": [1.0, 2.0 * (1 + 1e-12)], "noisy": [0.7]}, reached=[])
    # a difference only in an output that two unmutated runs did not reproduce does not count
    assert mu.effect_verdict(m, _baseline(base, {site}, {"noisy"}), 10.0) == (mu.NO_EFFECT, {})
    assert mu.effect_verdict(m, _baseline(base, set(), {"noisy"}), 10.0) == (mu.NOT_REACHED, {})
    fake_battery.update(outputs={"v0": [1.0, 2.2], "noisy": [0.5]})
    verdict, diffs = mu.effect_verdict(m, _baseline(base, {site}), 10.0)
    assert verdict == "changes outputs by 0.0909 (open)"
    assert list(diffs) == ["v0"]
    fake_battery.clear()
    fake_battery.update(error="timeout")
    assert mu.effect_verdict(m, _baseline(base, {site}), 10.0)[0].endswith("(open)")


def test_score_counts_no_effect_survivors_as_equivalent() -> None:
    results = [mu.Mutant("m.py", i, 0, "x", i, outcome) for i, outcome in
               enumerate(["killed"] * 8 + ["killed (timeout)", "invalid", "survived", "survived"])]
    records = [{"effect": mu.NO_EFFECT}, {"effect": "changes outputs by 0.5 (open)"}]
    assert mu.score(results, records) == ("strict: 9 of 11 killed (81.8%); no-effect survivors as equivalent: "
                                          "9 of 10 (90.0%; 1 measured without effect)")
