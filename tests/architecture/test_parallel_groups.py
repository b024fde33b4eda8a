"""The grouping of tests for parallel runs (tests/conftest.py): tests linked by a shared module or session
fixture of the suite's own, or by a module's cached simulation, land in one ``xdist_group``; others stay free."""

from __future__ import annotations

import inspect
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest

from tests import conftest


def _own() -> None:
    """A fixture body defined in the suite's files."""


@dataclass
class FakeDef:
    scope: str
    func: Any = _own


@dataclass
class FakeInfo:
    name2fixturedefs: dict[str, tuple[FakeDef, ...]]

    @property
    def names_closure(self) -> list[str]:
        return list(self.name2fixturedefs)


@dataclass
class FakeItem:
    nodeid: str
    fixtures: dict[str, str]  # name -> scope
    marks: list[Any] = field(default_factory=list)

    @property
    def _fixtureinfo(self) -> FakeInfo:
        outside = {"tmp_path_factory": FakeDef("session", pytest.TempPathFactory.mktemp)}
        return FakeInfo({n: (outside.get(n) or FakeDef(s),) for n, s in self.fixtures.items()})

    def get_closest_marker(self, name: str) -> Any:
        return next((m for m in self.marks if m.name == name), None)

    def add_marker(self, mark: Any) -> None:
        self.marks.append(mark.mark)

    def group(self) -> str | None:
        mark = self.get_closest_marker("xdist_group")
        return mark.args[0] if mark else None


def _grouped(items: list[FakeItem]) -> list[str | None]:
    conftest.group_shared(items)  # type: ignore[arg-type]
    return [item.group() for item in items]


def test_tests_sharing_a_wide_fixture_share_a_group_and_others_stay_free():
    items = [
        FakeItem("tests/a.py::one", {"run": "module", "tmp_path": "function"}),
        FakeItem("tests/a.py::two", {"run": "module"}),
        FakeItem("tests/a.py::alone", {"tmp_path": "function"}),
        FakeItem("tests/b.py::one", {"run": "module"}),  # b builds its own `run`: a group of its own
        FakeItem("tests/c.py::one", {"plate": "session"}),
        FakeItem("tests/d.py::one", {"plate": "session", "fits": "module"}),
        FakeItem("tests/d.py::two", {"fits": "module"}),  # linked to c through d::one
        FakeItem("tests/e.py::one", {"tmp_path_factory": "session"}),  # pytest's own fixture: no link
    ]
    a1, a2, alone, b1, c1, d1, d2, e1 = _grouped(items)
    assert a1 is not None and a1 == a2 and alone is None and e1 is None
    assert b1 is not None and b1 != a1
    assert c1 is not None and c1 == d1 == d2 and c1 not in (a1, b1)


def test_modules_with_a_shared_cache_are_one_group_and_a_given_group_is_kept():
    cached = conftest.SHARED_CACHE_MODULES[0]
    assert (Path(conftest.__file__).parents[1] / cached).is_file()
    given = FakeItem("tests/f.py::one", {"run": "module"}, [pytest.mark.xdist_group("mine").mark])
    first, second, kept = _grouped([FakeItem(f"{cached}::one[x]", {}), FakeItem(f"{cached}::two[y]", {}), given])
    assert first is not None and first == second and kept == "mine"



PROBE = """
import os
from pathlib import Path
import pytest

@pytest.mark.xdist_group("together")
@pytest.mark.parametrize("i", range(6))
def test_grouped(i):
    Path(os.environ["PROBE_OUT"], f"{i}.txt").write_text(os.environ["PYTEST_XDIST_WORKER"])

@pytest.mark.parametrize("i", range(6))
def test_free(i):
    pass
"""

PROBE_CONFTEST = """
import pytest

@pytest.hookimpl(wrapper=True)
def pytest_collection_modifyitems(config, items):
    result = yield
    if getattr(config.option, "loadgroup", False):
        suffix_groups(items)
    return result

"""


def test_a_group_runs_on_one_worker(pytester: pytest.Pytester, monkeypatch: pytest.MonkeyPatch):
    """End to end with pytest-xdist: the six grouped tests of a probe suite all run on one worker.

    Before ``conftest.suffix_groups`` they did not (pytest 9 with pytest-xdist 3.8 ignored the marks)."""
    pytester.makeconftest(PROBE_CONFTEST + inspect.getsource(conftest.suffix_groups))
    pytester.makepyfile(test_probe=PROBE)
    out = pytester.mkdir("out")
    monkeypatch.setenv("PROBE_OUT", str(out))
    result = pytester.runpytest_subprocess("-n", "2", "--dist=loadgroup", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=12)
    workers = {f.read_text() for f in out.glob("*.txt")}
    assert len(list(out.glob("*.txt"))) == 6 and len(workers) == 1, workers
