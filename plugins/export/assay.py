"""The recipe's ``assay`` block: the conditions that flow into exports and the reporting checklist.

Checked with the recipe (through the ``vzero_check_recipe`` hook) so that a misspelt key or a temperature
without its unit is found before anything runs, not when an export is made months later.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

from vzero.params import Param, closest

#: Molecule blocks: free-text identity fields.
MOLECULE_KEYS = {"name", "id", "ec_number", "organism", "sequence", "concentration", "smiles", "inchi", "source"}

ASSAY: dict[str, Param] = {
    "temperature": Param.quantity("degC", doc='assay temperature, e.g. "30 degC"'),
    "pH": Param("float", doc="assay pH", low=0.0, high=14.0),
    "buffer": Param("str", doc='buffer and its concentration, e.g. "50 mM HEPES, 100 mM KCl"'),
    "volume": Param.quantity("L", doc='reaction volume per well, e.g. "200 uL"'),
    "detection": Param("str", doc='how the signal was read, e.g. "absorbance at 340 nm"'),
    "reaction": Param("str", doc="the reaction, in words"),
    "measured": Param("str", doc="the species the signal follows (default product)"),
    "enzyme": Param("mapping", doc="name, id, ec_number, organism, sequence, concentration"),
    "substrate": Param("mapping", doc="name, id, smiles, inchi"),
    "product": Param("mapping", doc="name, id, smiles, inchi"),
    "inhibitor": Param("mapping", doc="name, id, smiles, inchi"),
    "creators": Param("list", doc="people: mappings with given_name, family_name, mail"),
    "notes": Param("str", doc="free text"),
}


def check_assay(recipe: Mapping[str, Any], where: Callable[[tuple[Any, ...]], str]) -> list[str]:
    """One message per problem in ``recipe['assay']`` (unknown keys with the closest name, wrong types or
    units, unknown keys inside the molecule blocks)."""
    assay = recipe.get("assay")
    if not isinstance(assay, Mapping):
        return []  # absent, or not a mapping (the top-level check reports that)
    problems = []
    for key, value in assay.items():
        path = ("assay", key)
        if key not in ASSAY:
            hit = closest(key, ASSAY)
            near = f" (did you mean {hit!r}?)" if hit else ""
            problems.append(f"{where(path)}: unknown assay item{near}; known: {', '.join(ASSAY)}")
            continue
        try:
            ASSAY[key].convert(value)
        except ValueError as exc:
            problems.append(f"{where(path)}: {exc}")
            continue
        if key in ("enzyme", "substrate", "product", "inhibitor"):
            for inner in value:
                if inner not in MOLECULE_KEYS:
                    hit = closest(inner, MOLECULE_KEYS)
                    near = f" (did you mean {hit!r}?)" if hit else ""
                    problems.append(f"{where((*path, inner))}: unknown item{near}; known: "
                                    f"{', '.join(sorted(MOLECULE_KEYS))}")
    return problems
