"""Recipes: YAML read with the safe loader (what ``yaml.safe_load`` uses), validated in full before any work starts.

A recipe looks like this (the worked example is ``configs/demo.yaml``)::

    vzero: 1                      # recipe format version
    name: demo
    plugins: [my_rates.py]        # optional: local plugin files or modules
    plates:
      - name: plate-1
        data: plate1.csv          # paths are relative to the recipe file
        layout: layout.csv
    steps:                        # run in this order; each step is {kind: {method: ..., params...}}
      - import: {method: table}
      - rates: {method: window, start: "0 s", end: "120 s"}

Many plates share one recipe: list them, name a glob (``data: "run-*.csv"``, one plate per matching file,
named by its stem, all with the same layout) or a manifest, a CSV table with columns ``name``, ``data`` and
``layout`` (one row per plate; paths relative to the manifest)::

    plates:
      - manifest: plates.csv

Every problem found is collected and reported together, one per line, as
``recipe.yaml:14 steps[2].rates.end: expected a quantity like "1 s", got 120 (did you mean "120 s"?)``.
"""

from __future__ import annotations

import glob
import hashlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml
from vzero.errors import RecipeError, VzeroError
from vzero.params import REQUIRED, Param, closest, validate
from vzero.registry import Registry

FORMAT_VERSION = 1

#: Top-level keys of a recipe and what they hold. Plugins may not add top-level keys; a step's own
#: parameters are declared by its stage class.
TOP_LEVEL: dict[str, Param] = {
    "vzero": Param("int", FORMAT_VERSION, "recipe format version"),
    "name": Param("str", "run", "a short name for the run"),
    "description": Param("str", "", "free text"),
    "plugins": Param("list", [], "local plugin files (.py, relative to the recipe) or module names"),
    "plates": Param("list", REQUIRED, "plates: name, data file, layout file"),
    "steps": Param("list", REQUIRED, "the stages to run, in order"),
    "assay": Param("mapping", {}, "assay conditions: temperature, pH, buffer, enzyme (flows into exports)"),
    "exclusions": Param("list", [], "wells or reads excluded, each with a reason"),
    "overrides": Param("list", [], "per-well settings fixed by hand, each with a reason"),
    "review": Param("list", [], "decisions made on review, one per well: keep or exclude, each with a reason"),
    "include": Param("list", [], "recipe fragments (YAML data files, relative to the recipe) merged into it"),
}
PLATE_KEYS = {"name", "data", "layout", "water_peak_reads", "manifest"}
#: Plate keys that name input files (stored byte for byte in the audit file). ``water_peak_reads``: per-well
#: water-peak absorbance reads for the pathlength (columns well, a977, a900).
FILE_KEYS = ("data", "layout", "water_peak_reads")
#: Plate keys (and manifest columns) of earlier vzero versions, read as their new names with a notice.
OLD_PLATE_KEYS = {"pathcheck": "water_peak_reads"}
#: Columns of a plate manifest (a CSV table, one row per plate); only ``data`` must be filled in.
MANIFEST_COLUMNS = ("name", *FILE_KEYS)


@dataclass(frozen=True)
class StepSpec:
    """One validated step: its position, kind, method, parameters as written and as parsed."""

    index: int
    kind: str
    method: str
    written: Mapping[str, Any]
    settings: Mapping[str, Any]
    line: int

    @property
    def label(self) -> str:
        return f"{self.index:02d}-{self.kind}-{self.method}"


@dataclass(frozen=True)
class PlateSpec:
    """One plate: its name and its input files by key (``data``, ``layout``), as paths relative to the
    recipe folder (or keys of stored inputs when rerunning)."""

    name: str
    files: Mapping[str, str]


