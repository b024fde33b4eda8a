"""``vzero rerun``: reprocess the raw bytes kept in an old audit file with a new (or the stored) recipe.

The original data files are not needed: the recipe names its inputs by the names stored in the old file
(``vzero inspect OLD.h5`` lists them). The new audit file records where it came from (``derived_from``:
path, run_id and recipe sha256 of the old file).

An audit file may come from anywhere, and whoever made it controls its stored recipe (hashes can be
recomputed). Rerunning the *stored* recipe therefore never imports code on the file's word: every plugin
the stored recipe names must be handed over by the user with ``--plugin FILE`` (or ``--plugin MODULE``),
matched to the recipe's entry by file name (or module name). A plugin file whose sha256 differs from the one
the old run recorded, or that the old file recorded no sha256 for, is refused unless the user says
``--allow-changed-plugins`` (the new run then records which plugins changed). Nothing is looked up beside
the audit file or at the path the stored recipe names. The stored recipe must also match its stored sha256.

A recipe of the user's own (``--recipe NEW.yaml``) loads the plugins it names as ``vzero run`` does, since
the user chose it; a local plugin file that the old run also used must still match its recorded sha256.
"""

from __future__ import annotations

import fnmatch
import hashlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
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


def is_file_entry(entry: str) -> bool:
    """Whether a plugin entry names a Python file (a path) rather than an importable module."""
    return entry.endswith(".py") or "/" in entry or "\\" in entry


def _file_name(entry: str) -> str:
    return PurePosixPath(entry.replace("\\", "/")).name


def _recorded(stored: Mapping[str, Any]) -> dict[str, str]:
    """The sha256 the old run recorded for each local plugin file, by the path the recipe gave."""
    return {str(v.get("path")): str(v.get("sha256", "")) for v in stored.values()
            if isinstance(v, dict) and v.get("path")}


def check_plugins(entries: list[str], base_dir: Path, stored: Mapping[str, Any], allow_changed: bool) -> list[str]:
    """Compare the local plugin files a (new, user-given) recipe names with those the old run used.

    Returns the plugin entries whose content changed (only when ``allow_changed``); raises
    :class:`PluginError` for a missing file, or a changed one without ``allow_changed``. Files the old run
    did not use are not compared (the user's recipe names them).
    """
    from vzero.errors import PluginError

    by_path = _recorded(stored)
    changed: list[str] = []
    for entry in entries:
        if entry not in by_path:
            continue
        path = Path(entry) if Path(entry).is_absolute() else base_dir / entry
        if not path.is_file():
            raise PluginError(
                f"the recipe names the local plugin {entry!r}, which the old run used, but it is not at {path}",
                hint="Put the plugin file there; its code is not stored in the audit file.",
            )
        if _compare(entry, path, by_path[entry], allow_changed):
            changed.append(entry)
    return changed


def _compare(entry: str, path: Path, want: str, allow_changed: bool) -> bool:
    """Whether the file at ``path`` differs from the recorded sha256 ``want`` (raises unless allowed)."""
    from vzero.errors import PluginError

    try:
        digest = hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError as exc:
        raise PluginError(f"plugin file {str(path)!r} cannot be read: {exc.strerror}") from None
    if digest == want:
        return False
    if not allow_changed:
        recorded = f"the audit file recorded {want[:12]}..." if want else "the audit file records no sha256 for it"
        raise PluginError(
            f"plugin file {str(path)!r} for the recipe's {entry!r} differs from the old run's "
            f"(sha256 {digest[:12]}..., {recorded})",
            hint="Pass the version the old run used, or add --allow-changed-plugins to run this code anyway "
                 "(the new audit file records the change).",
        )
    return True


