"""Recipe fragments: YAML files of data that a recipe includes, merged into it before it is checked.

A recipe names fragments under ``include:`` (paths relative to the including file), and ``vzero rerun
RUN.h5 --recipe base.yaml --recipe review.yaml`` names further ones on the command line (paths relative to
the working folder)::

    include: [review-decisions.yaml]

A fragment holds data only, never code: the keys in :data:`FRAGMENT_KEYS` (``exclusions``, ``overrides``,
``review``, ``assay`` and its own ``include``). Lists are appended after the recipe's own entries, in the
order the fragments are named; ``assay`` entries are added key by key, and a key given twice is an error
naming both files. Anything else (``plugins``, ``steps``, ``plates``, ...) in a fragment is refused.

The fragments are read once, by :func:`vzero.recipe.load`, and attached to the recipe text as further YAML
documents, each opened by a marker line naming its file::

    --- # vzero include: review-decisions.yaml

That composed text is what the run stores in its audit file (covered by the recipe's sha256), so a worker
process, a later ``vzero rerun`` of the stored recipe and a reader of the audit file all see the same data
without looking for the fragment files again. Bounds: at most :data:`MAX_INCLUDES` fragments, nested at most
:data:`MAX_DEPTH` deep, the whole within the recipe size limit; an include cycle is refused with the chain of
files that forms it.
"""

from __future__ import annotations

import os
import posixpath
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from vzero.errors import RecipeError

MARK = "# vzero include:"
"""Opens an attached fragment in a composed recipe text: ``--- # vzero include: PATH``."""

MARK_GIVEN = "# vzero include (command line):"
"""Opens a fragment that was named on the command line, not by the recipe's ``include`` key."""

FRAGMENT_KEYS = ("include", "exclusions", "overrides", "review", "assay")
"""Keys a fragment may hold: data about wells and the assay, never code, steps or inputs."""

LIST_KEYS = ("exclusions", "overrides", "review")
"""Fragment keys whose items are appended after the recipe's own."""

MAX_INCLUDES = 16
"""Most fragments one recipe may include, counted over every level."""

MAX_DEPTH = 4
"""Deepest nesting of fragments (a fragment that includes a fragment is depth 2)."""

_HEADER = re.compile(r"^--- (# vzero include(?: \(command line\))?:) (.+?)\s*$")


@dataclass(frozen=True)
class Attached:
    """One fragment attached to a composed recipe text: its path relative to the recipe's folder (POSIX
    form), the 1-based line of its marker, and whether it came from the command line."""

    path: str
    line: int
    given: bool


def attached(text: str) -> list[Attached]:
    """The fragments attached to a recipe text, in order (none for a recipe without includes)."""
    out = []
    for i, line in enumerate(text.splitlines(), start=1):
        m = _HEADER.match(line)
        if m:
            out.append(Attached(m.group(2), i, m.group(1) == MARK_GIVEN))
    return out


def resolve(parent: str, entry: str) -> str:
    """The path (relative to the recipe's folder, POSIX form) of ``entry`` named in the fragment at
    ``parent`` ('' for the recipe itself)."""
    return posixpath.normpath(posixpath.join(posixpath.dirname(parent), entry.replace("\\", "/")))


def entries(data: Any, name: str, line: int) -> list[str]:
    """The ``include`` entries of one document's data, checked: a list of relative ``.yaml``/``.yml`` paths.
    ``name`` and ``line`` place the key in messages."""
    if not isinstance(data, dict) or "include" not in data:
        return []
    value = data["include"]
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list):
        raise RecipeError(f"{name}:{line} include: expected a list of YAML files, got {value!r}",
                          hint='Write e.g. include: ["review-decisions.yaml"].')
    out = []
    for i, item in enumerate(value):
        where = f"{name}:{line} include[{i}]"
        if not isinstance(item, str) or not item.strip():
            raise RecipeError(f"{where}: expected the path of a YAML file, got {item!r}")
        if posixpath.isabs(item.replace("\\", "/")) or re.match(r"^[A-Za-z]:", item):
            raise RecipeError(f"{where}: {item!r} is an absolute path; name fragments relative to the recipe",
                              hint="Put the fragment beside the recipe (or in a folder below it).")
        if not item.lower().endswith((".yaml", ".yml")):
            raise RecipeError(f"{where}: {item!r} is not a YAML file; fragments are data (.yaml or .yml), never "
                              "code", hint="Name a .yaml file with exclusions, overrides, review or assay.")
        if any(ord(ch) < 32 for ch in item):
            raise RecipeError(f"{where}: the path holds a control character; rename the file")
        out.append(item.strip())
    return out