@dataclass
class Recipe:
    """A parsed recipe with the line of every key path, for messages that point into the file."""

    path: str
    text: str
    data: dict[str, Any]
    lines: dict[tuple[Any, ...], int]
    steps: list[StepSpec] = field(default_factory=list)
    plates: list[PlateSpec] = field(default_factory=list)
    #: manifest files named in ``plates`` (relative to the recipe folder); the runner stores them as inputs.
    manifests: list[str] = field(default_factory=list)
    #: the plugins to load instead of the recipe's own list: set by ``vzero rerun`` to the files the user
    #: passed with ``--plugin`` (an audit file's stored recipe never chooses code by itself).
    plugin_override: list[str] | None = None
    #: notices of the check that are not errors (an old plate key read under its new name), each with file:line.
    notices: list[str] = field(default_factory=list)
    #: where each attached fragment starts: (line offset in the text, file name); the recipe itself is (0, name).
    segments: list[tuple[int, str]] = field(default_factory=list)
    #: set by ``vzero rerun`` with the stored recipe: the old run's steps by position, ``{index: (kind,
    #: method, settings)}``. A method or parameter the recipe leaves to its default keeps the value the old run
    #: used where that default has changed since, so a rerun repeats the old analysis (with a notice).
    previous: dict[int, tuple[str, str, dict[str, Any]]] = field(default_factory=dict)

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.text.encode("utf-8")).hexdigest()

    @property
    def base_dir(self) -> Path:
        return Path(self.path).resolve().parent

    @property
    def plugin_entries(self) -> list[str]:
        if self.plugin_override is not None:
            return list(self.plugin_override)
        value = self.data.get("plugins") or []
        return [str(v) for v in value] if isinstance(value, list) else []

    def line_of(self, path: tuple[Any, ...]) -> int:
        """The line of ``path`` or of its nearest ancestor that has one (1-based; 0 if unknown)."""
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return self.lines.get((), 0)

    def locate(self, line: int) -> tuple[str, int]:
        """The file (recipe or included fragment) and the line within it of ``line`` of the recipe text."""
        offset, name = 0, Path(self.path).name
        for start, file in self.segments[1:]:
            if start < line:
                offset, name = start, file
        return name, line - offset

    def where(self, path: tuple[Any, ...]) -> str:
        name, line = self.locate(self.line_of(path))
        return f"{name}:{line} {format_path(path)}"


def format_path(path: tuple[Any, ...]) -> str:
    out = ""
    for part in path:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "(top)"


#: Bounds on YAML aliases (``*name``), so that a small recipe cannot expand to millions of values (an "alias
#: bomb": each alias repeats a mapping that itself repeats others). Recipes rarely need aliases at all.
MAX_ALIASES = 200
#: The most values (mappings, lists and scalars, counted with every alias expanded) a recipe may hold.
MAX_EXPANDED_NODES = 200_000

#: YAML's safe loader (no Python objects from tags), in libyaml's C version where available.
_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def parse(text: str, path: str) -> Recipe:
    """Parse YAML ``text`` (from ``path``, used in messages) into a :class:`Recipe` with line numbers.

    A text with fragments attached (see :mod:`vzero.includes`) is one recipe document followed by one
    document per fragment; the fragments' data are merged into the recipe's and every line is reported in
    the file it came from. Raises :class:`RecipeError` for YAML syntax errors, duplicated keys and fragments
    that do not fit.
    """
    from vzero import includes

    name = Path(path).name
    parts = includes.attached(text)
    segments = [(0, name)] + [(a.line, a.path) for a in parts]

    def place(line: int) -> str:
        offset, file = max((s for s in segments if s[0] < line or s[0] == 0), key=lambda s: s[0])
        return f"{file}:{line - offset}"

    nodes: list[Any] = []
    try:
        loader = _LOADER(text)  # the safe loader; libyaml's C version where PyYAML has it
        try:
            while loader.check_node():
                node = loader.get_node()
                _check_size(node, text, place(node.start_mark.line + 1).split(":")[0])
                nodes.append(node)
            docs = [loader.construct_document(n) for n in nodes]
        finally:
            loader.dispose()
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 1 if mark is not None else 0
        problem = getattr(exc, "problem", None) or str(exc)
        raise RecipeError(f"{place(line) if line else name + ':0'} is not valid YAML: {problem}") from None
    if len(nodes) > 1 + len(parts):
        raise RecipeError(f"{place(nodes[1 + len(parts)].start_mark.line + 1)} a recipe is one YAML document; "
                          "this text holds another one (a '---' line)",
                          hint="Remove the extra '---' line, or name other files under include:.")
    data = docs[0] if nodes else None
    if not isinstance(data, dict):
        raise RecipeError(f"{name}:1 a recipe must be a mapping of keys (vzero, name, plates, steps, ...)")
    lines: dict[tuple[Any, ...], int] = {}
    dupes: list[str] = []
    _walk(nodes[0], (), lines, dupes, place)
    if parts or "include" in data:  # an include: key with nothing attached would silently drop its data
        data = _merge_fragments(data, nodes[1:], docs[1:], parts, lines, dupes, place)
    if dupes:
        raise RecipeError(dupes)
    return Recipe(path=str(path), text=text, data=data, lines=lines, segments=segments)


