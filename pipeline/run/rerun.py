"""``vzero rerun``: reprocess the raw bytes kept in an old audit file with a new (or the stored) recipe.

The original data files are not needed: the recipe names its inputs by the names stored in the old file
(``vzero inspect OLD.h5`` lists them). The new audit file records where it came from (``derived_from``:
path, run_id and recipe sha256 of the old file). A recipe that names a local plugin file which the old run
also used is refused when the file is missing or its sha256 differs from the one stored, unless the user
says ``--allow-changed-plugins`` (the new run then records which plugins changed).

Rerunning the *stored* recipe never imports a module on the file's word alone: an audit file may come from
anywhere, and a plugin module (which has no stored hash to compare) runs code on this machine. When the
stored recipe names plugin modules, the user must pass ``--allow-stored-plugins`` after checking them (or
give a recipe of their own); local plugin files follow the hash rule above. The stored recipe must also match
its stored sha256.
"""

from __future__ import annotations

import fnmatch
import hashlib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


@dataclass
class StoredInputs:
    """An :class:`vzero.run.runner.InputSource` over the raw inputs of an audit file, by their stored names."""

    files: dict[str, bytes] = field(default_factory=dict)
    origin: str = ""

    @classmethod
    def from_audit(cls, path: str | Path) -> StoredInputs:
        from vzero.audit import reader

        with reader.open_audit(path) as f:
            stored = reader.read_inputs(f)
        files = {}
        for s in stored:
            for name in (s.name, *s.names):  # identical files kept once, under every name they had
                files[name] = s.data
        return cls(files, str(path))

    def exists(self, rel: str) -> bool:
        return rel in self.files

    def read(self, rel: str) -> bytes:
        from vzero.errors import InputFileError

        if rel not in self.files:
            raise InputFileError(f"no input of that name is stored in {self.origin}", path=rel,
                                 hint=f"Stored inputs: {', '.join(self.files)}.")
        return self.files[rel]

    def expand(self, pattern: str) -> list[str]:
        return sorted(n for n in self.files if fnmatch.fnmatchcase(n, pattern))


def check_plugins(entries: list[str], base_dir: Path, stored: Mapping[str, Any], allow_changed: bool) -> list[str]:
    """Compare the local plugin files a recipe names with those the old run used (root attr ``plugins``).

    Returns the plugin paths whose content changed (only when ``allow_changed``); raises
    :class:`PluginError` for a missing file, or a changed one without ``allow_changed``.
    """
    from vzero.errors import PluginError

    by_path = {str(v.get("path")): v for v in stored.values() if isinstance(v, dict) and v.get("path")}
    changed: list[str] = []
    for entry in entries:
        if entry not in by_path:
            continue  # a plugin the old run did not use: nothing to compare against
        path = Path(entry) if Path(entry).is_absolute() else base_dir / entry
        if not path.is_file():
            raise PluginError(
                f"the recipe names the local plugin {entry!r}, which the old run used, but it is not at {path}",
                hint="Put the plugin file there (or pass --plugin-dir DIR where it is); its code is not stored "
                     "in the audit file.",
            )
        digest = hashlib.sha256(path.read_bytes()).hexdigest()
        want = str(by_path[entry].get("sha256", ""))
        if digest != want:
            if not allow_changed:
                raise PluginError(
                    f"local plugin {entry!r} has changed since the old run (sha256 {digest[:12]}..., the audit "
                    f"file recorded {want[:12]}...)",
                    hint="Restore the old version, or pass --allow-changed-plugins to run the new code anyway "
                         "(the new audit file records the change).",
                )
            changed.append(entry)
    return changed


def rerun(
    old: str | Path,
    out: str | Path,
    *,
    recipe: str | Path | None = None,
    plugin_dir: str | Path | None = None,
    allow_changed_plugins: bool = False,
    allow_stored_plugins: bool = False,
    force: bool = False,
) -> Any:
    """Rerun the inputs stored in ``old`` with ``recipe`` (default: the stored recipe); returns a RunResult.

    ``plugin_dir`` is where local plugin files named by the stored recipe are looked for (default: the
    folder of the original recipe, as recorded); for a new recipe they are relative to that recipe.
    """
    from vzero.audit import reader
    from vzero.errors import AuditFileError, PluginError, RecipeError
    from vzero.recipe import load, parse
    from vzero.run.runner import run

    with reader.open_audit(old) as f:
        head = reader.header(f)
    source = StoredInputs.from_audit(old)
    if recipe is None:
        text = str(head["recipe_text"])
        if hashlib.sha256(text.encode("utf-8")).hexdigest() != str(head.get("recipe_sha256", "")):
            raise AuditFileError(f"{old}: the stored recipe does not match its stored sha256 (damaged or edited)",
                                 hint="Run vzero verify on it; give a recipe of your own with --recipe.")
        original = Path(head.get("recipe_path") or "recipe.yaml")
        base = Path(plugin_dir) if plugin_dir else original.parent
        rec = parse(text, str(base / (original.name or "recipe.yaml")))
        modules = [e for e in rec.plugin_entries if not (e.endswith(".py") or "/" in e)]
        if modules and not allow_stored_plugins:
            raise PluginError(
                f"the recipe stored in {old} imports plugin modules ({', '.join(modules)}); rerunning it would run "
                "their code on this machine",
                hint="Check those plugins, then pass --allow-stored-plugins, or give a recipe of your own with "
                     "--recipe.",
            )
    else:
        rec = load(recipe)
        if plugin_dir:
            rec.path = str(Path(plugin_dir) / Path(rec.path).name)
    changed = check_plugins(rec.plugin_entries, rec.base_dir, head.get("plugins") or {}, allow_changed_plugins)
    derived = {
        "path": str(Path(old).resolve()),
        "run_id": head.get("run_id", ""),
        "recipe_sha256": head.get("recipe_sha256", ""),
        "same_recipe": recipe is None,
        "changed_plugins": changed,
    }
    try:
        return run(rec, out, force=force, inputs=source, derived_from=derived)
    except RecipeError as exc:
        if any("not found" in p for p in exc.problems):
            raise RecipeError(exc.problems, hint=f"A rerun reads only the inputs stored in {old}: "
                              f"{', '.join(source.files)}. Refer to them by these names.") from None
        raise
