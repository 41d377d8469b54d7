"""Quantities as analysts write them: "80 mg/L", "2.5 mmol/L", "5 µmol/L", "0.01 M", "150 mg/L as CaCO3".

Units are parsed by pint; molar masses come from the periodictable package. ppm is taken as mg/L
(dilute aqueous samples, density 1: a stated assumption).
"""
from __future__ import annotations

import math
import re
from functools import lru_cache

import periodictable
import pint

from .constants import database
from .errors import InputError, quoted

CONCENTRATION_UNITS = "mol/L, M, mmol/L, mM, umol/L (or µmol/L), mg/L, g/L, ppm, ug/L, and 'mg/L as CaCO3'"
VOLUME_UNITS = "mL, L, uL (or µL)"
MAX_QUANTITY_CHARS = 100  # "150 mg/L as CaCO3" is 17
# What the inputs may be. A concentration below the floor is zero for every purpose of a titration (and a subnormal
# float stops the solver); one above the ceiling is not an aqueous solution.
CONCENTRATION_RANGE_M = (1e-12, 10.0)
SAMPLE_VOLUME_RANGE_mL = (0.1, 1000.0)
BURETTE_RANGE_mL = (1.0, 100.0)
_AS = re.compile(r"^(?P<q>.+?)\s+as\s+(?P<formula>[A-Za-z0-9()]+)\s*$")
_NUMBER = re.compile(r"^\s*(?P<v>[-+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?)\s*(?P<u>.*?)\s*$")
# A unit as the inputs write one: names (letters, µ, °) joined by / or *, each with an optional small power
# ("mol/L", "mol / dm^3", "mg/L"). Anything else (digits, brackets, operators, trailing text) is not read at all, so
# that pint never sees "1/0", "**1e9" or "mol/L + 3".
_UNIT = re.compile(r"^[A-Za-zµμ°]{1,12}(\^-?[1-3]|\*\*-?[1-3])?(\s*[/*]\s*[A-Za-zµμ°]{1,12}(\^-?[1-3]|\*\*-?[1-3])?){0,3}$")


def _finite(v: float, text: object) -> float:
    if not math.isfinite(v):
        raise InputError(f"{text!r} is not a finite number")
    return v


