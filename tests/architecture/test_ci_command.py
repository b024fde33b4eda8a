"""CI runs exactly the README's test command, and that command runs the suite in parallel with the grouping the
suite's fixtures need (`--dist loadgroup` in pyproject.toml; tests/conftest.py assigns the groups)."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _readme_command() -> str:
    """The test command of the README's quickstart: the last command of the line that installs the test extra."""
    lines = [line for line in (ROOT / "README.md").read_text("utf-8").splitlines()
             if "pip install -e '.[test]'" in line and "pytest" in line]
    assert len(lines) == 1, lines
    return lines[0].split("&&")[-1].strip()


def _ci_command() -> str:
    """The pytest line of .ci/run (the one after the comment that names the README's command)."""
    lines = (ROOT / ".ci" / "run").read_text("utf-8").splitlines()
    runs = [line.strip() for line in lines if re.match(r"\s*python -m pytest\b", line)]
    assert len(runs) == 1, runs
    return runs[0]


def test_ci_runs_the_readme_test_command():
    assert _ci_command() == _readme_command()


def test_the_test_command_runs_in_parallel_with_groups():
    words = _readme_command().split()
    assert words[:3] == ["python", "-m", "pytest"] and "-n" in words
    options = tomllib.loads((ROOT / "pyproject.toml").read_text("utf-8"))["tool"]["pytest"]["ini_options"]
    assert "--dist=loadgroup" in options["addopts"]
    extra = tomllib.loads((ROOT / "pyproject.toml").read_text("utf-8"))["project"]["optional-dependencies"]["test"]
    assert any(req.startswith("pytest-xdist") for req in extra)


def test_ci_treats_no_collected_tests_as_success():
    """pytest (and pytest-xdist) exit with 5 when nothing was collected; CI must not fail a fresh project then."""
    text = (ROOT / ".ci" / "run").read_text("utf-8")
    assert '"$status" -eq 5' in text and text.index("python -m pytest") < text.index('"$status" -eq 5')
