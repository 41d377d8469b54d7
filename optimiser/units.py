"""Quantities as analysts write them: "80 mg/L", "2.5 mmol/L", "5 µmol/L", "0.01 M", "150 mg/L as CaCO3".

Units are parsed by pint; molar masses come from the periodictable package. ppm is taken as mg/L
(dilute aqueous samples, density 1: a stated assumption).
"""
from __future__ import annotations

import re
from functools import lru_cache

import periodictable
import pint

from .constants import database
from .errors import InputError

CONCENTRATION_UNITS = "mol/L, M, mmol/L, mM, umol/L (or µmol/L), mg/L, g/L, ppm, ug/L, and 'mg/L as CaCO3'"
_AS = re.compile(r"^(?P<q>.+?)\s+as\s+(?P<formula>[A-Za-z0-9()]+)\s*$")
_NUMBER = re.compile(r"^\s*(?P<v>[-+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?)\s*(?P<u>.*?)\s*$")


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    return pint.UnitRegistry()


def _quantity(text: str) -> pint.Quantity:
    ureg = registry()
    m = _NUMBER.match(text)
    if not m:
        raise InputError(f"cannot read {text!r} as a number with a unit")
    unit = m.group("u").replace("µ", "u").replace("μ", "u")
    if unit.lower() == "ppm":
        unit = "mg/L"
    elif unit.lower() == "ppb":
        unit = "ug/L"
    elif unit == "mM":
        unit = "mmol/L"
    elif unit == "uM":
        unit = "umol/L"
    try:
        return ureg.Quantity(float(m.group("v")), unit or "dimensionless")
    except (pint.errors.UndefinedUnitError, pint.errors.DefinitionSyntaxError, AttributeError, TypeError, ValueError, AssertionError) as exc:
        raise InputError(f"unknown unit {unit!r} in {text!r}; allowed: {CONCENTRATION_UNITS}") from exc


def molar_mass_of_metal(metal: str) -> float:
    """g/mol of a metal id (``"Fe(III)"`` -> Fe) from periodictable."""
    db = database()
    element = db.metals[db.metal(metal)]["element"]
    return float(getattr(periodictable, element).mass)


def concentration_M(value: object, species: str | None = None) -> float:
    """A concentration in mol/L from a string with units, for a metal (mass units need ``species``).

    Parameters
    ----------
    value : str or number
        ``"2 mmol/L"``, ``"80 mg/L"``, ``"150 mg/L as CaCO3"``; a bare number is refused (units are required).
    species : str, optional
        Metal id whose molar mass converts mass concentrations.

    Examples
    --------
    >>> round(concentration_M("100.09 mg/L as CaCO3"), 6)
    0.001
    >>> concentration_M("2.5 mmol/L")
    0.0025
    """
    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        raise InputError(f"a concentration must be a number with a unit ({CONCENTRATION_UNITS}); got {value!r}")
    if not isinstance(value, str):
        raise InputError(f"give a unit with the concentration {value!r} (allowed: {CONCENTRATION_UNITS})")
    text = value.strip()
    as_match = _AS.match(text)
    molar_mass = None
    if as_match:
        text = as_match.group("q")
        formula = as_match.group("formula")
        try:
            molar_mass = float(periodictable.formula(formula).mass)
        except (ValueError, KeyError, TypeError) as exc:
            raise InputError(f"unknown formula {formula!r} after 'as' in {value!r}") from exc
    q = _quantity(text)
    if q.magnitude < 0:
        raise InputError(f"a concentration cannot be negative; got {value!r}")
    ureg = registry()
    if q.check("[substance] / [length] ** 3"):
        if molar_mass is not None:
            raise InputError(f"'as {as_match.group('formula')}' goes with a mass concentration such as mg/L; got {value!r}")
        return float(q.to(ureg.mol / ureg.L).magnitude)
    if q.check("[mass] / [length] ** 3"):
        if molar_mass is None:
            if species is None:
                raise InputError(f"a mass concentration needs a species to convert it; give {value!r} in mol/L")
            molar_mass = molar_mass_of_metal(species)
        return float(q.to(ureg.g / ureg.L).magnitude) / molar_mass
    raise InputError(f"{value!r} is not a concentration; allowed units: {CONCENTRATION_UNITS}")


def volume_mL(value: object) -> float:
    """A volume in mL from ``"50 mL"``, ``"0.05 L"`` or a bare number taken as mL."""
    if isinstance(value, bool):
        raise InputError(f"a volume must be a number with a unit such as mL; got {value!r}")
    if isinstance(value, (int, float)):
        v = float(value)
    elif isinstance(value, str):
        q = _quantity(value)
        if q.dimensionless:
            v = float(q.magnitude)
        elif q.check("[length] ** 3"):
            v = float(q.to(registry().mL).magnitude)
        else:
            raise InputError(f"{value!r} is not a volume (use mL or L)")
    else:
        raise InputError(f"a volume must be a number with a unit such as mL; got {value!r}")
    if not v > 0 or v != v or v == float("inf"):
        raise InputError(f"a volume must be positive; got {value!r}")
    return v


def temperature_C(value: object) -> float:
    """A temperature in degC from ``25``, ``"25 degC"``, ``"25 °C"`` or ``"298.15 K"``."""
    if isinstance(value, bool):
        raise InputError(f"a temperature must be a number (degC); got {value!r}")
    if isinstance(value, (int, float)):
        return float(value)
    if not isinstance(value, str):
        raise InputError(f"a temperature must be a number (degC); got {value!r}")
    m = _NUMBER.match(value)
    if not m:
        raise InputError(f"cannot read temperature {value!r}")
    v, u = float(m.group("v")), m.group("u").replace("°", "deg").strip()
    if u in ("", "C", "degC", "deg C", "celsius"):
        return v
    if u == "K":
        return v - 273.15
    raise InputError(f"unknown temperature unit {u!r}; use degC or K")


def molarity(value: object, what: str) -> float:
    """A concentration given as a number (mol/L) or with molar units, for reagents and ionic strength."""
    if isinstance(value, bool):
        raise InputError(f"{what} must be a concentration; got {value!r}")
    if isinstance(value, (int, float)):
        c = float(value)
    elif isinstance(value, str):
        q = _quantity(value)
        c = float(q.magnitude) if q.dimensionless else concentration_M(value)
    else:
        raise InputError(f"{what} must be a concentration in mol/L; got {value!r}")
    if c != c or c < 0 or c == float("inf"):
        raise InputError(f"{what} must be a concentration of 0 or more; got {value!r}")
    return c