def _merge_fragments(data: dict[str, Any], nodes: list[Any], docs: list[Any], parts: list[Any],
                     lines: dict[tuple[Any, ...], int], problems: list[str],
                     place: Callable[[int], str]) -> dict[str, Any]:
    """The recipe's data with the attached fragments' merged in (see :mod:`vzero.includes`); problems are
    added to ``problems``, each naming the fragment file and line."""
    from vzero import includes

    if len(nodes) < len(parts):
        missing = parts[len(nodes)]
        raise RecipeError(f"{place(missing.line + 1)} the fragment {missing.path} is empty; a fragment is a mapping "
                          "of exclusions, overrides, review or assay")
    by_path: dict[str, Any] = {"": data}
    include_line = {"": lines.get(("include",), 1)}
    for part, doc, node in zip(parts, docs, nodes, strict=True):
        by_path[part.path] = doc
        keys = node.value if isinstance(node, yaml.MappingNode) else []
        include_line[part.path] = next((k.start_mark.line + 1 for k, _ in keys
                                        if getattr(k, "value", None) == "include"), part.line + 1)
    want = includes.expected(by_path, [p.path for p in parts if p.given], include_line)
    got = [p.path for p in parts]
    if want != got:
        raise RecipeError(f"{place(1)} the recipe names the fragments {want or 'none'} but carries {got}",
                          hint="Read the recipe from its file (its include: files beside it) so that vzero attaches "
                               "them, or restore the text as the audit file stored it.")
    out = dict(data)
    assay_from: dict[str, str] = {}
    for doc, node in zip(docs, nodes, strict=True):
        where = place(node.start_mark.line + 1)
        if doc is None:
            continue
        if not isinstance(doc, dict) or not isinstance(node, yaml.MappingNode):
            problems.append(f"{where} a fragment must be a mapping of keys ({', '.join(includes.FRAGMENT_KEYS)})")
            continue
        for key_node, value_node in node.value:
            key, at = key_node.value, place(key_node.start_mark.line + 1)
            value = doc.get(key)
            if key not in includes.FRAGMENT_KEYS:
                problems.append(f"{at} {key}: not allowed in a fragment; fragments hold data only "
                                f"({', '.join(k for k in includes.FRAGMENT_KEYS if k != 'include')}): write "
                                f"{key!r} in the recipe itself")
            elif key in includes.LIST_KEYS:
                if not isinstance(value, list) or not isinstance(value_node, yaml.SequenceNode):
                    problems.append(f"{at} {key}: expected a list of items")
                    continue
                start = len(out.get(key) or [])
                out[key] = [*(out.get(key) or []), *value]
                lines.setdefault((key,), key_node.start_mark.line + 1)
                for i, item in enumerate(value_node.value):
                    _walk(item, (key, start + i), lines, problems, place)
            elif key == "assay":
                if not isinstance(value, dict) or not isinstance(value_node, yaml.MappingNode):
                    problems.append(f"{at} assay: expected a mapping of assay conditions")
                    continue
                merged = dict(out.get("assay") or {})
                for k_node, v_node in value_node.value:
                    k = k_node.value
                    if k in merged:
                        first = assay_from.get(k) or place(lines.get(("assay", k), 1))
                        problems.append(f"{place(k_node.start_mark.line + 1)} assay.{k}: already given ({first}); "
                                        "keep one")
                        continue
                    merged[k] = value[k]
                    assay_from[k] = place(k_node.start_mark.line + 1)
                    _walk(v_node, ("assay", k), lines, problems, place)
                    lines[("assay", k)] = k_node.start_mark.line + 1
                out["assay"] = merged
    return out