def real(value: object, what: str, text_ok: bool = False) -> float:
    """A finite real number from a YAML or command-line value (a bool, an overflowing integer, NaN and inf refused;
    text such as ``"2.5"`` only where ``text_ok``)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise InputError(f"{what} must be a number; got {quoted(value)}")
    if isinstance(value, str):
        m = _NUMBER.match(value)
        if not m or m.group("u"):
            raise InputError(f"{what} must be a number; got {quoted(value)}")
        if not text_ok:
            raise InputError(f"{what} must be a number, not the text {quoted(value)}; write it without quotes (YAML "
                             "reads 1e-3 as text: write 0.001 or 1.0e-3)")
        value = m.group("v")
    try:
        v = float(value)
    except OverflowError:
        raise InputError(f"{what} must be a finite number; got a number of {len(str(value))} digits") from None
    if not math.isfinite(v):
        raise InputError(f"{what} must be a finite number; got {v}")
    return v


def in_range(v: float, lo: float, hi: float, what: str, unit: str, zero_ok: bool = False) -> float:
    """``v`` if ``lo <= v <= hi`` (or 0 where ``zero_ok``); else an :class:`InputError` saying what is allowed."""
    if lo <= v <= hi or (zero_ok and v == 0):
        return v
    allowed = f"{'0, or ' if zero_ok else ''}between {lo:g} and {hi:g} {unit}"
    raise InputError(f"{what} must be {allowed}; got {v:.4g} {unit}")


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """pint's registry of its default units, its parsed definitions kept in pint's own cache folder (the user's
    cache directory) where that can be written: reading them parses pint's definitions file otherwise (about 0.25 s
    against 0.03-0.05 s from the cache, measured)."""
    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except Exception:  # no cache folder to be had (a read-only home, say): parsed as usual
        return pint.UnitRegistry()


def _quantity(text: str, allowed: str = CONCENTRATION_UNITS) -> pint.Quantity:
    ureg = registry()
    if len(text) > MAX_QUANTITY_CHARS:
        raise InputError(f"a quantity is at most {MAX_QUANTITY_CHARS} characters; got {len(text)}")
    m = _NUMBER.match(text)
    if not m:
        raise InputError(f"cannot read {quoted(text)} as a number with a unit")
    v = _finite(float(m.group("v")), text)
    unit = m.group("u").replace("µ", "u").replace("μ", "u")
    if unit.lower() == "ppm":
        unit = "mg/L"
    elif unit.lower() == "ppb":
        unit = "ug/L"
    elif unit == "mM":
        unit = "mmol/L"
    elif unit == "uM":
        unit = "umol/L"
    if unit and not _UNIT.match(unit):
        raise InputError(f"unknown unit {quoted(unit)} in {quoted(text)}; allowed: {allowed}")
    try:
        q = ureg.Quantity(v, unit or "dimensionless")
        magnitude = float(q.magnitude)
    except Exception as exc:
        raise InputError(f"unknown unit {quoted(unit)} in {quoted(text)}; allowed: {allowed}") from exc
    _finite(magnitude, text)
    return q


def _converted(q: pint.Quantity, unit, text: object) -> float:
    try:
        v = float(q.to(unit).magnitude)
    except (OverflowError, ZeroDivisionError, ValueError, pint.errors.PintError) as exc:
        raise InputError(f"cannot convert {quoted(text)}") from exc
    return _finite(v, text)


def formula_mass(formula: str) -> float:
    """Molar mass [g/mol] of a formula (periodictable syntax, e.g. ``CaCO3``); anything else an :class:`InputError`.

    >>> round(formula_mass("CaCO3"), 2)
    100.09
    """
    if not isinstance(formula, str) or not re.fullmatch(r"[A-Z][A-Za-z0-9()]{0,49}", formula.strip()):
        raise InputError(f"{quoted(formula)} is not a formula; allowed: a formula such as CaCO3 or ZnO "
                         "(element symbols, counts and brackets)")
    try:
        mass = float(periodictable.formula(formula.strip()).mass)
    except Exception as exc:
        raise InputError(f"{quoted(formula)} is not a formula; allowed: a formula such as CaCO3 or ZnO") from exc
    if not (math.isfinite(mass) and mass > 0):
        raise InputError(f"{quoted(formula)} is not a formula; allowed: a formula such as CaCO3 or ZnO")
    return mass


def molar_mass_of_metal(metal: str) -> float:
    """g/mol of a metal id (``"Fe(III)"`` -> Fe) from periodictable."""
    db = database()
    element = db.metals[db.metal(metal)]["element"]
    return float(getattr(periodictable, element).mass)


def concentration_M(value: object, species: str | None = None, molar_mass_g_mol: float | None = None) -> float:
    """A concentration in mol/L from a string with units, for a metal (mass units need ``species``).

    Parameters
    ----------
    value : str
        ``"2 mmol/L"``, ``"80 mg/L"``, ``"150 mg/L as CaCO3"``; a bare number is refused (a sample's metals need
        their unit: mg/L and mmol/L differ by a factor of 25 to 200, and both are common).
    species : str, optional
        Metal id whose molar mass converts mass concentrations.
    molar_mass_g_mol : float, optional
        The molar mass that converts a mass concentration written without "as" [g/mol] (instead of ``species``).

    Examples
    --------
    >>> round(concentration_M("100.09 mg/L as CaCO3"), 6)
    0.001
    >>> concentration_M("2.5 mmol/L")
    0.0025
    """
    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        raise InputError(f"a concentration must be a number with a unit ({CONCENTRATION_UNITS}); got {quoted(value)}")
    if not isinstance(value, str):
        raise InputError(f"give a unit with the concentration {quoted(value)} (allowed: {CONCENTRATION_UNITS})")
    text = value.strip()
    if len(text) > MAX_QUANTITY_CHARS:
        raise InputError(f"a quantity is at most {MAX_QUANTITY_CHARS} characters; got {len(text)}")
    as_match = _AS.match(text)
    molar_mass = None
    if as_match:
        text = as_match.group("q")
        molar_mass = formula_mass(as_match.group("formula"))
    q = _quantity(text)
    if q.magnitude < 0:
        raise InputError(f"a concentration cannot be negative; got {quoted(value)}")
    ureg = registry()
    if q.check("[substance] / [length] ** 3"):
        if molar_mass is not None:
            raise InputError(f"'as {as_match.group('formula')}' goes with a mass concentration such as mg/L; "
                             f"got {quoted(value)}")
        return _converted(q, ureg.mol / ureg.L, value)
    if q.check("[mass] / [length] ** 3"):
        if molar_mass is None:
            molar_mass = molar_mass_g_mol
        if molar_mass is None:
            if species is None:
                raise InputError(f"a mass concentration needs a species to convert it; give {quoted(value)} in mol/L")
            molar_mass = molar_mass_of_metal(species)
        return _converted(q, ureg.g / ureg.L, value) / molar_mass
    raise InputError(f"{quoted(value)} is not a concentration; allowed units: {CONCENTRATION_UNITS}")


def volume_mL(value: object) -> float:
    """A volume in mL from ``"50 mL"``, ``"0.05 L"`` or a bare number, which is taken as mL.

    >>> volume_mL("0.05 L"), volume_mL(25)
    (50.0, 25.0)
    """
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise InputError(f"a volume must be a number with a unit ({VOLUME_UNITS}); got {quoted(value)}")
    if isinstance(value, (int, float)):
        v = real(value, "a volume")
    else:
        q = _quantity(value, VOLUME_UNITS)
        if q.dimensionless:
            v = float(q.magnitude)
        elif q.check("[length] ** 3"):
            v = _converted(q, registry().mL, value)
        else:
            raise InputError(f"{quoted(value)} is not a volume; allowed units: {VOLUME_UNITS}")
    if not v > 0:
        raise InputError(f"a volume must be positive; got {quoted(value)}")
    return v


def temperature_C(value: object) -> float:
    """A temperature in degC from ``25`` (a bare number is degC), ``"25 degC"``, ``"25 °C"`` or ``"298.15 K"``."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise InputError(f"a temperature must be a number (degC) or a number with degC or K; got {quoted(value)}")
    if isinstance(value, (int, float)):
        return real(value, "a temperature")
    m = _NUMBER.match(value) if len(value) <= MAX_QUANTITY_CHARS else None
    if not m:
        raise InputError(f"cannot read temperature {quoted(value)}; allowed: a number with degC or K")
    v, u = _finite(float(m.group("v")), value), m.group("u").replace("°", "deg").strip()
    if u in ("", "C", "degC", "deg C", "celsius"):
        return v
    if u == "K":
        return v - 273.15
    raise InputError(f"unknown temperature unit {quoted(u)}; allowed: degC or K")


