"""The plugin contract: entry points (the road built-ins take), recipe-named files, errors naming plugins."""

from __future__ import annotations

import sys
import textwrap
from pathlib import Path

import pytest
from vzero import hookspecs
from vzero.errors import PluginError
from vzero.manager import make_manager
from vzero.stage import Stage

DATA = Path(__file__).parents[1] / "data"


def test_builtins_arrive_through_entry_points(plugins):
    names = {(e.kind, e.name): e.source for e in plugins.registry}
    assert ("rates", "window") in names
    source = names[("rates", "window")]
    assert source.distribution == "vzero" and source.plugin.startswith("vzero:")


def test_every_hook_is_documented_with_an_example():
    specs = [getattr(hookspecs, n) for n in dir(hookspecs) if n.startswith("vzero_")]
    assert len(specs) >= 5
    for spec in specs:
        assert spec.__doc__ and "Example::" in spec.__doc__, spec.__name__


def test_recipe_named_file_adds_a_method():
    p = make_manager(["plugins/lab_rates.py"], base_dir=DATA, autoload=False)
    entry = p.registry.get("rates", "first-reads")
    assert entry.source.distribution == "local file"
    assert entry.source.version == "0.3" and len(entry.source.sha256) == 64


def test_installed_package_entry_point_is_loaded(tmp_path, monkeypatch):
    """A third-party distribution declaring a vzero.plugins entry point is found like the built-ins."""
    pkg = tmp_path / "labkinetics_extra"
    pkg.mkdir()
    (pkg / "__init__.py").write_text(
        (DATA / "plugins" / "lab_rates.py").read_text("utf-8").replace('"first-reads"', '"first-reads-pkg"'), "utf-8"
    )
    dist = tmp_path / "labkinetics_extra-1.2.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: labkinetics-extra\nVersion: 1.2\n", "utf-8")
    (dist / "entry_points.txt").write_text("[vzero.plugins]\nextra = labkinetics_extra\n", "utf-8")
    monkeypatch.syspath_prepend(str(tmp_path))
    try:
        p = make_manager(autoload=True)
        entry = p.registry.get("rates", "first-reads-pkg")
        assert entry.source.distribution == "labkinetics-extra" and entry.source.version == "1.2"
        # switched off, only vzero's own plugins load
        assert ("rates", "first-reads-pkg") not in make_manager(autoload=False).registry
    finally:
        sys.modules.pop("labkinetics_extra", None)


def test_broken_plugin_file_is_named(tmp_path):
    (tmp_path / "broken.py").write_text("import no_such_module_here\n", "utf-8")
    with pytest.raises(PluginError, match=r"plugin file 'broken.py' failed to import: ModuleNotFoundError"):
        make_manager(["broken.py"], base_dir=tmp_path, autoload=False)


def test_duplicate_method_names_both_sources(tmp_path):
    (tmp_path / "dupe.py").write_text(
        textwrap.dedent(
            """
            from vzero import hookimpl
            from vzero.stage import Stage

            class Dupe(Stage):
                kind, method = "rates", "window"

            @hookimpl
            def vzero_register(registry):
                registry.add(Dupe)
            """
        ),
        "utf-8",
    )
    with pytest.raises(PluginError, match=r"rates method 'window' is registered twice: by 'vzero:builtin_rates'"):
        make_manager(["dupe.py"], base_dir=tmp_path, autoload=False)


def test_unknown_hook_is_refused(tmp_path):
    (tmp_path / "typo.py").write_text(
        "from vzero import hookimpl\n\n@hookimpl\ndef vzero_registr(registry):\n    pass\n", "utf-8"
    )
    with pytest.raises(PluginError, match="does not define"):
        make_manager(["typo.py"], base_dir=tmp_path, autoload=False)


def test_module_hooks_of_every_kind_pluggy_accepts_are_found(tmp_path):
    """The manager passes over module names that are not functions; a hook under another name (pluggy's
    ``specname``) or bound to an object must still be found."""
    (tmp_path / "kinds.py").write_text(
        "from vzero import hookimpl\n"
        "seen = []\n"
        "@hookimpl(specname='vzero_register')\n"
        "def register_under_another_name(registry):\n    seen.append('specname')\n"
        "class Holder:\n"
        "    @hookimpl\n"
        "    def vzero_after_step(self, event):\n        seen.append('bound')\n"
        "vzero_after_step = Holder().vzero_after_step\n",
        "utf-8",
    )
    p = make_manager(["kinds.py"], base_dir=tmp_path, autoload=False)
    names = {impl.plugin_name for impl in p.hook.vzero_register.get_hookimpls()}
    assert any("kinds" in n for n in names)
    assert [impl.function.__name__ for impl in p.hook.vzero_after_step.get_hookimpls()] == ["vzero_after_step"]


def test_bad_stage_declaration_is_refused():
    class BadScope(Stage):
        kind, method, scope = "rates", "bad", "everywhere"

    class Plugin:
        from vzero import hookimpl

        @staticmethod
        @hookimpl
        def vzero_register(registry):
            registry.add(BadScope)

    with pytest.raises(PluginError, match=r"plugin 'bad': stage BadScope: scope must be one of"):
        make_manager(extra=[("bad", Plugin)], autoload=False)