def _check_size(root: Any, text: str, name: str) -> None:
    """Refuse a recipe whose aliases are too many or expand to too many values (see ``MAX_ALIASES``)."""
    aliases = text.count("*")  # an upper bound: every alias starts with '*'; checked exactly below
    sizes: dict[int, int] = {}
    seen_twice = 0

    def size(node: Any) -> int:
        nonlocal seen_twice
        key = id(node)
        if key in sizes:
            seen_twice += 1  # the same node reached again: an alias
            if seen_twice > MAX_ALIASES:
                raise RecipeError(f"{name}:{node.start_mark.line + 1} the recipe uses more than {MAX_ALIASES} "
                                  "YAML aliases (*name); write the values out, or use fewer aliases")
            return sizes[key]
        sizes[key] = 1  # a node that refers to itself counts once
        children: list[Any] = []
        if isinstance(node, yaml.MappingNode):
            children = [n for pair in node.value for n in pair]
        elif isinstance(node, yaml.SequenceNode):
            children = list(node.value)
        total = 1
        for child in children:
            total += size(child)
            if total > MAX_EXPANDED_NODES:
                raise RecipeError(
                    f"{name}:{node.start_mark.line + 1} the recipe expands to more than {MAX_EXPANDED_NODES} values "
                    "through YAML aliases (*name); a recipe that large is refused",
                    hint="Write the values out, or split the batch into several recipes.")
        sizes[key] = total
        return total

    if aliases:
        size(root)


def _walk(node: Any, path: tuple[Any, ...], lines: dict[tuple[Any, ...], int], dupes: list[str],
          place: Callable[[int], str]) -> None:
    lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        seen: dict[Any, int] = {}
        for key_node, value_node in node.value:
            key = key_node.value
            if key in seen:
                dupes.append(
                    f"{place(key_node.start_mark.line + 1)} {format_path((*path, key))}: key given twice "
                    f"(first on line {place(seen[key]).rsplit(':', 1)[1]}); keep one"
                )
            seen[key] = key_node.start_mark.line + 1
            lines[(*path, key)] = key_node.start_mark.line + 1
            _walk(value_node, (*path, key), lines, dupes, place)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            _walk(item, (*path, i), lines, dupes, place)


def load(path: str | Path, fragments: Sequence[str | Path] = ()) -> Recipe:
    """Read and parse a recipe file with the fragments it includes (``include:``, read from beside it) and
    the ``fragments`` given on the command line, attached to its text (:mod:`vzero.includes`); a missing or
    unreadable file is a :class:`RecipeError`."""
    from vzero import includes

    text = _read_text(Path(path), "recipe")
    text = includes.compose(Path(path), text, fragments, lambda p: _read_text(p, "fragment"), MAX_RECIPE_BYTES)
    return parse(text, str(path))


def _read_text(p: Path, what: str) -> str:
    """The text of a recipe or fragment file, checked: present, within the size limit, UTF-8, no NUL."""
    path = str(p)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise RecipeError(f"{what} file {str(path)!r} not found",
                          hint="Check the path (a fragment's path is relative to the file that includes it).") from None
    except OSError as exc:
        raise RecipeError(f"{what} file {str(path)!r} cannot be read: {exc.strerror}") from None
    if len(raw) > MAX_RECIPE_BYTES:
        raise RecipeError(f"{p.name}:1 the {what} is {len(raw)} bytes; recipes over {MAX_RECIPE_BYTES} bytes are "
                          "refused", hint="List many plates in a manifest CSV (plates: [{manifest: plates.csv}]).")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise RecipeError(f"{p.name}:{line} is not UTF-8 text (byte 0x{raw[exc.start]:02x} at position "
                          f"{exc.start})", hint="Save the recipe as UTF-8 in your editor.") from None
    if "\x00" in text:
        line = text[: text.index("\x00")].count("\n") + 1
        raise RecipeError(f"{p.name}:{line} holds a NUL character; a recipe is plain text",
                          hint="Save the recipe as plain UTF-8 text.")
    return text