def _quick_data(text: str, name: str) -> Any:
    """The data of the first YAML document of ``text`` (safe loader), only to read its ``include`` key;
    the full parse, with its size checks and messages, comes later."""
    import yaml

    loader_class = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    loader = loader_class(text)
    try:
        node = loader.get_node() if loader.check_node() else None
        if node is None:
            return None
        if isinstance(node, yaml.MappingNode):  # read the include key only: nothing else is constructed
            for key, value in node.value:
                if getattr(key, "value", None) == "include":
                    return {"include": loader.construct_object(value, deep=True)}
        return {}
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        raise RecipeError(f"{name}:{mark.line + 1 if mark else 0} is not valid YAML: "
                          f"{getattr(exc, 'problem', None) or exc}") from None
    finally:
        loader.dispose()


def _line_of_include(text: str) -> int:
    for i, line in enumerate(text.splitlines(), start=1):
        if re.match(r"^include\s*:", line):
            return i
    return 1


def compose(path: Path, text: str, given: Sequence[str | Path], read_text: Callable[[Path], str],
            limit: int) -> str:
    """``text`` (the recipe at ``path``) with every fragment it includes, and the ``given`` ones, attached.

    ``read_text(path)`` reads one file with the recipe's own checks (size, UTF-8, no NUL). A text that
    already carries attached fragments (a recipe saved from an audit file) is not read again from disk; the
    ``given`` fragments are added after. Raises :class:`RecipeError` for a cycle, a fragment included twice,
    too many or too deep fragments, or a composed text over ``limit`` bytes.
    """
    base_dir = path.resolve().parent
    chunks = [text if text.endswith("\n") or not text else text + "\n"]
    seen: dict[Path, str] = {path.resolve(): path.name}
    count = 0

    def add(target: Path, rel: str, mark: str, chain: list[str], depth: int, keys: list[Path]) -> None:
        nonlocal count
        count += 1
        if count > MAX_INCLUDES:
            raise RecipeError(f"{chain[-1]}: more than {MAX_INCLUDES} fragments included",
                              hint="Merge some fragments into one file.")
        if depth > MAX_DEPTH:
            raise RecipeError(f"{' -> '.join([*chain, rel])}: fragments nested more than {MAX_DEPTH} deep",
                              hint="Include the inner fragments from the recipe itself.")
        key = target.resolve()
        if mark == MARK and not key.is_relative_to(base_dir):
            # a received recipe must not pull files from elsewhere on the disk into the audit file
            raise RecipeError(f"{chain[-1]}: include {rel!r} leaves the recipe's folder",
                              hint="Put the fragment beside the recipe (or in a folder below it), or name it "
                                   "on the command line with a second --recipe.")
        if key in keys:
            raise RecipeError(f"include cycle: {' -> '.join([*chain, rel])}",
                              hint=f"Remove the include of {rel} from {chain[-1]}.")
        if key in seen:
            raise RecipeError(f"{chain[-1]}: {rel} is included twice (also by {seen[key]})",
                              hint="Include each fragment once.")
        seen[key] = chain[-1]
        body = read_text(target)
        if attached(body):
            raise RecipeError(f"{rel}:1 the fragment itself holds attached fragments (a composed recipe text)",
                              hint="Include the original fragment files instead.")
        chunks.append(f"--- {mark} {rel}\n" + (body if body.endswith("\n") or not body else body + "\n"))
        for entry in entries(_quick_data(body, rel), rel, _line_of_include(body)):
            child = resolve(rel, entry)
            add(base_dir / child, child, MARK, [*chain, rel], depth + 1, [*keys, key])

    root = [path.resolve()]
    if not attached(text):
        for entry in entries(_quick_data(text, path.name), path.name, _line_of_include(text)):
            add(base_dir / resolve("", entry), resolve("", entry), MARK, [path.name], 1, root)
    for g in given:
        target = Path(g).resolve()
        rel = Path(os.path.relpath(target, base_dir)).as_posix()
        add(target, rel, MARK_GIVEN, [path.name], 1, root)
    out = "".join(chunks)
    if len(out.encode("utf-8")) > limit:
        raise RecipeError(f"{path.name}: the recipe with its fragments is over {limit} bytes",
                          hint="Keep fragments to exclusions, overrides and review decisions.")
    return out


def expected(datas: dict[str, Any], roots: Sequence[str], lines: dict[str, int]) -> list[str]:
    """The fragment paths a composed text must carry, in order: the recipe's includes depth first, then the
    fragments given on the command line (``roots``), each followed by its own includes. ``datas`` holds each
    document's data by its path ('' for the recipe)."""
    out: list[str] = []

    def walk(parent: str) -> None:
        for entry in entries(datas.get(parent), parent or "recipe", lines.get(parent, 1)):
            child = resolve(parent, entry)
            out.append(child)
            if child in datas and child not in out[:-1]:
                walk(child)

    walk("")
    for r in roots:
        out.append(r)
        walk(r)
    return out
