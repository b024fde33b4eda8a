"""``vzero verify``: every stored hash recomputed; tampering and damage reported with exit 2."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import h5py
import pytest
from vzero.audit.verify import verify
from vzero.cli.main import main

from tests.conftest import DATA

KEPT = DATA / "audit" / "linear-v1.1.h5"


@pytest.fixture
def copy(tmp_path: Path) -> Path:
    p = tmp_path / "run.h5"
    shutil.copy(KEPT, p)
    return p


def test_untouched_file_is_ok(copy: Path, capsys):
    assert main(["verify", str(copy)]) == 0
    assert "OK" in capsys.readouterr().out


def _rate_column(f: h5py.File) -> str:
    import json

    cols = json.loads(f["results/rates"].attrs["columns"])
    return f"results/rates/{cols.index('rate'):03d}"


@pytest.mark.parametrize("tamper", ["result_value", "input_byte", "recipe_text", "input_size"])
def test_tampering_is_reported(copy: Path, tamper: str, capsys):
    with h5py.File(copy, "a") as f:
        if tamper == "result_value":
            ds = f[_rate_column(f)]
            values = ds[()]
            values[0] = values[0] * 1.0000001  # a change in the 8th digit is still found
            ds[...] = values
            expect = "table /results/rates: content does not match"
        elif tamper == "input_byte":
            ds = f["inputs/00"]
            data = ds[()]
            data[10] ^= 1
            ds[...] = data
            expect = "bytes do not match the recorded sha256"
        elif tamper == "recipe_text":
            f.attrs["recipe_text"] = str(f.attrs["recipe_text"]).replace("300 s", "301 s")
            expect = "recipe text does not match recipe_sha256"
        else:
            f["inputs/00"].attrs["size"] = 1
            expect = "bytes stored, 1 recorded"
    report = verify(copy)
    assert not report.ok and any(expect in p for p in report.problems), report.problems
    assert main(["verify", str(copy)]) == 2
    assert expect in capsys.readouterr().err


def test_hash_matches_an_independent_computation(copy: Path):
    """The input hash is plain SHA-256 of the bytes (hashlib, independent of vzero's writer)."""
    with h5py.File(copy, "r") as f:
        ds = f["inputs/00"]
        assert hashlib.sha256(ds[()].tobytes()).hexdigest() == ds.attrs["sha256"]


def test_commands_refuse_a_changed_file_before_reading_it(copy: Path):
    from vzero.audit.verify import check_intact
    from vzero.errors import AuditFileError

    check_intact(copy)  # untouched: no complaint
    with h5py.File(copy, "a") as f:
        f.attrs["recipe_text"] = str(f.attrs["recipe_text"]).replace("300 s", "301 s")
    with pytest.raises(AuditFileError, match="does not match its digests"):
        check_intact(copy)
    check_intact(copy, check=False)  # --no-verify: not checked
