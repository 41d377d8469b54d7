"""Quantities as a bench measures them: volumetric-pipette volumes, graduated volumes and masses to two significant
figures (no chemistry here).

A quantitative addition (the aliquot, a standard, a measured excess of titrant) is made with a volumetric pipette
of the usual sizes; a reagent whose amount need only be about right (buffer, masking agent, the base that takes up a
sample's acid) is measured with a graduated pipette, a measuring cylinder or a dispenser, to two significant
figures. A substance weighed for a stock solution is weighed to two significant figures (three where the stock is a
standard or titrant, whose exact mass then enters the calculation). All of this is common practice.
"""
from __future__ import annotations

import math
import re

PIPETTE_mL = (0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 25.0, 50.0, 100.0)  # volumetric pipettes (class A sizes, common practice)
GRADUATED_MIN_mL = 0.1  # the smallest volume a 1 mL graduated pipette measures to about 5 % (common practice)
BALANCE_MIN_mg = 10.0  # the smallest mass an analytical balance (0.1 mg) weighs to about 1 % (common practice)


def sig(x: float, n: int = 2) -> float:
    """``x`` rounded to ``n`` significant figures.

    >>> sig(0.0134), sig(6.56), sig(119.4, 3)
    (0.013, 6.6, 119.0)
    """
    if x == 0 or not math.isfinite(x):
        return x
    return float(f"{x:.{n}g}")


def number(x: float, n: int = 2) -> str:
    """``x`` to ``n`` significant figures as printed (no exponent, no trailing zeros beyond them).

    >>> number(0.0134), number(6.56), number(120.0), number(3.7224, 3)
    ('0.013', '6.6', '120', '3.72')
    """
    v = sig(x, n)
    if v == 0:
        return "0"
    decimals = max(0, n - 1 - math.floor(math.log10(abs(v))))
    return f"{v:.{decimals}f}"


def pipette_mL(volume_mL: float, at_least: bool = False) -> float:
    """The volumetric pipette nearest to ``volume_mL`` (on a log scale), or the smallest one holding at least it.

    >>> pipette_mL(9.0), pipette_mL(6.56, at_least=True), pipette_mL(0.1)
    (10.0, 10.0, 0.5)
    """
    if at_least:
        return next((p for p in PIPETTE_mL if p >= volume_mL * (1 - 1e-9)), PIPETTE_mL[-1])
    return min(PIPETTE_mL, key=lambda p: abs(math.log(p / max(volume_mL, 1e-12))))


def graduated_mL(volume_mL: float) -> float:
    """A volume measured with a graduated pipette, cylinder or dispenser: two significant figures, at least 0.1 mL.

    >>> graduated_mL(0.97), graduated_mL(0.013), graduated_mL(13.14)
    (0.97, 0.1, 13.0)
    """
    return max(GRADUATED_MIN_mL, sig(volume_mL))


def device(volume_mL: float) -> str:
    """What measures a graduated volume: a graduated pipette up to 10 mL, a measuring cylinder above."""
    return "graduated pipette" if volume_mL <= 10 else "measuring cylinder or dispenser"


def is_measurable_volume(volume_mL: float) -> bool:
    """A volume a bench measures: a volumetric pipette's, or two significant figures and at least 0.1 mL.

    >>> is_measurable_volume(25), is_measurable_volume(1.1), is_measurable_volume(0.013), is_measurable_volume(6.56)
    (True, True, False, False)
    """
    return volume_mL in PIPETTE_mL or (volume_mL >= GRADUATED_MIN_mL - 1e-12 and sig(volume_mL) == volume_mL)


def is_weighable_mass(mass_mg: float, figures: int = 3) -> bool:
    """A mass a bench weighs: at least 10 mg, to at most ``figures`` significant figures.

    >>> is_weighable_mass(3720), is_weighable_mass(3.6), is_weighable_mass(1005.3)
    (True, False, False)
    """
    return mass_mg >= BALANCE_MIN_mg - 1e-9 and sig(mass_mg, figures) == mass_mg


# a number (or a range) and a unit of volume or mass, not the unit of a ratio (g/mol, g/mL)
_AMOUNT = re.compile(r"(?<![\w.])(\d+(?:\.\d+)?)(?:\s*-\s*(\d+(?:\.\d+)?))?\s*(mL|uL|µL|L|mg|g|kg)\b(?!/)")


def amounts(text: str) -> list[tuple[float, str]]:
    """Every volume and mass written in ``text``, as (value, unit); a range "1-2 mL" gives both ends; a ratio's unit
    (100.09 g/mol, 1.124 g/mL) is no amount.

    >>> amounts("Add 1.1 mL of the stock (1.124 g/mL) and 0.20 g of the mixture; 1-2 mL per 50 mL")
    [(1.1, 'mL'), (0.2, 'g'), (1.0, 'mL'), (2.0, 'mL'), (50.0, 'mL')]
    """
    out = []
    for m in _AMOUNT.finditer(text):
        out.append((float(m.group(1)), m.group(3)))
        if m.group(2):
            out.append((float(m.group(2)), m.group(3)))
    return out


__all__ = ["PIPETTE_mL", "amounts", "device", "graduated_mL", "is_measurable_volume", "is_weighable_mass", "number",
           "pipette_mL", "sig"]
