"""The audit file: version refusal, safety against damaged or foreign files, determinism, atomic writing."""

from __future__ import annotations

import os
import pickle
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import h5py
import numpy as np
import pytest
from vzero.audit import reader
from vzero.audit.codec import FORMAT_VERSION
from vzero.audit.verify import verify
from vzero.cli.inspect import summary
from vzero.cli.main import main
from vzero.errors import AuditFileError
from vzero.run.runner import run

from tests.conftest import DATA, linear_plate

KEPT = DATA / "audit" / "linear-v1.1.h5"


def _copy(tmp_path: Path, name: str = "run.h5") -> Path:
    p = tmp_path / name
    shutil.copy(KEPT, p)
    return p


def _reads_everything(path: Path) -> None:
    """Everything a user command reads: the summary, the hashes, every table and input."""
    summary(path)
    verify(path)
    with reader.open_audit(path) as f:
        reader.read_results(f)
        reader.read_inputs(f)
        reader.read_step_traces(f)


def test_newer_major_version_is_refused_with_a_clear_message(tmp_path: Path):
    p = _copy(tmp_path)
    with h5py.File(p, "a") as f:
        f.attrs["format_version"] = "3.0"
    with pytest.raises(AuditFileError, match=r"audit format 3\.0 is newer than this vzero reads.*newer vzero"):
        _reads_everything(p)


def test_newer_minor_version_is_read(tmp_path: Path):
    p = _copy(tmp_path)
    major = FORMAT_VERSION.split(".")[0]
    with h5py.File(p, "a") as f:
        f.attrs["format_version"] = f"{major}.99"
    with reader.open_audit(p) as f:
        assert "rates" in reader.read_results(f)