def molarity(value: object, what: str) -> float:
    """A reagent's concentration in mol/L: a bare number is mol/L; a string may carry a molar or mass unit.

    Used for the titrant, buffers, masking agents, ligands and the ionic strength, in scenarios and on the command
    line alike. The result is finite and 0 or more; see :func:`reagent_M` for the allowed range.
    """
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise InputError(f"{what} must be a concentration in mol/L; got {quoted(value)}")
    try:
        if isinstance(value, (int, float)):
            c = real(value, what)
        else:
            q = _quantity(value)
            c = float(q.magnitude) if q.dimensionless else concentration_M(value)
    except InputError as exc:
        raise InputError(f"{what}: {exc}") from None
    if c < 0:
        raise InputError(f"{what} cannot be negative; got {quoted(value)}")
    return c


def reagent_M(value: object, what: str, zero_ok: bool = False) -> float:
    """:func:`molarity` within :data:`CONCENTRATION_RANGE_M` (or 0 where ``zero_ok``).

    >>> reagent_M("10 mM", "dose of TEA")
    0.01
    >>> reagent_M("1e300M", "dose of cyanide")
    Traceback (most recent call last):
    ...
    optimiser.errors.InputError: dose of cyanide must be between 1e-12 and 10 mol/L; got 1e+300 mol/L
    """
    lo, hi = CONCENTRATION_RANGE_M
    return in_range(molarity(value, what), lo, hi, what, "mol/L", zero_ok)
