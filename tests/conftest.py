"""Shared fixtures: a fresh plugin manager, a synthetic plate with known rates, temporary run folders."""

from __future__ import annotations

from collections.abc import Generator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import settings
from vzero.manager import make_manager

# Property tests: no per-example deadline (the first example pays one-off costs such as building the unit
# registry, and CI machines are shared), and a fixed example budget so the suite's time is predictable.
settings.register_profile("vzero", deadline=None, max_examples=60)
settings.load_profile("vzero")

pytest_plugins = ["pytester"]  # tests/architecture/test_parallel_groups.py runs a probe suite

TESTS = Path(__file__).parent
DATA = TESTS / "data"


@pytest.fixture
def plugins():
    """A fresh plugin manager with only vzero's own plugins (no other installed ones)."""
    return make_manager(autoload=False)


def linear_plate(folder: Path, *, slopes: np.ndarray | None = None, noise: float = 0.0, seed: int = 0) -> Path:
    """Write a 96-well wide CSV, a layout and a recipe with exactly known straight-line slopes (AU/s).

    Row H holds blanks (slope 0 plus a drift shared by all wells); the other wells have slope
    ``slopes[i]`` plus the drift. Returns the recipe path. Substrate rises along columns (µM).
    """
    rng = np.random.default_rng(seed)
    wells = [f"{r}{c}" for r in "ABCDEFGH" for c in range(1, 13)]
    t = np.arange(0.0, 301.0, 15.0)
    if slopes is None:
        slopes = np.linspace(1e-4, 1e-3, 96)
    slopes = np.where(np.array([w.startswith("H") for w in wells]), 0.0, slopes)
    drift = 1e-5 * t
    signal = 0.05 + slopes[:, None] * t[None, :] + drift[None, :] + rng.normal(0, noise, (96, t.size)) * (noise > 0)
    table = pd.DataFrame(signal.T, columns=wells)
    table.insert(0, "time (s)", t)
    folder.mkdir(parents=True, exist_ok=True)
    table.to_csv(folder / "plate.csv", index=False)
    layout = pd.DataFrame(
        {
            "well": wells,
            "role": ["blank" if w.startswith("H") else "sample" for w in wells],
            "substrate (uM)": [10.0 * int(w[1:]) for w in wells],
            "enzyme (nM)": [0.0 if w.startswith("H") else 2.0 for w in wells],
            "group": ["blank" if w.startswith("H") else f"g{w[0]}" for w in wells],
        }
    )
    layout.to_csv(folder / "layout.csv", index=False)
    recipe = folder / "recipe.yaml"
    recipe.write_text(
        "vzero: 1\nname: linear\nplates:\n  - name: p1\n    data: plate.csv\n    layout: layout.csv\n"
        "steps:\n  - import: {method: table}\n  - blank: {method: mean}\n"
        '  - rates: {method: window, start: "0 s", end: "300 s"}\n',
        "utf-8",
    )
    return recipe


@pytest.fixture
def plate_folder(tmp_path: Path) -> Path:
    return linear_plate(tmp_path / "in")


# --- Running the suite in parallel (pytest-xdist, `-n 2` in the README's test command) ---------------------------
# pyproject.toml sets `--dist loadgroup`: tests share a worker only when they carry the same `xdist_group` mark.
# A fixture wider than one test (module or session scope) is built once per worker process, so tests that
# share one are put in one group here, and the expensive result is computed once, as in a serial run.
# Modules whose tests share a cached simulation (functools.cache) rather than a fixture are named by hand.
SHARED_CACHE_MODULES = (
    "tests/plugins/rates/test_se_calibration.py",  # calibration(method, condition) over 2 000 wells
    "tests/plugins/fit/test_interval_coverage.py",  # coverage(case) over 2 000 simulated plates
)


def _shared_fixtures(item: pytest.Item) -> list[str]:
    """Names for the suite's own fixtures of module, package or session scope that ``item`` uses: a module's
    fixture is named with its module's node id (each module builds its own), a session's by itself."""
    info = getattr(item, "_fixtureinfo", None)
    if info is None:
        return []
    keys = []
    for name in info.names_closure:
        for fixturedef in info.name2fixturedefs.get(name, ()):
            if fixturedef.scope == "function" or not _is_ours(fixturedef.func):
                continue
            owner = item.nodeid.split("::")[0] if fixturedef.scope in ("module", "class") else ""
            keys.append(f"{fixturedef.scope}:{owner}:{name}")
    return keys


def _is_ours(func: object) -> bool:
    """True for a fixture defined in the suite's own files (not by pytest or a plugin, like tmp_path_factory)."""
    code = getattr(func, "__code__", None)
    return code is not None and Path(code.co_filename).resolve().is_relative_to(TESTS.resolve())


@pytest.hookimpl(wrapper=True)  # a wrapper runs before every plain implementation, so before xdist reads the marks
def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> Generator[None, None, None]:
    """Give every set of tests linked by a shared fixture or cache one ``xdist_group`` (union of linked sets);
    after the other implementations (pytest-xdist's among them), :func:`suffix_groups` on a worker."""
    group_shared(items)
    result = yield
    if getattr(config.option, "loadgroup", False):  # set on xdist workers under `--dist loadgroup`
        suffix_groups(items)
    return result


def suffix_groups(items: list[pytest.Item]) -> None:
    """Make each grouped test's node id end in ``@<group>``, the suffix xdist's scheduler groups by.

    pytest-xdist 3.8 writes the suffix to ``item._nodeid``, which pytest 9 no longer reads (the id lives in
    ``item._id``), so the marks were ignored and a module fixture was built on both workers. Where xdist's
    own renaming took effect (the id already ends in the suffix, as with pytest 8) nothing changes.
    """
    try:
        from _pytest.nodeid import NodeId  # pytest >= 9
    except ImportError:  # pragma: no cover - older pytest: xdist's own renaming works
        return
    for item in items:
        names = sorted({str(m.args[0] if m.args else m.kwargs.get("name", "default"))
                        for m in item.iter_markers("xdist_group")})
        suffix = "@" + "_".join(names)
        nid = getattr(item, "_id", None)
        if names and isinstance(nid, NodeId) and nid.names and not item.nodeid.endswith(suffix):
            # the suffix joins the last name (with any parameters), so the id's string stays the same however
            # pytest rebuilds it from its parts
            last = nid.names[-1] + ("" if nid.params is None else f"[{nid.params}]") + suffix
            item._id = NodeId(path=nid.path, names=(*nid.names[:-1], last))


def group_shared(items: list[pytest.Item]) -> None:
    """Add the ``xdist_group`` marks (see :func:`pytest_collection_modifyitems`)."""
    parent: dict[str, str] = {}

    def find(key: str) -> str:
        while parent.setdefault(key, key) != key:
            parent[key] = parent[parent[key]]
            key = parent[key]
        return key

    links: dict[int, list[str]] = {}
    for i, item in enumerate(items):
        if item.get_closest_marker("xdist_group"):
            continue
        module = item.nodeid.split("::")[0]
        keys = _shared_fixtures(item) + ([f"cache:{module}"] if module in SHARED_CACHE_MODULES else [])
        if keys:
            links[i] = keys
            for key in keys[1:]:
                parent[find(key)] = find(keys[0])
    for i, keys in links.items():
        items[i].add_marker(pytest.mark.xdist_group(find(keys[0])))