@pytest.mark.parametrize("damage", ["truncated", "garbage", "empty", "foreign_hdf5", "no_results", "bad_json"])
def test_damaged_or_foreign_files_give_audit_file_error(tmp_path: Path, damage: str):
    p = tmp_path / "run.h5"
    data = KEPT.read_bytes()
    if damage == "truncated":
        p.write_bytes(data[: len(data) // 2])
    elif damage == "garbage":
        p.write_bytes(np.random.default_rng(1).integers(0, 256, 4096, dtype=np.uint8).tobytes())
    elif damage == "empty":
        p.write_bytes(b"")
    elif damage == "foreign_hdf5":
        with h5py.File(p, "w") as f:
            f.create_dataset("x", data=np.arange(3))
            f.attrs["format"] = "something-else"
    else:
        p.write_bytes(data)
        with h5py.File(p, "a") as f:
            if damage == "no_results":
                del f["results"]
            else:
                f.attrs["exclusions"] = "{not json"
    with pytest.raises(AuditFileError):
        _reads_everything(p)


def test_cli_reports_damage_without_traceback(tmp_path: Path, capsys):
    p = tmp_path / "run.h5"
    p.write_bytes(KEPT.read_bytes()[:5000])
    assert main(["inspect", str(p)]) == 2
    assert main(["verify", str(p)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err and "damaged" in err


def test_reading_never_unpickles(tmp_path: Path, monkeypatch):
    """No pickle anywhere: make unpickling fail loudly and read the whole file; every dataset is a plain type."""

    def refuse(*args: object, **kw: object) -> None:
        raise AssertionError("pickle used while reading an audit file")

    monkeypatch.setattr(pickle, "loads", refuse)
    monkeypatch.setattr(pickle, "load", refuse)
    _reads_everything(KEPT)
    kinds = set()
    with h5py.File(KEPT, "r") as f:
        def visit(name: str, obj: object) -> None:
            if isinstance(obj, h5py.Dataset):
                kind = obj.dtype.kind
                if kind == "O":  # only variable-length UTF-8 strings may be objects
                    assert h5py.check_string_dtype(obj.dtype) is not None, name
                kinds.add(kind)
        f.visititems(visit)
    assert kinds <= set("biufO")


def _result_bytes(path: Path) -> dict[str, bytes]:
    out: dict[str, bytes] = {}
    with h5py.File(path, "r") as f:
        def visit(name: str, obj: object) -> None:
            if isinstance(obj, h5py.Dataset) and (name.startswith("results/") or name.startswith("steps/")):
                value = obj[()]
                out[name] = value.tobytes() if obj.dtype.kind != "O" else "\x1f".join(
                    v.decode() if isinstance(v, bytes) else str(v) for v in value).encode()
        f.visititems(visit)
    return out


def test_same_inputs_and_recipe_give_identical_tables_to_the_bit(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in", noise=2e-3, seed=7)
    a = run(recipe, tmp_path / "a").audit_path
    b = run(recipe, tmp_path / "b").audit_path
    ra, rb = _result_bytes(a), _result_bytes(b)
    assert ra.keys() == rb.keys() and "results/rates" in ra
    diffs = [k for k in ra if ra[k] != rb[k]]
    assert not diffs, diffs
    with h5py.File(a, "r") as fa, h5py.File(b, "r") as fb:  # the results' digests agree too (they hold no times)
        assert fa["results"].attrs["vzero_digest"] == fb["results"].attrs["vzero_digest"]
        assert fa.attrs["run_id"] != fb.attrs["run_id"]  # but they are two runs


SLEEPY = '''
import time
from pathlib import Path
from vzero import hookimpl
from vzero.plugins.kinetics import RateMethod

class Sleepy(RateMethod):
    method = "sleepy"
    version = "1"

    def kernel(self, time_s, signal, plate):
        Path(__file__).with_name("started").write_text("yes")
        time.sleep(60)
        return None

@hookimpl
def vzero_register(registry):
    registry.add(Sleepy)
'''


def test_sigkill_mid_run_leaves_previous_run_untouched(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    out = tmp_path / "out"
    run(recipe, out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    (recipe.parent / "sleepy.py").write_text(SLEEPY, "utf-8")
    text = recipe.read_text("utf-8").replace("steps:", "plugins: [sleepy.py]\nsteps:")
    recipe.write_text(text.replace('{method: window, start: "0 s", end: "300 s"}', "{method: sleepy}"), "utf-8")
    env = {**os.environ, "VZERO_NO_AUTOLOAD": "1"}
    proc = subprocess.Popen([sys.executable, "-m", "pipeline", "run", str(recipe), "--out", str(out), "--force"],
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    started = recipe.parent / "started"
    deadline = time.monotonic() + 30
    while not started.exists() and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)
    assert started.exists(), "the run never reached the sleeping step"
    proc.send_signal(signal.SIGKILL)
    proc.wait(10)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    # The killed process could not remove its partial folder (it streams plates into it); it is hidden beside
    # the target, never at it, and the next run into the same target removes it.
    partial = [p for p in tmp_path.iterdir() if p.name.startswith(".out.partial-")]
    assert len(partial) <= 1 and not [p for p in tmp_path.iterdir() if p.name.startswith(".out") and p not in partial]
    run(linear_plate(tmp_path / "in2"), out, force=True)
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]


def test_two_runs_into_different_folders_at_once_do_not_interfere(tmp_path: Path):
    recipe_a = linear_plate(tmp_path / "a", seed=1, noise=1e-3)
    recipe_b = linear_plate(tmp_path / "b", slopes=np.linspace(2e-4, 5e-4, 96))
    results: dict[str, object] = {}

    def go(name: str, recipe: Path) -> None:
        results[name] = run(recipe, tmp_path / f"out-{name}")

    threads = [threading.Thread(target=go, args=(n, r)) for n, r in (("a", recipe_a), ("b", recipe_b))]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    alone = run(recipe_b, tmp_path / "out-b-alone")
    assert _result_bytes(tmp_path / "out-b" / "run.h5") == _result_bytes(alone.audit_path)
    for name in ("a", "b"):
        assert verify(tmp_path / f"out-{name}" / "run.h5").ok