def match_given_plugins(
    entries: Sequence[str], given: Sequence[str], stored: Mapping[str, Any], allow_changed: bool, old: str
) -> tuple[list[str], list[str]]:
    """Pair each plugin the stored recipe names with one the user passed (``--plugin``).

    A file entry is paired with a given file of the same name and checked against the recorded sha256; a
    module entry with the same module name. Returns the plugin entries to load (given files as absolute
    paths, in the stored recipe's order) and the stored entries whose file changed. Raises
    :class:`PluginError` for an entry without a given plugin, a given plugin the recipe does not name, or a
    changed file without ``allow_changed``.
    """
    from vzero.errors import PluginError

    files = {Path(g).name: g for g in given if is_file_entry(g) or Path(g).is_file()}
    modules = {g for g in given if g not in files.values()}
    wanted = {_file_name(e) if is_file_entry(e) else e for e in entries}
    extra = [g for g in given if (Path(g).name if g in files.values() else g) not in wanted]
    if extra:
        raise PluginError(f"--plugin {', '.join(extra)}: the stored recipe names no such plugin "
                          f"(it names: {', '.join(entries) or 'none'})",
                          hint="Pass only the plugins the stored recipe uses (vzero inspect shows them).")
    recorded = _recorded(stored)
    by_name = {_file_name(path): sha for path, sha in recorded.items()}  # a rerun recorded the path it was given
    load: list[str] = []
    changed: list[str] = []
    missing: list[str] = []
    for entry in entries:
        if not is_file_entry(entry):
            if entry in modules:
                load.append(entry)
            else:
                missing.append(entry)
            continue
        given_as = files.get(_file_name(entry))
        if given_as is None:
            missing.append(entry)
            continue
        path = Path(given_as)
        if not path.is_file():
            raise PluginError(f"--plugin {given_as!r}: no such file")
        if _compare(entry, path, recorded.get(entry) or by_name.get(_file_name(entry), ""), allow_changed):
            changed.append(entry)
        load.append(str(path.resolve()))
    if missing:
        raise PluginError(
            f"the recipe stored in {old} uses plugins ({', '.join(missing)}) whose code is not in the audit "
            "file; vzero does not import code an audit file names",
            hint="Check the plugin code, then pass each one on the command line: "
                 + " ".join(f"--plugin {_file_name(m) if is_file_entry(m) else m}" for m in missing)
                 + " (files are checked against the sha256 the old run recorded). Or give a recipe of your "
                   "own with --recipe.",
        )
    return load, changed


def rerun(
    old: str | Path,
    out: str | Path,
    *,
    recipe: str | Path | None = None,
    fragments: Sequence[str | Path] = (),
    plugins: Sequence[str] = (),
    allow_changed_plugins: bool = False,
    force: bool = False,
) -> Any:
    """Rerun the inputs stored in ``old`` with ``recipe`` (default: the stored recipe); returns a RunResult.

    ``plugins`` are the plugin files (or module names) the user hands over for the stored recipe's
    ``plugins`` entries (see the module docstring); with a recipe of the user's own they are refused (name
    them in that recipe). ``fragments`` are recipe fragments merged into ``recipe`` (as if its ``include:``
    named them; see :mod:`vzero.includes`).
    """
    from vzero.audit import reader
    from vzero.errors import AuditFileError, PluginError, RecipeError
    from vzero.recipe import load, parse
    from vzero.run.runner import run

    with reader.open_audit(old) as f:
        head = reader.header(f)
        previous = reader.read_step_settings(f)
    source = StoredInputs.from_audit(old)
    stored_plugins = head.get("plugins") or {}
    if recipe is None and fragments:
        raise RecipeError("a fragment was given without a recipe to merge it into",
                          hint="Give the recipe first: --recipe recipe.yaml --recipe fragment.yaml.")
    if recipe is None:
        text = str(head["recipe_text"])
        if hashlib.sha256(text.encode("utf-8")).hexdigest() != str(head.get("recipe_sha256", "")):
            raise AuditFileError(f"{old}: the stored recipe does not match its stored sha256 (damaged or edited)",
                                 hint="Run vzero verify on it; give a recipe of your own with --recipe.")
        original = Path(head.get("recipe_path") or "recipe.yaml")
        rec = parse(text, str(original))
        rec.previous = previous
        rec.plugin_override, changed = match_given_plugins(
            rec.plugin_entries, plugins, stored_plugins, allow_changed_plugins, str(old))
    else:
        if plugins:
            raise PluginError("--plugin is for the recipe stored in the audit file",
                              hint="Name the plugins in your own recipe's 'plugins' list instead.")
        rec = load(recipe, fragments)
        changed = check_plugins(rec.plugin_entries, rec.base_dir, stored_plugins, allow_changed_plugins)
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
