"""vzero's own unit list (pipeline/units.txt) against the definitions of the units it holds."""

from __future__ import annotations

import pytest
from vzero import units
from vzero.errors import UnitError

# (from, to, factor): each factor is a definition, with its source
DEFINITIONS = [
    ("L", "m^3", 1e-3),  # SI Brochure, 9th ed. (BIPM 2019), Table 8: 1 L = 1 dm^3
    ("uL", "L", 1e-6),  # SI prefix micro (SI Brochure Table 7)
    ("µL", "L", 1e-6),  # the micro sign (U+00B5)
    ("μL", "L", 1e-6),  # the Greek letter mu (U+03BC)
    ("M", "mol/m^3", 1e3),  # molar = mol/L (IUPAC Green Book, 3rd ed., 2.10)
    ("nM", "uM", 1e-3),
    ("min", "s", 60.0),  # SI Brochure Table 8
    ("h", "min", 60.0),  # SI Brochure Table 8
    ("d", "h", 24.0),  # SI Brochure Table 8
    ("Da", "kg", 1.66053906660e-27),  # CODATA 2018 atomic mass constant (1 Da = 1 u)
    ("U", "nkat", 1e3 / 60),  # IUBMB (1978): 1 U = 1 µmol/min = 1/60 µkat
    ("kat", "mol/s", 1.0),  # SI Brochure Table 4
    ("rpm", "Hz", 1 / 60),
    ("%", "", 0.01),
    ("ppm", "", 1e-6),
    ("mAU", "AU", 1e-3),
    ("cpm", "count/s", 1 / 60),
    ("cps", "count/min", 60.0),
    ("dpm", "Bq", 1 / 60),  # one disintegration per minute
    ("Ci", "GBq", 37.0),  # the curie is defined as exactly 3.7e10 Bq (from memory; an older non-SI unit)
    ("uCi", "kBq", 37.0),
    ("week", "d", 7.0),
    ("‰", "%", 0.1),
    ("M^-1 cm^-1", "mM^-1 cm^-1", 1e-3),  # 6220 M^-1 cm^-1 = 6.22 mM^-1 cm^-1
]


@pytest.mark.parametrize(("unit_from", "unit_to", "expected"), DEFINITIONS)
def test_each_unit_has_its_defined_size(unit_from: str, unit_to: str, expected: float) -> None:
    assert units.factor(unit_from, unit_to) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(("text", "kelvin"), [
    ("0 degC", 273.15),  # SI Brochure 2.3.1: t/°C = T/K − 273.15
    ("25 °C", 298.15),
    ("32 degF", 273.15),  # Fahrenheit: 32 °F is the ice point, 212 °F the steam point
    ("212 degF", 373.15),
])
def test_temperatures_keep_their_offsets(text: str, kelvin: float) -> None:
    assert units.quantity(text, like="K").m_as("K") == pytest.approx(kelvin, rel=1e-12)


def test_signals_are_dimensionless_counts() -> None:
    for name in ("AU", "RFU", "RLU", "count"):
        assert units.registry().Quantity(1, name).dimensionless


def test_an_unknown_unit_says_which_units_vzero_knows() -> None:
    with pytest.raises(UnitError, match="furlong") as info:
        units.unit("furlong/fortnight")
    assert "vzero knows" in str(info.value) and "units.txt" in str(info.value)
    with pytest.raises(UnitError, match="vzero knows"):
        units.quantity("3 furlong", like="m")
