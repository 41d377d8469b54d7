"""The sample's own anions (carbonate or alkalinity, sulfate, orthophosphate, chloride): how a scenario gives them and
what the procedure does about them.

``data/anions.yaml`` lists the names a scenario may use under ``sample.anions`` (each for one ligand of the constants
tables) with the formula that converts a mass concentration, and the anions that can be driven off before a titration
(carbonate, as CO2). :func:`anion_totals` turns a scenario's block into ligand totals [mol/L]; the simulation carries
each as a component of the equilibrium, diluted along the curve like the metals (:func:`optimiser.titration.plan`).
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import lru_cache

from . import data
from .errors import DataError, InputError, UnknownNameError, quoted


@dataclass(frozen=True)
class AnionLigand:
    """An anion the model holds, as a ligand of the constants tables.

    Attributes
    ----------
    id : str
        Ligand id (``"carbonate"``).
    name : str
    expel : str
        How it is driven off before the titration ("" where it cannot be).
    expel_source : str
        Reference key of that practice ("" where there is none).
    assumption : str
        What the model assumes about it ("" where nothing).
    """

    id: str
    name: str
    expel: str = ""
    expel_source: str = ""
    assumption: str = ""


@dataclass(frozen=True)
class AnionInput:
    """A name a scenario may give under ``sample.anions``, and how its concentration converts to the ligand's total.

    Attributes
    ----------
    id, ligand : str
        The input's name and the ligand it counts.
    formula : str
        Formula of a mass concentration written without "as" (``"SO4"``).
    as_formulas : Mapping[str, float]
        Formulas a mass may be expressed as -> mol of the ligand per mol of that formula (alkalinity as CaCO3: 2).
    molar : str
        What a molar concentration counts.
    aliases : tuple of str
    note : str
        The assumption the input rests on ("" where none).
    """

    id: str
    ligand: str
    formula: str
    as_formulas: Mapping[str, float] = field(default_factory=dict)
    molar: str = ""
    aliases: tuple[str, ...] = ()
    note: str = ""


@lru_cache(maxsize=1)
def ligands() -> dict[str, AnionLigand]:
    """The anions the model holds, by ligand id; each must be a ligand of ``reagents.yaml``."""
    known = {e["id"] for e in data.entries("reagents.yaml", "ligands")}
    out = {}
    for e in data.entries("anions.yaml", "ligands"):
        if e["id"] not in known:
            raise DataError("not a ligand of reagents.yaml (give it a charge there)", "anions.yaml", f"ligands/{e['id']}", "id")
        out[e["id"]] = AnionLigand(e["id"], e["name"], " ".join((e["expel"] or "").split()), e["expel_source"] or "",
                                   " ".join(e["assumption"].split()))
    return out


@lru_cache(maxsize=1)
def inputs() -> dict[str, AnionInput]:
    """The names a scenario may use under ``sample.anions``, by id."""
    from .units import formula_mass

    out = {}
    for e in data.entries("anions.yaml", "inputs"):
        where = ("anions.yaml", f"inputs/{e['id']}")
        if e["ligand"] not in ligands():
            raise DataError(f"unknown ligand; allowed: {', '.join(ligands())}", *where, "ligand")
        for f in [e["formula"], *e["as"]]:
            try:
                formula_mass(f)
            except InputError as exc:
                raise DataError(str(exc), *where, "formula") from None
        out[e["id"]] = AnionInput(e["id"], e["ligand"], e["formula"], dict(e["as"]), e["molar"], tuple(e["aliases"]),
                                  " ".join(e["note"].split()))
    return out


def resolve(name: str) -> AnionInput:
    """The input a scenario's name means (id or alias; case and the difference between space, - and _ ignored).

    >>> resolve("Sulphate").id
    'sulfate'
    """
    table = inputs()
    key = _key(name)
    for ident, entry in table.items():
        if key in {_key(s) for s in (ident, *entry.aliases)}:
            return entry
    raise UnknownNameError("sample anion", str(name), list(table), {a: k for k, v in table.items() for a in v.aliases})


def _key(name: object) -> str:
    return str(name).strip().lower().replace(" ", "").replace("-", "").replace("_", "")


def total_M(entry: AnionInput, value: object) -> float:
    """The ligand's total [mol/L] from a concentration as analysts write it.

    A molar concentration counts what ``entry.molar`` says; a mass concentration is of ``entry.formula`` unless it says
    "as X", where X must be one of ``entry.as_formulas`` (mol of ligand per mol of X).

    Examples
    --------
    250 mg/L of alkalinity as CaCO3 is 5.0 mmol/L of hydrogencarbonate (two equivalents per CaCO3):

    >>> round(total_M(resolve("alkalinity"), "250 mg/L as CaCO3") * 1000, 3)
    4.996
    >>> round(total_M(resolve("sulfate"), "96.06 mg/L") * 1000, 3)
    1.0
    """
    from .units import _AS, concentration_M, formula_mass

    m = _AS.match(value.strip()) if isinstance(value, str) else None
    if m:
        f = m.group("formula")
        if f not in entry.as_formulas:
            raise InputError(f"{entry.id} may be given 'as' {_or(entry.as_formulas)}; got 'as {f}'")
        return concentration_M(value) * entry.as_formulas[f]
    return concentration_M(value, molar_mass_g_mol=formula_mass(entry.formula))


def _or(names) -> str:
    names = list(names)
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " or " + names[-1]


def anion_totals(block: Mapping[str, object]) -> tuple[dict[str, float], list[str]]:
    """Ligand totals [mol/L] from a ``sample.anions`` block, and the notes of the inputs used.

    Raises
    ------
    InputError
        A name that is not an anion (with a did-you-mean), two names for one ligand (carbonate and alkalinity), or a
        concentration that cannot be read.
    """
    totals: dict[str, float] = {}
    given: dict[str, str] = {}
    notes: list[str] = []
    for name, value in block.items():
        entry = resolve(str(name))
        if entry.ligand in given:
            raise InputError(f"{quoted(name)} and {quoted(given[entry.ligand])} both give the sample's "
                             f"{ligands()[entry.ligand].name}; give one of them")
        given[entry.ligand] = str(name)
        totals[entry.ligand] = total_M(entry, value)
        if entry.note:
            notes.append(entry.note)
    return totals, notes


def assumptions(anions: Mapping[str, float]) -> list[str]:
    """What the model assumes about the anions a sample holds (ligand id -> total), from the data."""
    table = ligands()
    return [table[a].assumption for a, c in anions.items() if c > 0 and table[a].assumption]
