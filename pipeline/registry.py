"""The registry of stage methods and other named components, with their provenance."""

from __future__ import annotations

import inspect
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from vzero.errors import PluginError
from vzero.params import KINDS, closest
from vzero.schema import KindSchema
from vzero.stage import SCOPES, Stage, sealed_overrides


@dataclass(frozen=True)
class Source:
    """Where a component came from: the plugin name, its module, distribution and version, and for a
    local file its path as written in the recipe and its sha256."""

    plugin: str
    module: str
    distribution: str
    version: str
    path: str = ""
    sha256: str = ""

    def describe(self) -> str:
        where = self.path or self.module
        return f"{self.distribution} {self.version} ({where})"


@dataclass(frozen=True)
class Entry:
    kind: str
    name: str
    component: Any
    source: Source


class Registry:
    """Components by ``(kind, name)``. Plugins call :meth:`add` from their ``vzero_register`` hook."""

    def __init__(self) -> None:
        self._entries: dict[tuple[str, str], Entry] = {}
        self._current: Source | None = None

    def add(self, component: Any) -> None:
        """Register a stage class (kind and method from its attributes) or a component with ``kind`` and
        ``name`` attributes. Raises :class:`PluginError` naming both plugins on a duplicate name."""
        source = self._current or Source("direct", getattr(component, "__module__", "?"), "unknown", "0")
        if inspect.isclass(component) and issubclass(component, Stage):
            kind, name = getattr(component, "kind", None), getattr(component, "method", None)
            check_stage_class(component, source)
        else:
            kind, name = getattr(component, "kind", None), getattr(component, "name", None)
        if not isinstance(kind, str) or not isinstance(name, str) or not kind or not name:
            raise PluginError(f"plugin {source.plugin!r} registered {component!r} without a kind and a name")
        key = (kind, name)
        if key in self._entries:
            other = self._entries[key].source
            raise PluginError(
                f"{kind} method {name!r} is registered twice: by {other.plugin!r} ({other.describe()}) and by "
                f"{source.plugin!r} ({source.describe()}); rename one of them, or remove one plugin"
            )
        self._entries[key] = Entry(kind, name, component, source)

    def get(self, kind: str, name: str) -> Entry:
        """The entry for ``kind``/``name``; :class:`KeyError` with the closest name if absent."""
        try:
            return self._entries[(kind, name)]
        except KeyError:
            names = self.names(kind)
            hit = closest(name, names)
            near = f" (did you mean {hit!r}?)" if hit else ""
            raise KeyError(f"no {kind} method {name!r}{near}; available: {', '.join(names) or 'none'}") from None

    def schema(self, kind: str) -> KindSchema | None:
        """The :class:`KindSchema` a plugin declared for step kind ``kind`` (``None`` if none was)."""
        entry = self._entries.get(("schema", kind))
        return entry.component if entry is not None and isinstance(entry.component, KindSchema) else None

    def check_kinds(self) -> None:
        """Refuse, naming the plugin, a stage method whose kind's schema names a base class it does not derive
        from (called once every plugin has registered, since a kind's schema may come after its methods)."""
        for entry in self:
            schema = self.schema(entry.kind)
            cls = entry.component
            if schema is None or schema.base is None or not inspect.isclass(cls) or not issubclass(cls, Stage):
                continue
            if not issubclass(cls, schema.base):
                base = f"{schema.base.__module__}.{schema.base.__qualname__}"
                raise PluginError(
                    f"plugin {entry.source.plugin!r} ({entry.source.describe()}): {entry.kind} method "
                    f"{entry.name!r} ({cls.__qualname__}) does not derive from {base}, which every {entry.kind} "
                    f"method must (it applies the recipe's rules for that kind); derive from it and implement "
                    f"what its docstring asks for"
                )

    def names(self, kind: str) -> list[str]:
        return sorted(n for k, n in self._entries if k == kind)

    def default(self, kind: str) -> str | None:
        """The method of ``kind`` whose component declares ``default = True`` (None when no single one does)."""
        hits = [n for (k, n), e in self._entries.items()
                if k == kind and getattr(e.component, "default", False) is True]
        return hits[0] if len(hits) == 1 else None

    def kinds(self) -> list[str]:
        return sorted({k for k, _ in self._entries})

    def __iter__(self) -> Iterator[Entry]:
        return iter(sorted(self._entries.values(), key=lambda e: (e.kind, e.name)))

    def __contains__(self, key: tuple[str, str]) -> bool:
        return key in self._entries


def check_stage_class(cls: type[Stage], source: Source) -> None:
    """Refuse a stage class that breaks the contract, naming the plugin."""
    problems = []
    if getattr(cls, "scope", None) not in SCOPES:
        problems.append(f"scope must be one of {SCOPES}")
    for key, param in dict(getattr(cls, "params", {})).items():
        if getattr(param, "kind", None) not in KINDS:
            problems.append(f"parameter {key!r} is not a vzero.params.Param of a known kind")
    if "method" in dict(getattr(cls, "params", {})):
        problems.append("a parameter may not be called 'method' (the recipe uses it to pick the method)")
    sealed = sealed_overrides(cls)
    if sealed:
        problems.append(sealed)
    if problems:
        raise PluginError(f"plugin {source.plugin!r}: stage {cls.__name__}: " + "; ".join(problems))
