"""Probes of an attacker and of a clumsy user, kept fixed: received files run no code, absurd numbers are
refused or flagged, bounded parsing, faults become exit 2 and never a crash, spreadsheet-safe CSV.

See docs/security.md for the threat model these tests hold vzero to.
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import h5py
import pytest
from vzero.cli.main import main
from vzero.errors import PluginError
from vzero.run.rerun import rerun
from vzero.run.runner import run

from tests.conftest import DATA, linear_plate

# -- 1. no code runs that the user did not name on the command line ------------------------------------------

MARKER_PLUGIN = '''
from pathlib import Path
Path({marker!r}).write_text("ran")
from vzero import hookimpl

@hookimpl
def vzero_register(registry):
    pass
'''


def _plant(folder: Path, marker: Path, name: str = "evil.py") -> Path:
    """A plugin file whose import leaves ``marker`` behind (the probe: did any command import it?)."""
    path = folder / name
    path.write_text(MARKER_PLUGIN.format(marker=str(marker)), "utf-8")
    return path


def _retarget(audit: Path, text: str) -> None:
    """What whoever made a file can do: replace the stored recipe and recompute its hash."""
    with h5py.File(audit, "r+") as f:
        f.attrs["recipe_text"] = text
        f.attrs["recipe_sha256"] = hashlib.sha256(text.encode("utf-8")).hexdigest()


def test_crafted_audit_file_naming_a_plugin_path_runs_no_code(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    audit = run(recipe, tmp_path / "old").audit_path
    marker = tmp_path / "ran.txt"
    evil = _plant(tmp_path, marker)
    with h5py.File(audit, "r") as f:
        text = f.attrs["recipe_text"]
    _retarget(audit, text.replace("steps:", f"plugins: [{evil}]\nsteps:"))
    with pytest.raises(PluginError, match="does not import code an audit file names"):
        rerun(audit, tmp_path / "again")
    assert main(["rerun", str(audit), "--out", str(tmp_path / "cli"), "-q"]) == 2
    for command in (["inspect", str(audit)], ["verify", str(audit)], ["diff", str(audit), str(audit)],
                    ["report", str(audit), "--out", str(tmp_path / "rep"), "--max-panels", "24"],
                    ["export", str(audit), "--format", "xlsx", "--out", str(tmp_path / "x.xlsx")]):
        main(command)
    assert not marker.exists()
    assert not (tmp_path / "again").exists() and not (tmp_path / "cli").exists()


def test_plugin_shipped_beside_the_audit_file_runs_only_when_passed(tmp_path: Path):
    """The file sits where the stored recipe says and its hash matches: still not imported on that word."""
    folder = tmp_path / "in"
    recipe = linear_plate(folder)
    marker = tmp_path / "ran.txt"
    shutil.copy(DATA / "plugins" / "lab_rates.py", folder / "lab_rates.py")
    recipe.write_text(recipe.read_text("utf-8").replace("steps:", "plugins: [lab_rates.py]\nsteps:"), "utf-8")
    audit = run(recipe, tmp_path / "old").audit_path
    (folder / "lab_rates.py").write_text(
        (folder / "lab_rates.py").read_text("utf-8") + f"\nfrom pathlib import Path\nPath({str(marker)!r}).touch()\n")
    with pytest.raises(PluginError, match=r"--plugin lab_rates\.py"):
        rerun(audit, tmp_path / "again")
    assert not marker.exists()
    with pytest.raises(PluginError, match="differs from the old run's"):  # the hash check still holds
        rerun(audit, tmp_path / "again", plugins=[str(folder / "lab_rates.py")])
    assert not marker.exists()


def test_check_runs_no_plugin_code_and_says_what_it_skipped(tmp_path: Path, capsys):
    folder = tmp_path / "in"
    recipe = linear_plate(folder)
    marker = tmp_path / "ran.txt"
    _plant(folder, marker)
    recipe.write_text(recipe.read_text("utf-8").replace("steps:", "plugins: [evil.py]\nsteps:")
                      .replace("- rates:", "- rates: {method: lab-special}\n  - rates:"), "utf-8")
    assert main(["check", str(recipe)]) == 0
    out = capsys.readouterr().out
    assert not marker.exists()
    assert "not checked" in out and "evil.py" in out and "rates: lab-special" in out
    assert main(["check", str(recipe), "--load-plugins"]) == 2  # the user asked: now it runs, and the method is unknown
    assert marker.exists()


# -- 6. faults are errors, not crashes -------------------------------------------------------------------------


def _limited(size: int) -> None:
    """In the child: a file-size limit (the kernel's stand-in for a full disk), its signal ignored so that a
    write fails with EFBIG as on a full disk."""
    import resource
    import signal

    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (size, size))


@pytest.mark.slow
@pytest.mark.parametrize("size", [2_000, 40_000, 100_000])
def test_full_disk_during_the_audit_write_is_exit_2_and_leaves_nothing(tmp_path: Path, size: int):
    import subprocess
    import sys

    recipe = linear_plate(tmp_path / "in")
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "vzero", "run", str(recipe), "--out", str(out)],
                          preexec_fn=lambda: _limited(size), capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2, proc.stderr[-2000:]  # not -11 (a segmentation fault) nor 3 (internal error)
    assert f"cannot write '{out / 'run.h5'}': File too large" in proc.stderr
    assert "Can't decrement" not in proc.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in"]  # no partial folder, no target


def test_output_path_that_is_a_file_is_exit_2(tmp_path: Path, capsys):
    recipe = linear_plate(tmp_path / "in")
    (tmp_path / "afile").write_text("x")
    assert main(["run", str(recipe), "--out", str(tmp_path / "afile" / "sub")]) == 2
    err = capsys.readouterr().err
    assert f"cannot write '{tmp_path / 'afile'}'" in err and "A file is in the way" in err


def _dead_pid() -> int:
    import subprocess
    import sys

    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_force_swaps_atomically_and_a_killed_swap_is_restored(tmp_path: Path):
    from vzero.errors import OutputExistsError

    recipe = linear_plate(tmp_path / "in")
    out = tmp_path / "out"
    run(recipe, out)
    first = (out / "run.h5").read_bytes()
    run(recipe, out, force=True)
    assert (out / "run.h5").read_bytes() != first  # the new run (a new run id) is in place
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in", "out"]  # the old run is gone, nothing beside
    # what a --force killed between moving the old run aside and moving the new one in would leave
    pid = _dead_pid()
    (out).rename(tmp_path / f".out.old-{pid}-0badc0de")
    (tmp_path / f".out.partial-{pid}-xyz").mkdir()
    with pytest.raises(OutputExistsError, match="already holds files"):
        run(recipe, out)  # the old run is back at the target, so a run without --force refuses to replace it
    assert (out / "run.h5").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in", "out"]


def test_report_files_are_replaced_as_one_set(tmp_path: Path, monkeypatch):
    from vzero.errors import OutputWriteError
    from vzero.run import swap

    swap.replace_set(tmp_path, {"report.html": b"old", "figures/a.png": b"old-a"}, "report")
    real = Path.write_bytes
    calls = []

    def fail_second(self: Path, data: bytes) -> int:
        calls.append(self)
        if len(calls) == 2:
            raise OSError(28, "No space left on device", str(self))
        return real(self, data)

    monkeypatch.setattr(Path, "write_bytes", fail_second)
    with pytest.raises(OutputWriteError, match=r"cannot write '.*figures/a\.png': No space left on device"):
        swap.replace_set(tmp_path, {"report.html": b"new", "figures/a.png": b"new-a"}, "report")
    monkeypatch.undo()
    assert (tmp_path / "report.html").read_bytes() == b"old" and (tmp_path / "figures/a.png").read_bytes() == b"old-a"
    (tmp_path / f".report.partial-{_dead_pid()}-left").mkdir()  # a killed call's staging folder
    swap.replace_set(tmp_path, {"report.html": b"new", "figures/b.png": b"new-b"}, "report")
    assert sorted(str(p.relative_to(tmp_path)) for p in tmp_path.rglob("*")) == ["figures", "figures/b.png",
                                                                                 "report.html"]


# -- 5. bounded parsing ----------------------------------------------------------------------------------------


def _alias_bomb(levels: int = 7) -> str:
    """Each level repeats the one above ten times: 10**levels values from about a kilobyte of text."""
    text = "vzero: 1\nx0: &x0 [a, a, a, a, a, a, a, a, a, a]\n"
    for i in range(1, levels):
        text += f"x{i}: &x{i} [" + ", ".join([f"*x{i - 1}"] * 10) + "]\n"
    return text


def test_yaml_alias_bomb_is_refused_at_once(tmp_path: Path):
    from vzero.errors import RecipeError
    from vzero.recipe import MAX_EXPANDED_NODES, load

    path = tmp_path / "bomb.yaml"
    path.write_text(_alias_bomb(), "utf-8")
    assert len(_alias_bomb()) < 2000 and 10**7 > MAX_EXPANDED_NODES
    with pytest.raises(RecipeError, match=r"bomb\.yaml:\d+ the recipe expands to more than"):
        load(path)
    many = "vzero: 1\nx: &x 1\nl: [" + ", ".join(["*x"] * 300) + "]\n"
    (tmp_path / "many.yaml").write_text(many, "utf-8")
    with pytest.raises(RecipeError, match="more than 200 YAML aliases"):
        load(tmp_path / "many.yaml")


def test_stored_alias_bomb_does_not_stall_the_report(tmp_path: Path):
    from vzero.plugins.report.sources import from_audit

    audit = run(linear_plate(tmp_path / "in"), tmp_path / "old").audit_path
    _retarget(audit, _alias_bomb(8))
    assert from_audit(audit).recipe == {}  # refused by the recipe parser, so the report shows no recipe


def test_xlsx_that_unpacks_too_far_is_refused_before_unpacking(tmp_path: Path):
    import io
    import zipfile

    from vzero.errors import InputFileError
    from vzero.plugins.importers.readers import XLSX_MAX_BYTES, _check_xlsx_size

    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as z:
        z.writestr("xl/worksheets/sheet1.xml", b"0" * (XLSX_MAX_BYTES + 1))
    packed = buffer.getvalue()
    assert len(packed) < XLSX_MAX_BYTES // 500  # the probe: small on disk
    with pytest.raises(InputFileError, match=r"plate\.xlsx: the \.xlsx workbook unpacks to 200 MB"):
        _check_xlsx_size(packed, "plate.xlsx")


def test_plate_names_unsafe_for_hdf5_or_files_are_refused_at_their_line(tmp_path: Path):
    from vzero.errors import RecipeError
    from vzero.run.runner import check_recipe

    recipe = linear_plate(tmp_path / "in")
    text = recipe.read_text("utf-8")
    for name, why in (("a/b", "slash"), ('"a\\0b"', "control character"), ('".."', "folder reference")):
        recipe.write_text(text.replace("name: p1", f"name: {name}"), "utf-8")
        with pytest.raises(RecipeError, match=rf"recipe\.yaml:\d+ plates: plate name .* {why}"):
            check_recipe(recipe)


def test_non_utf8_recipe_names_its_line(tmp_path: Path):
    from vzero.errors import RecipeError
    from vzero.recipe import load

    path = tmp_path / "r.yaml"
    path.write_bytes(b"vzero: 1\nname: caf\xe9\n")
    with pytest.raises(RecipeError, match=r"r\.yaml:2 is not UTF-8 text \(byte 0xe9"):
        load(path)


# -- 7. safe CSV -------------------------------------------------------------------------------------------------


def test_formula_like_text_is_inert_and_numbers_stay_numbers():
    import pandas as pd
    from vzero.run._csv_fast import csv_text
    from vzero.spreadsheet import inert

    # the usual prefix rule (OWASP, "CSV Injection"): a leading ' before =, +, -, @, tab and CR
    for text in ("=1+41", "+cmd", "-2+3", "@SUM(A1)", "\tx", "\rx", "- 5", "-1 "):
        assert inert(text) == "'" + text
    for text in ("-0.5", "+3", "-1e-07", "-inf", "B7", "note - with dash", ""):
        assert inert(text) == text
    frame = pd.DataFrame({"group": ["=HYPERLINK(\"x\")", "g1", "-12.5"], "rate": [-1.0, 2.0, -3.5]})
    assert csv_text(frame).splitlines() == ["group,rate", "\"'=HYPERLINK(\"\"x\"\")\",-1.0", "g1,2.0",
                                            "-12.5,-3.5"]


def test_run_and_exports_write_no_live_formula(tmp_path: Path):
    import openpyxl
    from vzero.plugins.export import export

    folder = tmp_path / "in"
    recipe = linear_plate(folder)
    layout = (folder / "layout.csv").read_text("utf-8").replace(",gA\n", ",=1+41\n").replace(",gB\n", ",@cmd\n")
    (folder / "layout.csv").write_text(layout, "utf-8")
    result = run(recipe, tmp_path / "out")
    assert {"=1+41", "@cmd"} <= set(result.rates["group"])  # the values themselves are kept in the results
    rates = (tmp_path / "out" / "rates.csv").read_text("utf-8")
    assert ",'=1+41," in rates and ",'@cmd," in rates and ",=1+41" not in rates
    csv = export(result.audit_path, "csv", tmp_path / "x.csv").read_text("utf-8")
    assert ",'=1+41," in csv and ",=1+41" not in csv
    book = openpyxl.load_workbook(export(result.audit_path, "xlsx", tmp_path / "x.xlsx"))
    cells = [c for row in book["rates"].iter_rows() for c in row]
    assert not any(c.data_type == "f" for c in cells)
    assert any(c.value == "'=1+41" for c in cells)


# -- 4. files outside the recipe's folder ------------------------------------------------------------------------


def test_files_outside_the_recipe_folder_are_listed_and_input_is_budgeted(tmp_path: Path, capsys):
    from vzero.errors import InputFileError

    folder = tmp_path / "in"
    recipe = linear_plate(folder)
    elsewhere = tmp_path / "elsewhere.csv"
    shutil.move(folder / "layout.csv", elsewhere)
    recipe.write_text(recipe.read_text("utf-8").replace("layout: layout.csv", f"layout: {elsewhere}"), "utf-8")
    assert main(["run", str(recipe), "--out", str(tmp_path / "out")]) == 0
    size = elsewhere.stat().st_size
    assert f"note: read a file outside the recipe's folder: {elsewhere} ({size} bytes)" in capsys.readouterr().err
    assert main(["inspect", str(tmp_path / "out" / "run.h5")]) == 0
    assert f"{elsewhere} ({size} bytes," in capsys.readouterr().out.split("OUTSIDE")[0]
    with pytest.raises(InputFileError, match="past its input budget of 1000 bytes"):
        run(recipe, tmp_path / "small", max_input_bytes=1000)
    assert main(["run", str(recipe), "--out", str(tmp_path / "small"), "--max-input", "1K"]) == 2
    assert "pass --max-input" in capsys.readouterr().err


# -- 3. physical sense at the door: a mutation corpus ----------------------------------------------------------

CONFIGS = Path(__file__).parent.parent / "configs"


def _demo(folder: Path) -> Path:
    """The demo recipe and data in ``folder``, without the report step (the corpus checks numbers)."""
    folder.mkdir(parents=True)
    for name in ("demo.yaml", "demo_layout.csv", "demo_plate.csv"):
        shutil.copy(CONFIGS / name, folder / name)
    recipe = folder / "demo.yaml"
    recipe.write_text(recipe.read_text("utf-8").replace("  - report: {method: html}\n", ""), "utf-8")
    return recipe


def _edit_csv(path: Path, edit) -> None:
    import pandas as pd

    frame = pd.read_csv(path)
    edit(frame)
    frame.to_csv(path, index=False)


def _layout(well: str, column: str, value: float):
    def edit(folder: Path) -> None:
        def put(f):
            f.loc[f["well"] == well, column] = value
        _edit_csv(folder / "demo_layout.csv", put)
    return edit


def _read(well: str, row: int, value: object):
    def edit(folder: Path) -> None:
        def put(f):
            f[well] = f[well].astype(object)
            f.loc[row, well] = value
        _edit_csv(folder / "demo_plate.csv", put)
    return edit


def _times(factor: float):
    def edit(folder: Path) -> None:
        def put(f):
            f["time (s)"] = f["time (s)"] * factor
        _edit_csv(folder / "demo_plate.csv", put)
    return edit


def _recipe(old: str, new: str):
    def edit(folder: Path) -> None:
        path = folder / "demo.yaml"
        text = path.read_text("utf-8")
        assert old in text, f"the demo recipe no longer holds {old!r}: this probe would test nothing"
        path.write_text(text.replace(old, new), "utf-8")
    return edit


EPS, PATH = '"6220 M^-1 cm^-1"', '"0.55 cm"'
#: The probes that once ended with exit 0 and inf, NaN or values above 1e30 in a result, and their kin.
CORPUS = {
    "enzyme 0": _layout("A2", "enzyme (nM)", 0.0),
    "enzyme negative": _layout("A2", "enzyme (nM)", -5.0),
    "enzyme 1e308": _layout("A2", "enzyme (nM)", 1e308),
    "substrate inf": _layout("A3", "substrate (uM)", float("inf")),
    "substrate negative": _layout("A3", "substrate (uM)", -15.0),
    "substrate 1e300": _layout("B3", "substrate (uM)", 1e300),
    "epsilon 1e-320": _recipe(EPS, '"1e-320 M^-1 cm^-1"'),
    "epsilon NaN": _recipe(EPS, '"nan M^-1 cm^-1"'),
    "epsilon 0": _recipe(EPS, '"0 M^-1 cm^-1"'),
    "epsilon negative": _recipe(EPS, '"-6220 M^-1 cm^-1"'),
    "pathlength 1e308 km": _recipe(PATH, '"1e308 km"'),
    "pathlength 0": _recipe(PATH, '"0 cm"'),
    "window end inf": _recipe("method: model-choice", 'method: window\n      end: "inf s"'),
    "read 1e308": _read("A5", 3, 1e308),
    "read -1e308": _read("B5", 3, -1e308),
    "read 1e5 among absorbances": _read("A5", 3, 1e5),
    "read 1e-300": _read("C7", 4, 1e-300),
    "reads 1e30 in a whole well": lambda folder: [_read("D4", r, 1e30)(folder) for r in range(10)],
    "times x 1e-300": _times(1e-300),
    "times x 1e300": _times(1e300),
    "times x 1e-6": _times(1e-6),
}


def _unexplained(out: Path) -> list[str]:
    """Result cells that are inf, NaN or beyond 1e30 without a flag that explains them: in rates.csv a row
    needs a flag; in fits.csv a non-finite estimate needs success False (its message says why) and a missing
    uncertainty needs errorbars False or a note."""
    import numpy as np
    import pandas as pd

    def odd(values: pd.Series) -> np.ndarray:
        v = pd.to_numeric(values, errors="coerce").to_numpy(float)
        return ~np.isfinite(v) | (np.abs(np.nan_to_num(v)) > 1e30)

    found = []
    rates = pd.read_csv(out / "rates.csv", dtype={"flags": "string"})
    flagged = rates["flags"].fillna("").astype(str) != ""
    sample = rates["role"].astype(str) == "sample"
    for column in ("rate", "rate_stderr", "signal_rate", "turnover", "turnover_stderr"):
        if column in rates:
            bad = odd(rates[column]) & sample.to_numpy() & ~flagged.to_numpy()
            found += [f"rates {rates['well'][i]} {column}={rates[column][i]}" for i in np.flatnonzero(bad)]
    if (out / "fits.csv").exists():
        fits = pd.read_csv(out / "fits.csv", dtype={"note": "string"})
        ok = fits["success"].astype(str) == "True"
        bad = odd(fits["estimate"]) & ok.to_numpy()
        found += [f"fits {fits['group'][i]} {fits['parameter'][i]} estimate" for i in np.flatnonzero(bad)]
        explained = (fits["errorbars"].astype(str) == "False") | (fits["note"].fillna("").astype(str) != "") | ~ok
        for column in ("stderr", "ci_low", "ci_high"):
            bad = odd(fits[column]) & ~explained.to_numpy() & (fits["fixed"].astype(str) != "True").to_numpy()
            found += [f"fits {fits['group'][i]} {fits['parameter'][i]} {column}" for i in np.flatnonzero(bad)]
    return found


@pytest.mark.slow
@pytest.mark.parametrize("probe", list(CORPUS))
def test_mutation_corpus_never_ends_well_with_unexplained_absurd_numbers(tmp_path: Path, probe: str, capsys):
    recipe = _demo(tmp_path / "in")
    CORPUS[probe](tmp_path / "in")
    code = main(["run", str(recipe), "--out", str(tmp_path / "out"), "-q"])
    err = capsys.readouterr().err
    assert code in (0, 1, 2), err  # never 3 (an internal error) or a crash
    if code == 2:
        assert err.startswith("error: ") and ("demo" in err), err  # names the file (recipe line or data file)
    else:
        assert _unexplained(tmp_path / "out") == []


def test_fit_budget_stops_a_fit_and_says_so():
    import numpy as np
    from vzero.plugins.fit import engine

    def line(p, x):
        return p[0] * x["s"] + p[1]

    def slope(p, x):
        return [x["s"], np.ones_like(x["s"])]

    x = {"s": np.linspace(0, 10, 11)}
    y = 2 * x["s"] + 1
    res = engine.fit(line, slope, x, y, [0.0, 0.0], ["a", "b"], seconds=0.0)
    assert not res.success and "time budget" in res.message
    res = engine.fit(line, slope, x, y, [0.0, 0.0], ["a", "b"], max_nfev=1)
    assert not res.success and "budget of 1 model evaluations" in res.message
    res = engine.fit(line, slope, x, y, [0.0, 0.0], ["a", "b"])
    assert res.success  # the ordinary fit, well within its budget


def test_a_ten_megabyte_cell_is_refused_with_its_row(tmp_path: Path):
    from vzero.errors import InputFileError
    from vzero.plugins.importers.readers import ReadOptions, load_grid

    data = b"time (s),A1\n0," + b"7" * 10_000_000 + b"\n"
    with pytest.raises(InputFileError, match=r"plate\.csv, row 2, column '2': a cell of 10000000 characters"):
        load_grid(data, source="plate.csv", options=ReadOptions())


@pytest.mark.slow
@pytest.mark.parametrize("command", ["export", "report"])
def test_full_disk_in_export_and_report_is_exit_2_naming_the_file(tmp_path: Path, command: str):
    import subprocess
    import sys

    audit = run(linear_plate(tmp_path / "in"), tmp_path / "run").audit_path
    out = tmp_path / ("x.xlsx" if command == "export" else "rep")
    args = ["export", str(audit), "--format", "xlsx", "--out", str(out)] if command == "export" else \
        ["report", str(audit), "--out", str(out)]
    proc = subprocess.run([sys.executable, "-m", "vzero", *args], preexec_fn=lambda: _limited(3000),
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2, proc.stderr[-2000:]
    assert f"cannot write '{out}" in proc.stderr and "File too large" in proc.stderr
    assert not out.exists() or not any(out.iterdir())


def test_permission_denied_is_exit_2_naming_the_folder(tmp_path: Path, monkeypatch, capsys):
    import tempfile

    def denied(*args: object, **kwargs: object) -> str:
        raise PermissionError(13, "Permission denied", str(tmp_path))

    monkeypatch.setattr(tempfile, "mkdtemp", denied)  # what a read-only folder does (tests may run as root)
    assert main(["run", str(linear_plate(tmp_path / "in")), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert f"'{tmp_path}': Permission denied" in err and "Choose a folder you may write to" in err
