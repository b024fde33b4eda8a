"""Building the plugin manager: built-ins and installed plugins by entry point, then recipe-named files.

Set the environment variable ``VZERO_NO_AUTOLOAD=1`` to load only vzero's own built-in plugins from the
entry-point group (useful when an unrelated installed plugin is broken, and in tests).
"""

from __future__ import annotations

import hashlib
import importlib
import importlib.util
import os
import sys
import types
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path
from typing import Any

import pluggy
from vzero import hookspecs
from vzero.errors import PluginError, VzeroError
from vzero.meta import PROJECT, __version__
from vzero.registry import Registry, Source

ENTRY_POINT_GROUP = "vzero.plugins"
AUTOLOAD_ENV = "VZERO_NO_AUTOLOAD"


@dataclass
class Plugins:
    """The plugin manager, the registry it filled, and the sources of every plugin loaded."""

    manager: pluggy.PluginManager
    registry: Registry
    sources: dict[str, Source] = field(default_factory=dict)

    @property
    def hook(self) -> Any:
        return self.manager.hook


def make_manager(
    local: Sequence[str] = (),
    *,
    base_dir: Path | None = None,
    extra: Iterable[tuple[str, object]] = (),
    autoload: bool | None = None,
) -> Plugins:
    """Build a fresh plugin manager and registry (nothing global; each call is independent).

    ``local`` are recipe entries: a path to a ``.py`` file (relative to ``base_dir``) or a dotted module
    name. ``extra`` are ``(name, plugin_object)`` pairs registered after them (for tests). Every plugin's
    ``vzero_register`` is called with the registry; a failure names the plugin.
    """
    pm = _Manager(PROJECT)
    pm.add_hookspecs(hookspecs)
    sources: dict[str, Source] = {}
    if autoload is None:
        autoload = os.environ.get(AUTOLOAD_ENV, "") in ("", "0")

    for ep, dist, version in _entry_points():
        if not autoload and _normal(dist) != PROJECT:
            continue
        name = f"{dist}:{ep.name}"
        try:
            module = ep.load()
        except Exception as exc:
            raise PluginError(
                f"plugin {name!r} (entry point {ep.value!r} of distribution {dist!r}) failed to import: "
                f"{type(exc).__name__}: {exc}",
                hint=f"Fix or uninstall that package, or set {AUTOLOAD_ENV}=1 to load only vzero's own plugins.",
            ) from exc
        _register(pm, sources, name, module, Source(name, ep.value, dist, version))

    for entry in local:
        module, source = _load_local(entry, base_dir)
        _register(pm, sources, source.plugin, module, source)

    for name, obj in extra:
        _register(pm, sources, name, obj, Source(name, getattr(obj, "__name__", repr(obj)), "direct", "0"))

    try:
        pm.check_pending()
    except pluggy.PluginValidationError as exc:
        raise PluginError(f"a plugin implements a hook that vzero does not define: {exc}") from exc

    registry = Registry()
    for impl in pm.hook.vzero_register.get_hookimpls():
        source = sources[impl.plugin_name]
        registry._current = source
        try:
            impl.function(registry=registry)
        except VzeroError:
            raise
        except Exception as exc:
            raise PluginError(
                f"plugin {source.plugin!r} failed while registering: {type(exc).__name__}: {exc}"
            ) from exc
        finally:
            registry._current = None
    registry.check_kinds()
    return Plugins(pm, registry, sources)


class _Manager(pluggy.PluginManager):
    """pluggy's manager, quicker at registering a module: pluggy looks up every name a plugin module holds
    (its imports too) through ``inspect``, a cost paid for every run (figures in bench/COSTS.md). A module's hook
    implementations are functions (or bound methods) in its namespace, the only kinds pluggy itself accepts
    there, so other names are passed over here first; the rest still go through pluggy's own check."""

    def parse_hookimpl_opts(self, plugin: Any, name: str) -> Any:
        if isinstance(plugin, types.ModuleType) and not isinstance(vars(plugin).get(name), _HOOKABLE):
            return None
        return super().parse_hookimpl_opts(plugin, name)


_HOOKABLE = (types.FunctionType, types.MethodType, classmethod, staticmethod)


