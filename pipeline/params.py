"""Declarative parameters for stage methods, validated before any work starts.

A stage declares ``params = {"start": Param.quantity("s", default="0 s", doc="...")}``. Validation checks
every key of a recipe step against the declaration and collects *all* problems, each phrased in one format
(``expected ..., got ...``), with the closest valid name for a misspelt key. Values are handed to the stage
parsed (quantities as pint Quantities); the recipe text itself is stored unchanged in the audit file.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from vzero.errors import UnitError


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


REQUIRED: Any = _Required()


@dataclass(frozen=True)
class Param:
    """One parameter of a stage method.

    ``kind`` is one of ``str, int, float, bool, quantity, unit, choice, list, mapping, any``. ``like`` is the
    unit a quantity (or unit) must be convertible to. ``choices`` lists allowed values for ``choice`` (and for
    the items of a ``list``). ``low``/``high`` bound numbers (inclusive). ``names`` says the value (text, or
    each item of a list) names a registered component of that kind (``"model"``): the recipe check looks each
    one up, so a misspelt name stops the run before it starts.
    """

    kind: str
    default: Any = REQUIRED
    doc: str = ""
    like: str | None = None
    choices: tuple[Any, ...] | None = None
    low: float | None = None
    high: float | None = None
    nullable: bool = False
    check: Callable[[Any], str | None] | None = field(default=None, compare=False)
    names: str | None = None

    # Constructors that read well in a stage declaration.
    @classmethod
    def quantity(cls, like: str, default: Any = REQUIRED, doc: str = "", **kw: Any) -> Param:
        return cls("quantity", default, doc, like=like, **kw)

    @classmethod
    def choice(cls, choices: tuple[Any, ...], default: Any = REQUIRED, doc: str = "", **kw: Any) -> Param:
        return cls("choice", default, doc, choices=tuple(choices), **kw)

    @property
    def required(self) -> bool:
        return self.default is REQUIRED

    def describe(self) -> str:
        """Human description of what is expected, used in messages and in ``vzero plugins --params``."""
        if self.kind == "quantity":
            return f'a quantity like "1 {self.like}"'
        if self.kind == "unit":
            return f"a unit like {self.like!r}"
        if self.kind == "choice":
            return "one of " + ", ".join(repr(c) for c in self.choices or ())
        if self.kind == "list" and self.choices:
            return "a list of " + ", ".join(repr(c) for c in self.choices)
        return {"str": "text", "int": "a whole number", "float": "a number", "bool": "true or false",
                "list": "a list", "mapping": "a mapping", "any": "any value"}.get(self.kind, self.kind)

    def convert(self, value: Any) -> Any:
        """Return the parsed value or raise ``ValueError`` with an ``expected ..., got ...`` message."""
        from vzero import units

        if value is None and (self.nullable or self.default is None):
            return None
        k = self.kind
        bad = ValueError(f"expected {self.describe()}, got {value!r}")
        if k == "any":
            out = value
        elif k == "str":
            if not isinstance(value, str):
                raise bad
            out = value
        elif k == "bool":
            if not isinstance(value, bool):
                raise bad
            out = value
        elif k == "int":
            if isinstance(value, bool) or not isinstance(value, int):
                raise bad
            out = value
        elif k == "float":
            if isinstance(value, bool) or not isinstance(value, int | float):
                raise bad
            out = float(value)
        elif k == "quantity":
            if not isinstance(value, str):
                hint = f' (did you mean "{value} {self.like}"?)' if isinstance(value, int | float) else ""
                raise ValueError(f"expected {self.describe()}, got {value!r}{hint}")
            try:
                out = units.quantity(value, like=self.like, what="value")
            except UnitError as exc:
                raise ValueError(exc.message.removeprefix("value: ")) from None
            problem = units.implausible(out, self.like)
            if problem:
                raise ValueError(f"{value!r}: {problem}")
        elif k == "unit":
            if not isinstance(value, str):
                raise bad
            try:
                units.unit(value, like=self.like)
            except UnitError as exc:
                raise ValueError(exc.message.removeprefix("unit: ")) from None
            out = value
        elif k == "choice":
            if value not in (self.choices or ()):
                raise ValueError(f"expected {self.describe()}, got {value!r}" + _closest(value, self.choices))
            out = value
        elif k == "list":
            if isinstance(value, str | bytes) or not isinstance(value, list | tuple):
                raise bad
            if self.choices is not None:
                for item in value:
                    if item not in self.choices:
                        raise ValueError(
                            f"{item!r} is not one of "
                            + ", ".join(map(repr, self.choices))
                            + _closest(item, self.choices)
                        )
            out = list(value)
        elif k == "mapping":
            if not isinstance(value, Mapping):
                raise bad
            out = dict(value)
        else:  # pragma: no cover - declaration error caught at registration
            raise ValueError(f"unknown parameter kind {k!r}")
        if isinstance(out, int | float) and not isinstance(out, bool):
            if self.low is not None and out < self.low:
                raise ValueError(f"expected a value >= {self.low}, got {value!r}")
            if self.high is not None and out > self.high:
                raise ValueError(f"expected a value <= {self.high}, got {value!r}")
        if self.check is not None:
            msg = self.check(out)
            if msg:
                raise ValueError(msg)
        return out


KINDS = frozenset({"str", "int", "float", "bool", "quantity", "unit", "choice", "list", "mapping", "any"})


def closest(name: Any, options: Any) -> str | None:
    """The option most like ``name`` (for "did you mean"), or None."""
    if not isinstance(name, str):
        return None
    names = [str(o) for o in options or ()]
    for option in names:
        if option.lower() == name.lower():
            return option  # only the case differs
    hits = difflib.get_close_matches(name, names, n=1, cutoff=0.6)
    return hits[0] if hits else None


def _closest(name: Any, options: Any) -> str:
    hit = closest(name, options)
    return f" (did you mean {hit!r}?)" if hit else ""


def validate(
    declared: Mapping[str, Param], given: Mapping[str, Any]
) -> tuple[dict[str, Any], list[tuple[str, str]]]:
    """Check ``given`` against ``declared``.

    Returns the parsed values (defaults filled in) and a list of ``(key, problem)``; the key is '' for a
    problem with the mapping as a whole. Unknown keys are problems, never silently ignored.
    """
    problems: list[tuple[str, str]] = []
    values: dict[str, Any] = {}
    for key in given:
        if key not in declared:
            valid = ", ".join(declared) or "none"
            problems.append((str(key), f"unknown parameter{_closest(key, declared)}; valid: {valid}"))
    for key, param in declared.items():
        if key in given:
            try:
                values[key] = param.convert(given[key])
            except ValueError as exc:
                problems.append((key, str(exc)))
        elif param.required:
            problems.append((key, f"missing required parameter ({param.describe()})"))
        else:
            default = param.default
            values[key] = param.convert(default) if isinstance(default, str) and param.kind == "quantity" else default
    return values, problems
