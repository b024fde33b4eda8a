"""The distribution installs one import package, ``vzero``, and works from a folder that holds its own
``pipeline.py`` and ``plugins/`` (names a notebook folder may well have).

The wheel is built from this checkout and installed without dependencies into a fresh virtual environment;
the dependencies are borrowed from the environment running the tests through a ``.pth`` line (appended after
the new environment's own site-packages, so its ``vzero`` wins), which keeps the test offline and quick.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import sysconfig
import venv
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    # built from a copy, so that the build leaves no build/ or egg-info folder in the checkout
    source = tmp_path_factory.mktemp("source")
    for name in ("pyproject.toml", "README.md", "LICENSE"):
        if (ROOT / name).is_file():
            shutil.copy2(ROOT / name, source / name)
    for name in ("pipeline", "plugins"):
        shutil.copytree(ROOT / name, source / name, ignore=shutil.ignore_patterns("__pycache__"))
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(out), str(source)],
                   check=True, capture_output=True, env={**os.environ, "PIP_NO_INPUT": "1"})
    (found,) = out.glob("vzero-*.whl")
    return found


def test_the_wheel_holds_one_top_level_package(wheel: Path) -> None:
    with zipfile.ZipFile(wheel) as z:
        tops = {name.split("/")[0] for name in z.namelist()}
        top_level = next(n for n in z.namelist() if n.endswith(".dist-info/top_level.txt"))
        declared = z.read(top_level).decode().split() if top_level else []
        names = z.namelist()
    assert {t for t in tops if not t.endswith(".dist-info")} == {"vzero"}
    assert declared in ([], ["vzero"])
    # the plugins, their templates and the unit definitions travel with it
    assert "vzero/plugins/rates/__init__.py" in names
    assert "vzero/units.txt" in names
    assert any(n.startswith("vzero/plugins/report/templates/") for n in names)


def test_every_package_folder_is_listed_in_pyproject() -> None:
    import tomllib

    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text("utf-8"))["tool"]["setuptools"]["packages"])
    folders = {"vzero." + ".".join(p.parent.relative_to(ROOT / "pipeline").parts) for p in
               (ROOT / "pipeline").rglob("__init__.py")} | {
        "vzero.plugins." + ".".join(p.parent.relative_to(ROOT / "plugins").parts) for p in
        (ROOT / "plugins").rglob("__init__.py")}
    folders = {f.rstrip(".") for f in folders}
    assert folders == listed


def test_installed_wheel_runs_beside_a_pipeline_and_a_plugins_of_the_users_own(wheel: Path, tmp_path: Path) -> None:
    env_dir = tmp_path / "env"
    venv.EnvBuilder(with_pip=False).create(env_dir)
    py = env_dir / ("Scripts/python.exe" if os.name == "nt" else "bin/python")
    subprocess.run([sys.executable, "-m", "pip", "--python", str(py), "install", "--no-deps", "--no-index", "-q",
                    str(wheel)], check=True, capture_output=True)
    site = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                          check=True, capture_output=True, text=True).stdout.strip()
    (Path(site) / "borrowed-deps.pth").write_text(sysconfig.get_paths()["purelib"] + "\n", "utf-8")
    leftovers = [p.name for p in Path(site).iterdir() if p.name in ("pipeline", "plugins", "pipeline.py")]
    assert leftovers == []

    work = tmp_path / "notebook-folder"
    (work / "plugins").mkdir(parents=True)
    trap = "raise ImportError('the user\\'s own module was imported instead of vzero')\n"
    (work / "pipeline.py").write_text(trap, "utf-8")
    (work / "plugins" / "__init__.py").write_text(trap, "utf-8")
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    vzero_cmd = env_dir / "bin" / "vzero"
    demo = subprocess.run([str(vzero_cmd), "demo", "--out", "demo", "-q"], cwd=work, env=env,
                          capture_output=True, text=True, timeout=300)
    assert demo.returncode == 0, demo.stderr
    assert (work / "demo" / "run" / "run.h5").is_file()

    api = ("import vzero, pathlib; "
           "assert pathlib.Path(vzero.__file__).parent.parent.name != 'notebook-folder'; "
           "r = vzero.run('demo/inputs/demo.yaml', 'again'); "
           "fits = vzero.read_table('again/run.h5', 'fits'); "
           "print(len(r.rates), len(fits), vzero.verify('again/run.h5').ok)")
    out = subprocess.run([str(py), "-c", api], cwd=work, env=env, capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    wells, fits, ok = out.stdout.split()
    assert int(wells) == 96 and int(fits) > 0 and ok == "True"
