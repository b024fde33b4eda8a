"""Batches: one recipe over many plates (manifest, glob), failed plates reported by name, streamed outcomes.

The plates are the invented demo plate simulated with different noise seeds (plugins/demo/simulate.py), so
every plate has the same layout and the pooled fit sees replicate plates.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pandas as pd
import pytest
from vzero.cli.main import main
from vzero.errors import RecipeError
from vzero.run.runner import run

STEPS = """\
steps:
  - import: {method: table, signal_unit: AU}
  - blank: {method: mean, match: substrate}
  - rates: {method: window, start: "0 s", end: "90 s"}
  - convert: {method: beer-lambert, epsilon: "6220 M^-1 cm^-1", pathlength: "0.55 cm", direction: increase,
              output_unit: "uM/min"}
  - fit: {method: nls, models: [michaelis-menten]}
"""


def demo_batch(folder: Path, n: int, *, broken: tuple[int, ...] = (), fit: bool = True) -> Path:
    """Write ``n`` simulated demo plates under ``folder/plates/``, a manifest and a recipe; return the recipe.

    Plates whose index is in ``broken`` get a data file that cannot be read as a plate.
    """
    from vzero.plugins.demo.simulate import layout, simulate

    plates = folder / "plates"
    plates.mkdir(parents=True, exist_ok=True)
    layout().to_csv(plates / "layout.csv", index=False)
    rows = ["name,data,layout"]
    for i in range(n):
        path = plates / f"run-{i:02d}.csv"
        if i in broken:
            path.write_text("time (s),A1\n0,0.1\nten,0.2\n", "utf-8")
        else:
            simulate(seed=100 + i).to_csv(path, index=False)
        rows.append(f"plate-{i:02d},run-{i:02d}.csv,layout.csv")
    (plates / "manifest.csv").write_text("\n".join(rows) + "\n", "utf-8")
    steps = STEPS if fit else STEPS[: STEPS.index("  - fit")]
    recipe = folder / "batch.yaml"
    recipe.write_text(f"vzero: 1\nname: batch\nplates:\n  - manifest: plates/manifest.csv\n{steps}", "utf-8")
    return recipe


def h5_contents(path: Path) -> dict[str, Any]:
    """Every dataset (values) and attribute of an audit file under every name, except the per-run ones
    (times, run id). Every link is followed: identical data may be stored once and hard-linked in one file
    and twice in another, which is the same content."""
    skip = {"created", "run_id", "started", "seconds", "recipe_path", "vzero_digest"}  # digests cover the times
    out: dict[str, Any] = {}

    def walk(name: str, obj: Any) -> None:
        for k, v in obj.attrs.items():
            if k not in skip:
                out[f"{name}@{k}"] = v
        if isinstance(obj, h5py.Dataset):
            out[name] = obj[()]
        else:
            for key in obj:
                walk(f"{name}/{key}" if name else key, obj[key])

    with h5py.File(path) as f:
        for key in f:
            walk(key, f[key])
        for k, v in f.attrs.items():
            if k not in skip:
                out[f"/@{k}"] = v
    return out


def assert_same_h5(a: Path, b: Path) -> None:
    ca, cb = h5_contents(a), h5_contents(b)
    assert list(ca) == list(cb)  # same objects in the same order
    for key, va in ca.items():
        vb = cb[key]
        if isinstance(va, np.ndarray) and va.dtype.names:  # a table: field by field
            assert va.dtype == vb.dtype, key
            for name in va.dtype.names:
                np.testing.assert_array_equal(va[name], vb[name], err_msg=f"{key}:{name}")
        elif isinstance(va, np.ndarray) and va.dtype.kind == "f":
            np.testing.assert_array_equal(va, vb, err_msg=key)  # bit for bit (NaN equal to NaN)
        elif isinstance(va, np.ndarray):
            assert va.tolist() == vb.tolist(), key
        else:
            assert va == vb, key


def test_manifest_batch_pools_plates_and_stores_the_manifest(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 3)
    result = run(recipe, tmp_path / "out")
    assert result.exit_code == 0 and not result.failed
    assert list(pd.unique(result.rates["plate"])) == ["plate-00", "plate-01", "plate-02"]
    assert len(result.rates) == 3 * 96
    # the reduce: one fit per group over the wells of all three plates (36 rates per group on one plate,
    # as the single-plate demo run shows)
    from vzero.plugins.demo.simulate import layout

    lay = layout()
    assert set(result.fits["group"]) == set(lay.loc[lay["role"] == "sample", "group"])
    assert set(result.fits["n_points"]) == {3 * 36}
    with h5py.File(result.audit_path) as f:
        names = {f["inputs"][k].attrs["name"]: f["inputs"][k].attrs["key"] for k in f["inputs"]}
        assert names["plates/manifest.csv"] == "manifest"
        assert names["plates/run-01.csv"] == "data" and names["plates/layout.csv"] == "layout"
        assert sorted(f["steps/03-rates-window"]) == ["plate-00", "plate-01", "plate-02"]
        assert f["steps/02-blank-mean/plate-02/traces/signal"].shape == (96, 61)


def test_failed_plate_is_reported_and_the_rest_finish(tmp_path: Path, capsys):
    recipe = demo_batch(tmp_path / "in", 4, broken=(1,))
    result = run(recipe, tmp_path / "out")
    assert list(result.failed) == ["plate-01"] and "ten" in result.failed["plate-01"]
    assert result.exit_code == 1
    assert sorted(pd.unique(result.rates["plate"])) == ["plate-00", "plate-02", "plate-03"]
    assert "plate-01" in (tmp_path / "out" / "failed_plates.txt").read_text("utf-8")
    code = main(["run", str(recipe), "--out", str(tmp_path / "cli"), "-q"])
    assert code == 1
    assert "plate plate-01 failed" in capsys.readouterr().err


def test_every_plate_failed_exits_2(tmp_path: Path, capsys):
    recipe = demo_batch(tmp_path / "in", 2, broken=(0, 1))
    assert main(["run", str(recipe), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "every plate failed" in err and "plate-00" in err and "plate-01" in err
    assert not (tmp_path / "out").exists()


def test_missing_data_file_fails_that_plate_only(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 3, fit=False)
    # the file disappears after validation (a network share, a file moved): that plate fails, not the run
    from vzero.run import runner

    real = runner._raw

    def flaky(source: Any, key: str, rel: str) -> Any:
        if rel.endswith("run-02.csv"):
            return real(source, key, "plates/gone.csv")
        return real(source, key, rel)

    runner._raw = flaky
    try:
        result = run(recipe, tmp_path / "out")
    finally:
        runner._raw = real
    assert list(result.failed) == ["plate-02"] and "cannot read" in result.failed["plate-02"]


def test_streamed_plates_give_the_same_audit_file_as_held_plates(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 3)
    held = run(recipe, tmp_path / "held", spill=False)
    streamed = run(recipe, tmp_path / "streamed", spill=True)
    for name, table in held.tables.items():
        pd.testing.assert_frame_equal(table.frame, streamed.tables[name].frame, check_exact=True)
    assert_same_h5(held.audit_path, streamed.audit_path)
    assert not any(p.name.startswith(".streamed.scratch") for p in tmp_path.iterdir())  # scratch removed


def test_streamed_plates_are_let_go_once_written(tmp_path: Path, monkeypatch):
    """A long batch run in one process keeps no plate's arrays and tables once the plate is in the audit file
    (they were kept alive for links by object identity: several MB a 384-well plate, for the whole run)."""
    import gc
    import weakref

    from vzero.audit import codec as audit
    from vzero.data import Traces

    alive: list[weakref.ref] = []
    write_traces = audit.write_traces

    def watching(group, name, traces: Traces, links=None):
        alive.append(weakref.ref(traces.signal))
        return write_traces(group, name, traces, links)

    held_on: list[int] = []

    def progress(p) -> None:  # as each plate is done: how many earlier plates' signal arrays still exist
        if p.step is None:
            gc.collect()
            held_on.append(sum(ref() is not None for ref in alive[: 2 * (p.done - 1)]))

    monkeypatch.setattr(audit, "write_traces", watching)
    recipe = demo_batch(tmp_path / "in", 4)
    run(recipe, tmp_path / "streamed", spill=True, progress=progress)
    assert len(alive) == 8 and held_on == [0, 0, 0, 0]  # import and blank traces of 4 plates


def test_glob_plates_named_by_file(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 2, fit=False)
    text = recipe.read_text("utf-8").replace("  - manifest: plates/manifest.csv",
                                             '  - data: "plates/run-*.csv"\n    layout: plates/layout.csv')
    recipe.write_text(text, "utf-8")
    result = run(recipe, tmp_path / "out")
    assert list(pd.unique(result.rates["plate"])) == ["run-00", "run-01"]


@pytest.mark.parametrize(
    ("manifest", "expected"),
    [
        ("name,data,layuot\np,run-00.csv,layout.csv\n", "unknown column 'layuot' (did you mean 'layout'?)"),
        ("name,layout\np,layout.csv\n", "no 'data' column"),
        ("name,data,layout\np,missing.csv,layout.csv\n", "row 2: data file 'plates/missing.csv' not found"),
        ("name,data,layout\np,,layout.csv\n", "row 2: no data file"),
        ("name,data,layout\np,run-00.csv\n", "row 2: 2 cells for 3 columns"),
        ("name,data,layout\n", "lists no plates"),
        ("name,data,layout\np,run-00.csv,layout.csv\np,run-01.csv,layout.csv\n", "plate name 'p' is used twice"),
    ],
)
def test_manifest_problems_name_file_row_and_fix(tmp_path: Path, manifest: str, expected: str):
    recipe = demo_batch(tmp_path / "in", 2, fit=False)
    (tmp_path / "in" / "plates" / "manifest.csv").write_text(manifest, "utf-8")
    with pytest.raises(RecipeError) as err:
        run(recipe, tmp_path / "out")
    assert expected in str(err.value)
    assert "batch.yaml:4" in str(err.value) or "used twice" in expected


def test_manifest_entry_takes_no_other_keys(tmp_path: Path):
    recipe = demo_batch(tmp_path / "in", 1, fit=False)
    text = recipe.read_text("utf-8").replace("manifest: plates/manifest.csv", "manifest: plates/manifest.csv\n"
                                             "    layout: plates/layout.csv")
    recipe.write_text(text, "utf-8")
    with pytest.raises(RecipeError, match="a manifest entry has the one key 'manifest'"):
        run(recipe, tmp_path / "out")


def test_digests_written_on_the_fly_match_the_stored_content(tmp_path: Path):
    """Digests are computed as the file is written (by the driver, and by workers for their plates' parts,
    which are then copied in); each must equal the digest recomputed from what is stored."""
    from vzero.audit.digest import DIGEST_ATTR, object_digest

    recipe = demo_batch(tmp_path / "in", 3)
    for jobs in (1, 2):
        result = run(recipe, tmp_path / f"out{jobs}", jobs=jobs)
        with h5py.File(result.audit_path) as f:
            sealed: list[Any] = [f]
            f.visititems(lambda name, obj, found=sealed: found.append(obj) if DIGEST_ATTR in obj.attrs else None)
            assert len(sealed) > 10
            for obj in sealed:
                assert obj.attrs[DIGEST_ATTR] == object_digest(obj).hex(), obj.name