def _register(pm: pluggy.PluginManager, sources: dict[str, Source], name: str, obj: object, source: Source) -> None:
    if name in sources or pm.is_registered(obj):
        return  # the same plugin reached by two roads (entry point and recipe) is loaded once
    try:
        pm.register(obj, name=name)
    except (ValueError, pluggy.PluginValidationError) as exc:
        raise PluginError(f"plugin {name!r} could not be registered: {exc}") from exc
    sources[name] = source


def _entry_points() -> list[tuple[metadata.EntryPoint, str, str]]:
    """Entry points of the group with their distribution's name and version, sorted, each (distribution,
    name) once.

    Scanning the installed distributions is a noticeable share of a small run, so the
    answer is kept for as long as ``sys.path`` and the modification times of its folders stay the same
    (installing or removing a distribution changes the folder holding its metadata). An entry-point file
    rewritten in place, as an old-style editable install may do, is seen by the next process, not this one."""
    key = _path_state()
    cached = _ENTRY_POINT_CACHE.get(key)
    if cached is None:
        _ENTRY_POINT_CACHE.clear()
        cached = _ENTRY_POINT_CACHE[key] = _scan_entry_points()
    return list(cached)


_ENTRY_POINT_CACHE: dict[tuple[tuple[str, int], ...], list[tuple[metadata.EntryPoint, str, str]]] = {}


def _path_state() -> tuple[tuple[str, int], ...]:
    """``sys.path`` with each folder's modification time (ns; -1 where it cannot be read)."""
    state = []
    for entry in sys.path:
        try:
            mtime = os.stat(entry or ".").st_mtime_ns
        except OSError:
            mtime = -1
        state.append((entry, mtime))
    return tuple(state)


def _scan_entry_points() -> list[tuple[metadata.EntryPoint, str, str]]:
    """Read the entry points of the group from the installed distributions' metadata (each distribution's
    metadata parsed once)."""
    about: dict[int, tuple[str, str]] = {}
    found = []
    for ep in metadata.entry_points(group=ENTRY_POINT_GROUP):
        if ep.dist is None:
            dist, version = "unknown", "0"
        else:
            if id(ep.dist) not in about:
                meta = ep.dist.metadata
                about[id(ep.dist)] = (str(meta["Name"]), str(meta["Version"]))
            dist, version = about[id(ep.dist)]
        found.append((ep, dist, version))
    seen: set[tuple[str, str]] = set()
    out = []
    for ep, dist, version in sorted(found, key=lambda f: (f[1], f[0].name)):
        if (dist, ep.name) not in seen:  # a distribution seen twice on sys.path (editable installs) loads once
            seen.add((dist, ep.name))
            out.append((ep, dist, version))
    return out


def _normal(name: str) -> str:
    return name.lower().replace("_", "-")


def _load_local(entry: str, base_dir: Path | None) -> tuple[object, Source]:
    """Import a recipe-named plugin: a ``.py`` file (path relative to the recipe) or a module name."""
    if entry.endswith(".py") or "/" in entry or os.sep in entry:
        path = Path(entry)
        if not path.is_absolute() and base_dir is not None:
            path = base_dir / path
        if not path.is_file():
            raise PluginError(
                f"plugin file {entry!r} named in the recipe was not found (looked at {path})",
                hint="Paths are relative to the recipe file.",
            )
        data = path.read_bytes()
        digest = hashlib.sha256(data).hexdigest()
        mod_name = f"vzero_local_{path.stem}_{digest[:12]}"
        if mod_name in sys.modules:
            module = sys.modules[mod_name]
        else:
            spec = importlib.util.spec_from_file_location(mod_name, path)
            if spec is None or spec.loader is None:
                raise PluginError(f"plugin file {entry!r} cannot be imported as Python")
            module = importlib.util.module_from_spec(spec)
            sys.modules[mod_name] = module
            try:
                spec.loader.exec_module(module)
            except Exception as exc:
                del sys.modules[mod_name]
                raise PluginError(f"plugin file {entry!r} failed to import: {type(exc).__name__}: {exc}") from exc
        version = str(getattr(module, "__version__", "0"))
        return module, Source(f"file:{entry}", mod_name, "local file", version, path=entry, sha256=digest)
    try:
        module = importlib.import_module(entry)
    except Exception as exc:
        raise PluginError(
            f"plugin module {entry!r} named in the recipe failed to import: {type(exc).__name__}: {exc}"
        ) from exc
    version = str(getattr(module, "__version__", "0"))
    return module, Source(f"module:{entry}", entry, "module", version)


def core_version() -> str:
    return __version__