#: Recipes longer than this are refused before parsing (a recipe is a page of text; batches use manifests).
MAX_RECIPE_BYTES = 1_000_000

def _unknown_names(params: Any, settings: Mapping[str, Any], registry: Registry) -> list[tuple[str, str]]:
    """Parameters declared with ``names=KIND`` whose values are not registered components of that kind."""
    out: list[tuple[str, str]] = []
    for key, param in (params.items() if isinstance(params, Mapping) else []):
        kind, value = getattr(param, "names", None), settings.get(key)
        if not kind or value is None:
            continue
        known = registry.names(kind)
        for i, name in enumerate(value if isinstance(value, list) else [value]):
            if str(name) not in known:
                hit = closest(str(name), known)
                near = f" (did you mean {hit!r}?)" if hit else ""
                where = f"{key}[{i}]" if isinstance(value, list) else key
                out.append((where, f"no {kind} named {name!r}{near}; available: {', '.join(known)}"))
    return out


def check(
    recipe: Recipe,
    registry: Registry,
    *,
    exists: Callable[[str], bool] | None = None,
    expand: Callable[[str], list[str]] | None = None,
    read: Callable[[str], bytes] | None = None,
    plates: bool = True,
    extra_checks: Callable[[Recipe], list[str]] | None = None,
    skipped: list[str] | None = None,
) -> Recipe:
    """Validate ``recipe`` against the registry: keys, types, units, methods, plates and input files.

    ``exists(rel_path)`` says whether an input file is available (default: on disk beside the recipe);
    ``expand(pattern)`` expands a glob in a ``data`` entry (default: on disk); ``read(rel_path)`` returns the
    bytes of a plate manifest (default: from disk). ``plates=False`` skips the plates (a worker process that
    is handed its plate checks only the steps). ``extra_checks(recipe)`` returns further problems (the
    plugins' ``vzero_check_recipe`` hook). With a ``skipped`` list, a step whose kind or method no loaded
    plugin provides is listed there instead of being an error (``vzero check`` without the recipe's local
    plugins). Fills ``recipe.steps``, ``recipe.plates`` and
    ``recipe.manifests`` and returns the recipe; raises :class:`RecipeError` listing every problem.
    """
    base = recipe.base_dir
    exists = exists or (lambda rel: (base / rel).is_file())
    expand = expand or (lambda pat: sorted(str(Path(p).relative_to(base)) for p in glob.glob(str(base / pat))))
    read = read or (lambda rel: (base / rel).read_bytes())
    problems: list[str] = []

    def bad(path: tuple[Any, ...], msg: str) -> None:
        problems.append(f"{recipe.where(path)}: {msg}")

    data = recipe.data
    for key in data:
        if key not in TOP_LEVEL:
            hit = closest(key, TOP_LEVEL)
            near = f" (did you mean {hit!r}?)" if hit else ""
            bad((key,), f"unknown key{near}; valid keys: {', '.join(TOP_LEVEL)}")
    for key, param in TOP_LEVEL.items():
        if key in data:
            try:
                param.convert(data[key])
            except ValueError as exc:
                bad((key,), str(exc))
        elif param.required:
            bad((), f"missing required key {key!r}")
    if data.get("vzero", FORMAT_VERSION) != FORMAT_VERSION and isinstance(data.get("vzero"), int):
        bad(("vzero",), f"recipe format {data['vzero']} is not supported by this vzero (format {FORMAT_VERSION})")

    if plates:
        recipe.manifests = []
        recipe.notices = []

        def note(path: tuple[Any, ...], msg: str) -> None:
            recipe.notices.append(f"{recipe.where(path)}: {msg}")

        recipe.plates = _check_plates(_new_plate_keys(data.get("plates"), bad, note), bad, exists, expand, read,
                                      recipe.manifests, note)
    recipe.steps = _check_steps(recipe, data.get("steps"), registry, bad, skipped)
    if extra_checks is not None:
        problems.extend(extra_checks(recipe))
    if problems:
        raise RecipeError(problems, hint="Nothing was run.")
    return recipe


