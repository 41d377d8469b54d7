"""Stock solutions: what a bench keeps for each reagent (``data/stocks.yaml``), its per-litre recipe for a method,
and how much of it goes into one aliquot, as a volume or mass a bench measures (:mod:`optimiser.quantities`).

No reagent is named here: each stock is found by its reagent's id and section, and a buffer stock is made up by its
reagent entry's recipe kind (:func:`optimiser.procedure.recipe_kind`), with the base and acid forms split as the
ligand's protonation fractions give them at the method's pH, ionic strength and temperature (the split is what the
dilution into the aliquot keeps).
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache

from . import data
from .errors import DataError
from .quantities import GRADUATED_MIN_mL, device, graduated_mL, number, sig
from .reagents import Solution, molar_mass

# the hazard words a stock may carry (stocks.yaml, ``hazards``); GHS's classes in plain words (common practice)
HAZARD_WORDS = ("corrosive", "flammable", "flammable gas", "oxidising", "acutely toxic", "toxic", "toxic fumes", "harmful",
                "irritant", "carcinogenic", "reproductive toxicant", "environmental", "heating")
# what each hazard word asks of the analyst (common practice; the safety data sheet has the full text)
HAZARD_CAUTIONS = {
    "corrosive": "Corrosive: causes severe burns to skin and eyes; wear eye protection, gloves and a lab coat.",
    "flammable": "Flammable (its solvent): keep away from flames and hot plates; close the bottle after use.",
    "flammable gas": "A metal dissolving in acid gives off hydrogen (flammable): dissolve it in a fume hood, away from "
                     "flames and sparks.",
    "oxidising": "Oxidising: keep away from organic matter and reducing agents.",
    "toxic fumes": "Nitric acid gives off toxic nitrous fumes as the metal dissolves: dissolve it in a fume hood.",
    "heating": "Heated: use a hot plate, not a flame, and handle the hot vessel with tongs or heat-resistant gloves.",
    "acutely toxic": "Acutely toxic: small amounts by mouth, skin or breath can kill; work as the safety officer directs.",
    "toxic": "Toxic: avoid contact and ingestion; wear gloves; collect residues.",
    "harmful": "Harmful if swallowed or inhaled; avoid dust and contact.",
    "irritant": "Irritant to eyes and skin; wear eye protection and gloves.",
    "carcinogenic": "Suspected carcinogen: avoid dust and skin contact; keep the amounts small.",
    "reproductive toxicant": "May damage fertility or the unborn child: avoid exposure; pregnant staff ask the safety "
                             "officer.",
    "environmental": "Toxic to aquatic life: collect residues, never down the drain.",
}
HEATING_CAUTION = ("Boiling step: heat on a hot plate (no open flame near flammable solvents) with anti-bumping granules; "
                   "handle the hot flask with tongs or heat-resistant gloves and let it cool before the next reagent.")
MIN_ADDITION_mL = 0.5  # a stock strength is chosen so that an aliquot takes at least this much (common practice)


@dataclass(frozen=True)
class Stock:
    """One stock solution of ``data/stocks.yaml`` (see the file's header for the keys)."""

    section: str
    id: str
    name: str | None
    formula: str | None
    conc_M: tuple[float, ...]
    dissolve: str
    acid_solution: Solution | None
    base_solution: Solution | None
    recipe: str | None
    batch_mL: float
    solid: bool
    hazards: tuple[str, ...]
    shelf_life: str
    timing: str | None
    timing_source: str | None
    source: str
    alkaline_only: bool = False

    def __post_init__(self) -> None:
        where = f"stocks.yaml {self.section}/{self.id}"
        for word in self.hazards:
            if word not in HAZARD_WORDS:
                raise DataError(f"{where}: hazard {word!r} is not known; allowed: {', '.join(HAZARD_WORDS)}")
        if any(not c > 0 for c in self.conc_M):
            raise DataError(f"{where}: conc_M must hold positive molarities; got {list(self.conc_M)}")
        if not self.batch_mL > 0:
            raise DataError(f"{where}: batch_mL must be positive; got {self.batch_mL}")

    def strength_for(self, mmol: float) -> float:
        """The strongest of the stock's strengths [mol/L] that gives at least 0.5 mL for ``mmol``, else the weakest."""
        fits = [c for c in sorted(self.conc_M, reverse=True) if mmol / c >= MIN_ADDITION_mL]
        return fits[0] if fits else min(self.conc_M)


def _solution(d: dict | None) -> Solution | None:
    return None if d is None else Solution(d["name"], d["molarity_M"])


@lru_cache(maxsize=1)
def stocks() -> dict[tuple[str, str], Stock]:
    """Every stock of ``data/stocks.yaml``, by (section, reagent id)."""
    out = {}
    for section in data.STOCK_SECTIONS:
        for d in data.entries("stocks.yaml", section):
            timing = d["timing"] or {}
            out[(section, d["id"])] = Stock(
                section, d["id"], d["name"], d["formula"], tuple(d["conc_M"]), d["dissolve"], _solution(d["acid_solution"]),
                _solution(d["base_solution"]), d["recipe"], d["batch_mL"], d["solid"], tuple(d["hazards"]), d["shelf_life"],
                timing.get("text"), timing.get("source"), d["source"], d["alkaline_only"])
    return out


def stock(section: str, reagent_id: str) -> Stock | None:
    """The stock of a reagent (``section`` as in stocks.yaml: titrants, buffers, masking, indicators, standards)."""
    return stocks().get((section, reagent_id))


def neutraliser() -> Stock:
    """The stock that takes up an acid-preserved sample's own acid (the first of ``neutralisers``)."""
    found = [s for (section, _), s in stocks().items() if section == "neutralisers"]
    if not found:
        raise DataError("stocks.yaml: the section neutralisers needs an entry (the base that takes up a sample's acid)")
    return found[0]


@dataclass(frozen=True)
class StockSolution:
    """A stock as a method's document lists it: its role, label, per-litre recipe, keeping, hazards, source key."""

    role: str
    name: str
    per_litre: str
    shelf_life: str
    hazards: tuple[str, ...]
    source: str


@dataclass(frozen=True)
class Addition:
    """One thing added to the aliquot: a stock by volume, a solid by mass, or an amount the data word (drops).

    ``volume_mL`` / ``mass_mg`` hold the measured amount (None where the amount is worded, e.g. an indicator's dose);
    ``text`` is how the procedure prints it.
    """

    what: str
    volume_mL: float | None
    mass_mg: float | None
    text: str


def formula_text(formula: str) -> str:
    """A salt formula as printed on a bottle: water of crystallisation as a dot.

    >>> formula_text("C2H3NaO2(H2O)3")
    'C2H3NaO2·3H2O'
    """
    return re.sub(r"\(H2O\)(\d*)$", lambda m: f"·{m.group(1)}H2O", formula)


def grams(g: float, figures: int = 2) -> str:
    """A mass for a stock, in g (or mg below 1 g), to ``figures`` significant figures.

    >>> grams(3.7224, 3), grams(0.0644), grams(119.4)
    ('3.72 g', '64 mg', '120 g')
    """
    return f"{number(g, figures)} g" if g >= 1 else f"{number(g * 1000, figures)} mg"


def millilitres(v: float) -> str:
    return f"{number(v)} mL"


def graduated_addition(what: str, mmol: float, st: Stock, label: str) -> tuple[Addition, float]:
    """``mmol`` of a reagent as a graduated volume of its stock (strength chosen by :meth:`Stock.strength_for`);
    returns the addition and the mmol that volume holds."""
    c = st.strength_for(mmol)
    v = graduated_mL(mmol / c)
    return Addition(what, v, None, f"{millilitres(v)} of {label} ({c:g} mol/L; {device(v)})"), v * c


def per_litre(formula: str, conc_M: float, salt: str, figures: int = 2, density_g_mL: float | None = None) -> str:
    """'3.72 g disodium EDTA dihydrate' for a stock of ``conc_M`` [mol/L] of ``formula``; a liquid also by volume."""
    g = conc_M * molar_mass(formula)
    volume = f" ({millilitres(g / density_g_mL)})" if density_g_mL else ""
    return f"{grams(g, figures)}{volume} {salt}"


def solution_volume(mmol_per_L: float, solution: Solution) -> str:
    """The volume of a concentrated solution holding ``mmol_per_L`` per litre of stock."""
    return f"{millilitres(mmol_per_L / solution.molarity_M)} {solution.name}"


def buffer_per_litre(kind: str, st: Stock, recipe, conc_M: float, base_fraction: float) -> str:
    """The per-litre recipe of a buffer stock of total ``conc_M`` [mol/L], its base form ``base_fraction`` of it.

    ``kind`` is the recipe kind (:func:`optimiser.procedure.recipe_kind`), ``recipe`` the buffer's
    :class:`~optimiser.reagents.BufferRecipe`; the stock's own concentrated solutions replace the recipe's.
    """
    acid = st.acid_solution or recipe.acid_solution
    base = st.base_solution or recipe.base_solution
    n_base, n_acid = conc_M * base_fraction * 1000, conc_M * (1 - base_fraction) * 1000  # mmol per litre
    if kind == "acid_salt_and_base_solution":
        return (f"{grams(n_acid * molar_mass(recipe.acid_formula) / 1000)} {formula_text(recipe.acid_formula)} and "
                f"{solution_volume(n_base, base)}")
    if kind == "base_salt_and_acid_solution":
        return (f"{grams(n_base * molar_mass(recipe.base_formula) / 1000)} {formula_text(recipe.base_formula)} and "
                f"{solution_volume(n_acid, acid)}")
    if kind == "base_and_strong_acid":
        return (f"{grams(conc_M * molar_mass(recipe.base_formula))} {formula_text(recipe.base_formula)} and "
                f"{solution_volume(n_acid, acid)}")
    if kind == "strong_base" and (recipe.base_formula or st.formula):
        formula = recipe.base_formula or st.formula
        return f"{grams(conc_M * molar_mass(formula))} {formula_text(formula)}"
    if kind == "strong_acid":
        return solution_volume(conc_M * 1000, acid)
    return "no stock: the pH is set with a pH meter"


__all__ = ["Addition", "GRADUATED_MIN_mL", "HAZARD_CAUTIONS", "HAZARD_WORDS", "HEATING_CAUTION", "Stock", "StockSolution",
           "buffer_per_litre", "formula_text", "graduated_addition", "grams", "millilitres", "neutraliser", "per_litre",
           "sig", "stock", "stocks"]
