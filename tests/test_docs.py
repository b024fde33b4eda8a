"""The docs: the recipe reference is up to date, and no doc points to a file that is not in the repository."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DOCS = [*sorted((ROOT / "docs").glob("*.md")), ROOT / "README.md", ROOT / "DEVELOPERS.md"]
LINK = re.compile(r"\[[^\]]*\]\(([^)\s]+)\)")


def test_recipe_reference_is_up_to_date():
    done = subprocess.run([sys.executable, str(ROOT / "docs" / "make_reference.py"), "--check"],
                          capture_output=True, text=True, cwd=ROOT)
    assert done.returncode == 0, done.stderr


@pytest.mark.parametrize("page", DOCS, ids=[p.relative_to(ROOT).as_posix() for p in DOCS])
def test_relative_links_point_to_files_in_the_repository(page: Path):
    text = re.sub(r"```.*?```", "", page.read_text("utf-8"), flags=re.S)  # code blocks hold no links
    broken = []
    for target in LINK.findall(text):
        if re.match(r"[a-z][a-z0-9+.-]*:", target) or target.startswith("#"):
            continue  # a web address or an anchor on the same page
        path = (page.parent / target.split("#", 1)[0]).resolve()
        if not path.exists():
            broken.append(target)
    assert broken == [], f"{page.name} links to files that are not in the repository: {broken}"


NAMED = re.compile(r"`((?:pipeline|plugins|docs|configs|tests|bench)/[\w./-]+\.\w+)`")


@pytest.mark.parametrize("page", DOCS, ids=[p.relative_to(ROOT).as_posix() for p in DOCS])
def test_repository_paths_named_in_the_docs_exist(page: Path):
    missing = [p for p in NAMED.findall(page.read_text("utf-8")) if not (ROOT / p).exists() and "*" not in p]
    assert missing == [], f"{page.name} names files that are not in the repository: {missing}"


def test_the_link_check_can_fail(tmp_path: Path):
    page = tmp_path / "x.md"
    page.write_text("see [here](missing.md) and [web](https://example.org)", "utf-8")
    assert LINK.findall(page.read_text("utf-8")) == ["missing.md", "https://example.org"]
    assert not (page.parent / "missing.md").exists()