def _new_plate_keys(plates: Any, bad: Callable[[tuple[Any, ...], str], None],
                    note: Callable[[tuple[Any, ...], str], None]) -> Any:
    """The plate entries with the keys of earlier versions (:data:`OLD_PLATE_KEYS`) under their new names,
    each said once in a notice (the recipe mapping itself, stored in the audit file, is left as written)."""
    if not isinstance(plates, list):
        return plates
    out = []
    for i, entry in enumerate(plates):
        if isinstance(entry, dict) and set(entry) & set(OLD_PLATE_KEYS):
            entry = dict(entry)
            for old, new in OLD_PLATE_KEYS.items():
                if old not in entry:
                    continue
                value = entry.pop(old)
                if new in entry:
                    bad(("plates", i, old), f"the plate names both {old!r} (the old name) and {new!r}; keep {new!r}")
                    continue
                note(("plates", i, old), f"the plate key {old!r} is now {new!r}; it was read as {new!r} "
                                         f"(rename it: the old name may be refused by a later vzero)")
                entry[new] = value
        out.append(entry)
    return out


def _check_plates(
    plates: Any,
    bad: Callable[[tuple[Any, ...], str], None],
    exists: Callable[[str], bool],
    expand: Callable[[str], list[str]],
    read: Callable[[str], bytes],
    manifests: list[str],
    note: Callable[[tuple[Any, ...], str], None],
) -> list[PlateSpec]:
    out: list[PlateSpec] = []
    if not isinstance(plates, list):
        return out
    names: set[str] = set()
    for i, entry in enumerate(plates):
        path: tuple[Any, ...] = ("plates", i)
        if not isinstance(entry, dict):
            bad(path, "expected a mapping with name, data and layout (or one key: manifest)")
            continue
        for key in entry:
            if key not in PLATE_KEYS:
                hit = closest(key, PLATE_KEYS)
                near = f" (did you mean {hit!r}?)" if hit else ""
                bad((*path, key), f"unknown key{near}; valid: {', '.join(sorted(PLATE_KEYS))}")
        if "manifest" in entry:
            out.extend(_manifest_plates(entry, path, bad, exists, read, manifests, note))
            continue
        data_entry = entry.get("data")
        if not isinstance(data_entry, str):
            bad((*path, "data"), f"expected the path of a data file, got {data_entry!r}")
            continue
        files = {k: v for k, v in entry.items() if k in FILE_KEYS and isinstance(v, str)}
        if "layout" in entry and not isinstance(entry["layout"], str):
            bad((*path, "layout"), f"expected the path of a layout file, got {entry['layout']!r}")
        if _is_glob(data_entry):
            matches = expand(data_entry)
            if not matches:
                bad((*path, "data"), f"no file matches {data_entry!r}")
            for rel in matches:
                name = Path(rel).stem
                out.append(PlateSpec(name, {**files, "data": rel}))
        else:
            name = str(entry.get("name") or Path(data_entry).stem)
            out.append(PlateSpec(name, files))
        for key, rel in files.items():
            if key == "data" and _is_glob(rel):
                continue
            if not exists(rel):
                bad((*path, key), f"input file {rel!r} not found (paths are relative to the recipe)")
    for j, plate in enumerate(out):
        problem = unsafe_name(plate.name)
        if problem:
            bad(("plates",), f"plate name {plate.name!r} (plate {j + 1}) {problem}; rename it")
        if plate.name in names:
            bad(("plates",), f"plate name {plate.name!r} is used twice (plate {j + 1}); give each plate its own name")
        names.add(plate.name)
    return out


def unsafe_name(name: str) -> str | None:
    """Why ``name`` cannot name a plate (it becomes an HDF5 group and part of file names), or None."""
    if not name.strip():
        return "is empty"
    if name in (".", ".."):
        return "is a folder reference"
    if "/" in name or "\\" in name:
        return "holds a slash, which HDF5 and file systems read as a folder separator"
    if any(ord(ch) < 32 or ord(ch) == 127 for ch in name):
        return "holds a control character (NUL, tab, line break, ...)"
    if len(name) > 200:
        return f"is {len(name)} characters long; keep it under 200"
    return None


