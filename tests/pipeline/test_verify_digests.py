"""Format 2.0 digests: every value a user sees is covered, verify finds any change, and the commands that
read a file (inspect, export, report, rerun) check it first and refuse a damaged one unless --no-verify."""

from __future__ import annotations

import io
import shutil
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pandas as pd
import pytest
from vzero.audit import reader
from vzero.audit.verify import verify
from vzero.cli.main import main
from vzero.errors import AuditFileError
from vzero.run.runner import run

from tests.conftest import linear_plate


@pytest.fixture(scope="module")
def small_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A one-plate run (96 wells x 21 reads: import, blank, rates) with its audit file."""
    folder = tmp_path_factory.mktemp("digests")
    return Path(run(linear_plate(folder / "in", noise=1e-3, seed=3), folder / "out").audit_path)


@pytest.fixture
def copy(small_run: Path, tmp_path: Path) -> Path:
    p = tmp_path / "run.h5"
    shutil.copy(small_run, p)
    return p


def test_fresh_file_verifies_with_every_digest_checked(small_run: Path):
    report = verify(small_run)
    assert report.ok, report.text()
    assert {"/", "/steps", "/inputs", "/results"} <= set(report.checked)
    assert any(c.startswith("/steps/") and c.endswith("/p1") for c in report.checked)


def _change(f: h5py.File, what: str) -> None:
    if what == "time":
        ds = next(f[f"steps/{s}/p1/traces/time"] for s in f["steps"] if "traces" in f[f"steps/{s}/p1"])
        ds[3] = ds[3] + 1.0
    elif what == "mask":
        ds = f["steps/01-import-table/p1/traces/mask"]
        ds[5, 2] = not ds[5, 2]
    elif what == "saturated":
        ds = f["steps/02-blank-mean/p1/traces/saturated"]
        ds[0, 0] = not ds[0, 0]
    elif what == "rate":
        rates = f["results/rates"]
        row = rates[0]
        row["rate"] = row["rate"] * (1 + 1e-12)
        rates[0] = row
    elif what == "well name":
        wells = f["steps/01-import-table/p1/traces/wells"]
        row = wells[1]
        row["well"] = b"Z9"
        wells[1] = row
    elif what == "unit":
        units = list(f["results/rates"].attrs["units"])
        units[units.index("AU/s")] = "AU/min"
        f["results/rates"].attrs["units"] = np.array(units, dtype=h5py.string_dtype())
    elif what == "step parameters":
        f["steps/03-rates-window"].attrs["parameters"] = '{"end": "200 s", "start": "0 s"}'
    elif what == "step seconds":
        f["steps/03-rates-window/p1"].attrs["seconds"] = 0.0
    elif what == "input name":
        f["inputs/00"].attrs["name"] = "other.csv"
    elif what == "assay":
        f.attrs["assay"] = '{"pH": 9}'
    elif what == "an added dataset":
        f["results"].create_dataset("extra", data=np.arange(3))


CHANGES = ["time", "mask", "saturated", "rate", "well name", "unit", "step parameters", "step seconds",
           "input name", "assay", "an added dataset"]


@pytest.mark.parametrize("what", CHANGES)
def test_any_changed_value_is_found(copy: Path, what: str):
    with h5py.File(copy, "a") as f:
        _change(f, what)
    report = verify(copy)
    assert not report.ok, what
    assert any("does not match its recorded digest" in p for p in report.problems), report.problems


def test_a_missing_results_group_is_reported(copy: Path):
    with h5py.File(copy, "a") as f:
        del f["results"]
    report = verify(copy)
    assert any("group /results is missing" in p for p in report.problems), report.problems


def test_a_missing_file_digest_is_reported(copy: Path):
    with h5py.File(copy, "a") as f:
        del f.attrs["vzero_digest"]
    report = verify(copy)
    assert any("has no digest" in p for p in report.problems), report.problems


@pytest.mark.parametrize("command", ["inspect", "export", "report", "rerun"])
def test_commands_refuse_a_changed_file_and_proceed_with_no_verify(copy: Path, command: str, tmp_path: Path,
                                                                   capsys: pytest.CaptureFixture[str]):
    with h5py.File(copy, "a") as f:
        _change(f, "rate")
    extra = {"inspect": [], "export": ["--format", "csv", "--out", str(tmp_path / "x.csv")],
             "report": ["--out", str(tmp_path / "report")], "rerun": ["--out", str(tmp_path / "again")]}[command]
    assert main([command, str(copy), *extra]) == 2
    err = capsys.readouterr().err
    assert "does not match its digests" in err and "/results" in err and "--no-verify" in err
    assert not (tmp_path / "x.csv").exists() and not (tmp_path / "again").exists()
    assert main([command, str(copy), *extra, "--no-verify"]) in (0, 1)
    captured = capsys.readouterr()
    assert "without checking its digests (--no-verify)" in captured.out + captured.err


# -- every byte of dataset storage -------------------------------------------------------------------------

#: Byte positions tried per dataset: all of them in a small dataset, this many spread evenly (first and last
#: included) in a larger one, so that every dataset is covered while the test stays quick.
PER_DATASET = 16


def _storage(data: bytes) -> list[tuple[str, int, int]]:
    """(dataset path, file offset, size in bytes) of every dataset with storage of its own in the file."""
    found: dict[int, tuple[str, int, int]] = {}
    with h5py.File(io.BytesIO(data), "r") as f:
        def visit(name: str, obj: Any) -> None:
            if isinstance(obj, h5py.Dataset):
                offset, size = obj.id.get_offset(), obj.id.get_storage_size()
                if offset is not None and size:
                    found.setdefault(offset, (name, offset, size))  # hard links: one storage, visited once
        f.visititems(visit)
    return sorted(found.values(), key=lambda t: t[1])


def _seen(path: Path) -> dict[str, Any]:
    """What a user sees of a run: header, inputs, every step's traces and tables, the results."""
    with reader.open_audit(path) as f:
        out: dict[str, Any] = {"header": reader.header(f), "inputs": [(i.name, i.data) for i in reader.read_inputs(f)]}
        for name, table in reader.read_results(f).items():
            out[f"results/{name}"] = (table.frame, dict(table.units))
        for label, g in f["steps"].items():
            out[f"step/{label}"] = dict(g.attrs)
            for plate, sub in g.items():
                if "traces" in sub:
                    t = reader.read_traces(sub["traces"])
                    out[f"{label}/{plate}"] = (t.time, t.signal, t.mask, t.saturated, t.wells)
    return out


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, pd.DataFrame):
        return a.shape == b.shape and all(_same(a.iloc[:, i].to_numpy(), b.iloc[:, i].to_numpy())
                                          for i in range(a.shape[1])) and list(a.columns) == list(b.columns)
    if isinstance(a, np.ndarray):
        if a.dtype.kind == "f":
            return a.shape == b.shape and a.tobytes() == np.asarray(b).tobytes()
        return a.shape == b.shape and a.tolist() == np.asarray(b).tolist()
    if isinstance(a, tuple | list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    return bool(a == b)


def test_every_flipped_byte_of_dataset_storage_is_found_or_changes_nothing_seen(small_run: Path, tmp_path: Path):
    data = small_run.read_bytes()
    storage = _storage(data)
    with h5py.File(small_run, "r") as f:
        names: list[str] = []
        f.visititems(lambda name, obj: names.append(name) if isinstance(obj, h5py.Dataset) else None)
    covered = {n for n, _, _ in storage}
    assert len(covered) >= 8 and {"results/rates", "inputs/00"} <= covered
    baseline = _seen(small_run)
    target = tmp_path / "flipped.h5"
    tried = found = 0
    for name, offset, size in storage:
        positions = sorted(set(np.linspace(0, size - 1, min(size, PER_DATASET)).astype(int).tolist()))
        for pos in positions:
            flipped = bytearray(data)
            flipped[offset + pos] ^= 0xFF
            target.write_bytes(bytes(flipped))
            tried += 1
            try:
                report = verify(target)
                detected = not report.ok
            except AuditFileError:  # the file no longer opens as an audit file: found too
                detected = True
            if detected:
                found += 1
                continue
            assert _same(_seen(target), baseline), f"{name} byte {pos}: a change verify did not find"
    assert tried >= 8 * 2 and found > 0  # a flip verify does not find must have changed nothing seen (above)
