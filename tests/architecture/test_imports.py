"""The package's import graph: no cycles (function-level imports included) and a core that never imports
the built-in plugins.

The graph is read from the source with :mod:`ast`, so an import inside a function counts as much as one at the
top of a module. Imports under ``if TYPE_CHECKING:`` never run: they count for the rule about the core and
the plugins, not for cycles (annotations may name a type from a module that imports this one).
``from a import b`` counts as an import of ``a.b`` when ``a.b`` is a module of ours and of ``a`` otherwise,
as import-graph tools usually read it.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PACKAGES = {"vzero": ROOT / "pipeline", "vzero.plugins": ROOT / "plugins"}


def modules() -> dict[str, Path]:
    found: dict[str, Path] = {}
    for prefix, folder in PACKAGES.items():
        for path in folder.rglob("*.py"):
            parts = list(path.relative_to(folder).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            found[".".join([prefix, *parts])] = path
    return found


def _type_only(tree: ast.Module) -> set[int]:
    """ids of the nodes inside ``if TYPE_CHECKING:`` blocks (imports for annotations only)."""
    inside: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and ast.unparse(node.test) in ("TYPE_CHECKING", "typing.TYPE_CHECKING"):
            inside.update(id(n) for stmt in node.body for n in ast.walk(stmt))
    return inside


def import_graph(*, runtime_only: bool = False) -> dict[str, set[str]]:
    """Module -> the modules of ours it imports; ``runtime_only`` leaves out imports for annotations only."""
    mods = modules()

    def ours(name: str) -> str | None:
        while name and name not in mods:
            name = name.rpartition(".")[0]
        return name or None

    graph: dict[str, set[str]] = {}
    for name, path in mods.items():
        package = name if path.name == "__init__.py" else name.rpartition(".")[0]
        deps: set[str] = set()
        tree = ast.parse(path.read_text(encoding="utf-8"))
        skip = _type_only(tree) if runtime_only else set()
        for node in ast.walk(tree):
            if id(node) in skip:
                continue
            if isinstance(node, ast.Import):
                deps.update(filter(None, (ours(a.name) for a in node.names)))
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base = package.split(".")[: len(package.split(".")) - node.level + 1]
                    source = ".".join(base + ([node.module] if node.module else []))
                else:
                    source = node.module or ""
                for alias in node.names:
                    target = f"{source}.{alias.name}"
                    deps.add(target if target in mods else ours(source) or "")
        graph[name] = {d for d in deps if d and d != name}
    return graph


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm, iterative)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []
    counter = 0
    for start in sorted(graph):
        if start in index:
            continue
        work = [(start, iter(sorted(graph[start])))]
        index[start] = low[start] = counter
        counter += 1
        stack.append(start)
        on_stack.add(start)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is not None:
                if child not in index:
                    index[child] = low[child] = counter
                    counter += 1
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(graph.get(child, ())))))
                elif child in on_stack:
                    low[node] = min(low[node], index[child])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                component = []
                while True:
                    member = stack.pop()
                    on_stack.discard(member)
                    component.append(member)
                    if member == node:
                        break
                if len(component) > 1:
                    found.append(sorted(component))
    return found


def test_the_cycle_finder_finds_a_planted_cycle() -> None:
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert cycles(graph) == [["a", "b", "c"]]


def test_no_import_cycles() -> None:
    assert cycles(import_graph(runtime_only=True)) == []


def test_imports_for_annotations_are_told_apart() -> None:
    tree = ast.parse("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    import a\nimport b\n")
    skipped = [n for n in ast.walk(tree) if id(n) in _type_only(tree) and isinstance(n, ast.Import)]
    assert [a.name for n in skipped for a in n.names] == ["a"]


def test_the_core_never_imports_the_built_in_plugins() -> None:
    bad = sorted((a, b) for a, deps in import_graph().items() if not a.startswith("vzero.plugins")
                 for b in deps if b.startswith("vzero.plugins"))
    assert bad == []