def _is_glob(text: str) -> bool:
    return any(ch in text for ch in "*?[")


def _manifest_plates(
    entry: Mapping[str, Any],
    path: tuple[Any, ...],
    bad: Callable[[tuple[Any, ...], str], None],
    exists: Callable[[str], bool],
    read: Callable[[str], bytes],
    manifests: list[str],
    note: Callable[[tuple[Any, ...], str], None],
) -> list[PlateSpec]:
    """The plates listed in a manifest CSV (columns name, data, layout; paths relative to the manifest)."""
    import csv
    import io
    import posixpath

    where = (*path, "manifest")
    rel = entry["manifest"]
    if not isinstance(rel, str):
        bad(where, f"expected the path of a CSV file with columns name, data, layout, got {rel!r}")
        return []
    if set(entry) - {"manifest"}:
        bad(path, "a manifest entry has the one key 'manifest'; give name, data and layout as manifest columns")
    if not exists(rel):
        bad(where, f"manifest {rel!r} not found (paths are relative to the recipe)")
        return []
    manifests.append(rel)
    try:
        text = read(rel).decode("utf-8-sig")
    except (OSError, UnicodeDecodeError, VzeroError) as exc:
        bad(where, f"manifest {rel!r} cannot be read as UTF-8 text ({exc}); save it as a UTF-8 CSV")
        return []
    rows = list(csv.reader(io.StringIO(text)))
    header = [h.strip() for h in rows[0]] if rows else []
    for k, h in enumerate(header):
        if h in OLD_PLATE_KEYS and OLD_PLATE_KEYS[h] not in header:
            header[k] = OLD_PLATE_KEYS[h]
            note(where, f"{rel} row 1: the column {h!r} is now {header[k]!r}; it was read as {header[k]!r} "
                        f"(rename it: the old name may be refused by a later vzero)")
    unknown = [h for h in header if h not in MANIFEST_COLUMNS]
    for h in unknown:
        hit = closest(h, MANIFEST_COLUMNS)
        bad(where, f"{rel} row 1: unknown column {h!r}{f' (did you mean {hit!r}?)' if hit else ''}; "
                   f"columns: {', '.join(MANIFEST_COLUMNS)}")
    if "data" not in header:
        bad(where, f"{rel} row 1: no 'data' column; the first row must name the columns name, data, layout")
        return []
    if unknown:
        return []
    folder = posixpath.dirname(rel.replace("\\", "/"))
    out: list[PlateSpec] = []
    for n, row in enumerate(rows[1:], start=2):
        if not any(cell.strip() for cell in row):
            continue
        if len(row) != len(header):
            bad(where, f"{rel} row {n}: {len(row)} cells for {len(header)} columns; one row per plate")
            continue
        cells = {h: c.strip() for h, c in zip(header, row, strict=True)}
        if not cells.get("data"):
            bad(where, f"{rel} row {n}: no data file; fill in the 'data' column")
            continue
        files = {k: posixpath.normpath(posixpath.join(folder, cells[k])) for k in FILE_KEYS if cells.get(k)}
        for key, file in files.items():
            if not exists(file):
                bad(where, f"{rel} row {n}: {key} file {file!r} not found (paths are relative to the manifest)")
        out.append(PlateSpec(cells.get("name") or Path(files["data"]).stem, files))
    if not out:
        bad(where, f"manifest {rel!r} lists no plates; add one row per plate under the header name,data,layout")
    return out


def _notice(recipe: Recipe, path: tuple[Any, ...], msg: str) -> None:
    text = f"{recipe.where(path)}: {msg}"
    if text not in recipe.notices:
        recipe.notices.append(text)


def _plain(value: Any) -> Any:
    """A setting as the audit file stores it (``settings`` attribute): JSON scalars, lists and mappings as
    they are, anything else as text."""
    return value if isinstance(value, bool | int | float | list | dict | None) else str(value)


