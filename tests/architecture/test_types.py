"""mypy over the core (package vzero without vzero.plugins), with the configuration in pyproject.toml.

pipeline/ installs as ``vzero`` through setuptools' package-dir mapping, which mypy cannot follow (an
editable install finds the package through an import hook). The test gives mypy a folder holding a link named
``vzero`` to pipeline/ and checks the package by that name, so every annotation that names ``vzero.x``
resolves to the files of this checkout. The count of checked files is compared with the files in pipeline/,
so that a checker that silently found nothing cannot pass.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.typecheck


def test_mypy_finds_no_error_in_the_core(tmp_path: Path) -> None:
    (tmp_path / "vzero").symlink_to(ROOT / "pipeline", target_is_directory=True)
    env = {**os.environ, "MYPYPATH": str(tmp_path)}
    done = subprocess.run(
        [sys.executable, "-m", "mypy", "--config-file", str(ROOT / "pyproject.toml"), "--cache-dir",
         str(tmp_path / "cache"), "-p", "vzero"],
        cwd=tmp_path, env=env, capture_output=True, text=True, timeout=600, check=False)
    out = done.stdout + done.stderr
    assert done.returncode == 0, out
    checked = re.search(r"no issues found in (\d+) source files", out)
    assert checked is not None, out
    assert int(checked.group(1)) == len(list((ROOT / "pipeline").rglob("*.py"))), out
