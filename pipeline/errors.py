"""The project's exception hierarchy.

Every problem a user can fix (a recipe, an input file, a plugin) is raised as a :class:`VzeroError`
subclass whose message says what is wrong, where (file, line, row, column, well, step) and what to do. The
command line prints the message alone (no traceback unless ``--debug``) and exits with :attr:`exit_code`.
"""

from __future__ import annotations


def sentence(text: str, *, capital: bool = False) -> str:
    """``text`` ending as a sentence: a closing full stop unless it already ends with ``.``, ``?``, ``!`` or
    ``:``, and (with ``capital``) a capital first letter unless it starts with a name such as ``--out`` or a
    file, so that a message and its hint never run together ("already exists Pass --force")."""
    text = text.rstrip()
    if not text:
        return text
    first = text.split(" ", 1)[0]
    if capital and first.isalpha() and first.islower():
        text = text[0].upper() + text[1:]
    if text[-1] not in ".?!:":
        text += "."
    return text


def join_sentences(message: str, hint: str | None) -> str:
    """A message and its hint as sentences: ``"x already exists."`` + ``"Pass --force."``."""
    return sentence(message) if not hint else f"{sentence(message)} {sentence(hint, capital=True)}"


class VzeroError(Exception):
    """Base of every error vzero raises on purpose. ``exit_code`` is what the CLI returns (2: bad input).

    The text is the message and the hint, each a full sentence (:func:`join_sentences`)."""

    exit_code = 2

    def __init__(self, message: str, *, hint: str | None = None) -> None:
        self.message = message
        self.hint = hint
        super().__init__(join_sentences(message, hint))


class RecipeError(VzeroError):
    """The recipe is wrong. ``problems`` holds one line per problem (``file:line key.path: what``)."""

    def __init__(self, problems: list[str] | str, *, hint: str | None = None) -> None:
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        n = len(self.problems)
        head = "" if n == 1 else f"{n} problems in the recipe:\n"
        self.message = head + "\n".join(self.problems)
        self.hint = hint
        Exception.__init__(self, self.message if not hint else f"{self.message}\n{hint}")


class InputFileError(VzeroError):
    """An input file (data, layout) cannot be read as asked.

    Parameters name the place: ``path`` (as the user wrote it), ``row`` (1-based line or spreadsheet row),
    ``column`` (header text or letter), ``well``.
    """

    def __init__(
        self,
        message: str,
        *,
        path: str | None = None,
        row: int | None = None,
        column: str | None = None,
        well: str | None = None,
        hint: str | None = None,
    ) -> None:
        self.path, self.row, self.column, self.well = path, row, column, well
        where = []
        if path is not None:
            where.append(str(path))
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column {column!r}")
        if well is not None:
            where.append(f"well {well}")
        prefix = ", ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message, hint=hint)


class LayoutError(InputFileError):
    """The plate layout is inconsistent with itself or with the data."""


class UnitError(VzeroError):
    """A quantity has no unit, an unknown unit or a unit of the wrong dimension."""


class PluginError(VzeroError):
    """A plugin failed to load, registered something invalid, or broke the stage contract. Names the plugin."""


class StageError(VzeroError):
    """A stage could not run on a whole plate (per-well trouble becomes a flag instead)."""


class FitError(VzeroError):
    """A fit could not be set up (not: did not converge; that is a result with ``success=False``)."""


class AuditFileError(VzeroError):
    """An audit file is missing, damaged, truncated, tampered with or from a newer major format version."""


class OutputExistsError(VzeroError):
    """The output folder already holds a run; pass ``--force`` to replace it."""


class OutputWriteError(VzeroError):
    """An output file or folder cannot be written (disk full, read-only, permission denied, a file in the way).

    The message is one sentence naming the path and the cause; nothing partial is left at the target."""

    path: str = ""

    @classmethod
    def from_os(cls, exc: OSError, path: object = None, action: str = "write") -> OutputWriteError:
        import errno

        where = path if path is not None else (exc.filename or "the output")
        cause = exc.strerror or str(exc)
        fixes = {errno.ENOSPC: "Free some space or write to another disk.",
                 errno.EFBIG: "The file is larger than this system allows; write to another disk.",
                 errno.EDQUOT: "Your disk quota is used up; free some space.",
                 errno.EROFS: "That disk is read-only; choose another --out.",
                 errno.EACCES: "Choose a folder you may write to, or change its permissions.",
                 errno.EPERM: "Choose a folder you may write to, or change its permissions.",
                 errno.EEXIST: "A file is in the way; choose another --out.",
                 errno.ENOTDIR: "Part of that path is a file, not a folder; choose another --out.",
                 errno.EISDIR: "A folder is in the way; choose another name."}
        left = "; nothing was left there" if action == "write" else ""
        error = cls(f"cannot {action} {str(where)!r}: {cause}{left}.",
                    hint=fixes.get(exc.errno or 0, "Check the path and the disk."))
        error.path = str(where)
        return error