def _keep_old_defaults(recipe: Recipe, path: tuple[Any, ...], declared: Mapping[str, Param],
                       written: Mapping[str, Any], settings: dict[str, Any], old: Mapping[str, Any]) -> dict[str, Any]:
    """``settings`` with every parameter the recipe does not write set to the old run's value where the
    default has changed since (a rerun of a stored recipe repeats the old analysis), each with a notice.
    A stored value that the parameter no longer accepts is left to the new default."""
    for key in declared:
        if key in written or key not in old or _plain(settings[key]) == old[key]:
            continue
        kept, problems = validate(declared, {**written, key: old[key]})
        if problems:
            continue
        _notice(recipe, path, f"{key!r} not named; the old run used {old[key]!r}, then the default (now "
                f"{_plain(settings[key])!r}): kept, so the rerun repeats it; name {key!r} in a recipe of your own "
                "to change it")
        settings[key] = kept[key]
    return settings


def _check_steps(
    recipe: Recipe,
    steps: Any,
    registry: Registry,
    bad: Callable[[tuple[Any, ...], str], None],
    skipped: list[str] | None = None,
) -> list[StepSpec]:
    out: list[StepSpec] = []
    if not isinstance(steps, list):
        return out
    kinds = [k for k in registry.kinds() if k != "model"]
    order = {"plate": 0, "pooled": 1, "final": 2}
    last_scope = 0
    for i, step in enumerate(steps):
        path: tuple[Any, ...] = ("steps", i)
        if not isinstance(step, dict) or len(step) != 1:
            bad(path, "expected one mapping like {rates: {method: window, ...}}")
            continue
        kind, body = next(iter(step.items()))
        method = body.get("method") if isinstance(body, dict) else None
        if skipped is not None and (kind not in kinds
                                    or (isinstance(method, str) and method not in registry.names(kind))):
            skipped.append(f"{recipe.where((*path, kind))} ({kind}: {method})")
            continue
        if kind not in kinds:
            hit = closest(kind, kinds)
            near = f" (did you mean {hit!r}?)" if hit else ""
            bad((*path, kind), f"unknown step kind{near}; known: {', '.join(kinds)}")
            continue
        body = {} if body is None else body
        if not isinstance(body, dict):
            bad((*path, kind), "expected a mapping with 'method' and the method's parameters")
            continue
        prev = recipe.previous.get(i + 1)
        if prev is not None and prev[0] != kind:
            prev = None
        if method is None:  # a step that names no method gets its kind's default, if the kind has one
            method = registry.default(kind)
            if prev is not None and prev[1] != method and prev[1] in registry.names(kind):
                _notice(recipe, (*path, kind), f"no method named; the old run used {prev[1]!r}, then the "
                        f"default (now {method!r}): kept, so the rerun repeats it")
                method = prev[1]
        if not isinstance(method, str):
            bad((*path, kind), f"missing 'method'; available {kind} methods: {', '.join(registry.names(kind))}")
            continue
        try:
            entry = registry.get(kind, method)
        except KeyError as exc:
            bad((*path, kind, "method"), str(exc.args[0]))
            continue
        written = {k: v for k, v in body.items() if k != "method"}
        settings, problems = validate(entry.component.params, written)
        if prev is not None and prev[1] == method and not problems:
            settings = _keep_old_defaults(recipe, (*path, kind), entry.component.params, written, settings, prev[2])
        cross = getattr(entry.component, "check_settings", None)
        if cross is not None and not problems:
            problems.extend(cross(settings))
        if not problems:
            problems.extend(_unknown_names(entry.component.params, settings, registry))
        for key, msg in problems:
            bad((*path, kind, key) if key else (*path, kind), msg)
        scope = order[entry.component.scope]
        if scope < last_scope:
            bad(path, f"a {entry.component.scope} step ({kind}) cannot come after a pooled or final step; reorder")
        last_scope = max(last_scope, scope)
        out.append(StepSpec(i + 1, kind, method, written, settings, recipe.line_of((*path, kind))))
    return out
