"""``vzero verify``: recompute every digest and hash stored in an audit file and report tampering or damage.

Checked: the recipe text against ``recipe_sha256``; each raw input's bytes against its ``sha256`` and
``size``; from format 2.0 on, the digests (:mod:`vzero.audit.digest`) that cover every dataset and attribute:
each step's plate groups, each step, /steps, /inputs, /results and the whole file; in 1.x files, each table's
``sha256`` (1.1 and later). Every dataset is read once, so damage anywhere in the file shows. A file without
/steps, /inputs or /results is reported. Exit 0 when all agree, 2 with what is wrong.

A matching hash shows the file is unchanged since it was written, not that its numbers are right; anyone able
to edit the file can also rewrite its hashes (the hashes guard against accidents and casual edits, they are
not signatures).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


@dataclass
class Report:
    """What :func:`verify` found: checks that passed, problems, and notes (things not checkable)."""

    path: str
    checked: list[str] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    def text(self) -> str:
        lines = [f"{self.path}: {'OK' if self.ok else 'DAMAGED OR CHANGED'} ({len(self.checked)} hashes checked)"]
        lines += [f"  problem: {p}" for p in self.problems]
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)


def verify(path: str | Path) -> Report:
    """Check every stored hash of the audit file at ``path``. Raises :class:`AuditFileError` only when the
    file cannot be opened as an audit file at all; everything else is a problem in the report."""
    from vzero.audit import reader

    report = Report(str(path))
    with reader.open_audit(path) as f:
        _check_recipe(f, report)
        _check_inputs(f, report)
        if reader._major(str(f.attrs.get("format_version", "0"))) >= 2:
            _check_digests(f, report)
        else:
            _check_tables(f, report)
            _read_everything(f, report)
    return report


def _check_digests(f: Any, report: Report) -> None:
    """Recompute every digest of a format 2.x file; a missing group or a missing file digest is a problem."""
    from vzero.audit.digest import DIGEST_ATTR, check

    for group in ("inputs", "steps", "results"):
        if group not in f and group != "inputs":  # /inputs is reported by _check_inputs
            report.problems.append(f"group /{group} is missing")
    if DIGEST_ATTR not in f.attrs:
        report.problems.append("the file has no digest (root attribute vzero_digest): it was not finished, "
                               "or the attribute was removed")
    try:
        check(f, "/", report.problems, report.checked)
    except (KeyError, OSError, ValueError, RuntimeError, TypeError) as exc:
        report.problems.append(f"unreadable content ({type(exc).__name__}: {exc})")


def check_intact(path: str | Path, *, check: bool = True, say: Any = None) -> None:
    """Check the digests of the audit file at ``path`` before a command reads it, and refuse a damaged or
    changed file with :class:`AuditFileError` listing what does not match.

    With ``check=False`` (the commands' ``--no-verify``) nothing is checked, and ``say`` (a function taking
    one line of text, such as ``print``) is told so: output made from an unchecked file must say that it is."""
    if not check:
        if say is not None:
            say(f"note: {path} was read without checking its digests (--no-verify); its numbers may have been "
                "changed or damaged since it was written")
        return
    from vzero.errors import AuditFileError

    report = verify(path)
    if not report.ok:
        problems = "\n".join(f"  {p}" for p in report.problems)
        raise AuditFileError(
            f"{path}: the audit file does not match its digests (damaged or changed since it was written):\n"
            f"{problems}",
            hint="Use a backup copy, or pass --no-verify to read it anyway (the output then says so).",
        )


def _check_recipe(f: Any, report: Report) -> None:
    try:
        text = str(f.attrs["recipe_text"])
        want = str(f.attrs["recipe_sha256"])
    except KeyError as exc:
        report.problems.append(f"root attribute {exc.args[0]!r} is missing")
        return
    got = hashlib.sha256(text.encode("utf-8")).hexdigest()
    if got != want:
        report.problems.append(f"recipe text does not match recipe_sha256 (stored {want[:12]}..., now {got[:12]}...)")
    else:
        report.checked.append("recipe")


def _check_inputs(f: Any, report: Report) -> None:
    if "inputs" not in f:
        report.problems.append("group /inputs is missing")
        return
    for name, ds in f["inputs"].items():
        label = f"input {ds.attrs.get('name', name)!s} (/inputs/{name})"
        try:
            data = ds[()].tobytes()
            want, size = str(ds.attrs["sha256"]), int(ds.attrs["size"])
        except (KeyError, OSError, ValueError, RuntimeError) as exc:
            report.problems.append(f"{label}: unreadable ({type(exc).__name__}: {exc})")
            continue
        got = hashlib.sha256(data).hexdigest()
        if len(data) != size:
            report.problems.append(f"{label}: {len(data)} bytes stored, {size} recorded")
        if got != want:
            report.problems.append(f"{label}: bytes do not match the recorded sha256 ({want[:12]}...)")
        else:
            report.checked.append(label)


def _check_tables(f: Any, report: Report) -> None:
    """Format 1.x: each table's ``sha256``."""
    from vzero.audit.legacy import table_sha256

    tables: list[tuple[str, Any]] = []

    def visit(name: str, obj: Any) -> None:
        if obj.attrs.get("kind") == "table":
            tables.append((name, obj))

    f.visititems(visit)
    for name, g in tables:
        if "sha256" not in g.attrs:
            report.notes.append(f"table /{name} has no stored hash (written before format 1.1)")
            continue
        try:
            got = table_sha256(g)
        except (KeyError, OSError, ValueError, RuntimeError) as exc:
            report.problems.append(f"table /{name}: unreadable ({type(exc).__name__}: {exc})")
            continue
        if got != str(g.attrs["sha256"]):
            report.problems.append(f"table /{name}: content does not match its recorded sha256")
        else:
            report.checked.append(f"table /{name}")
    if "results" not in f:
        report.problems.append("group /results is missing")


def _read_everything(f: Any, report: Report) -> None:
    import h5py

    def visit(name: str, obj: Any) -> None:
        if isinstance(obj, h5py.Dataset):
            try:
                obj[()]
            except (OSError, ValueError, RuntimeError) as exc:
                report.problems.append(f"dataset /{name}: unreadable ({type(exc).__name__}: {exc})")

    f.visititems(visit)
