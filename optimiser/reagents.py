"""The reagents a method can use: titrants, buffers, masking agents and indicators (from the data folder).

Molar masses are computed from each reagent's formula with the periodictable package, not typed in.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import periodictable

from . import data
from .constants import database
from .errors import UnknownNameError

HAZARD_NAMES = ("none", "low", "moderate", "high", "severe")


def molar_mass(formula: str) -> float:
    """Molar mass [g/mol] of a formula such as ``"Na2S2O3(H2O)5"`` (periodictable).

    >>> round(molar_mass("Na2S2O3(H2O)5"), 2)
    248.17
    """
    return float(periodictable.formula(formula).mass)


@dataclass(frozen=True)
class Titrant:
    id: str
    name: str
    formula: str
    salt: str
    hazard: int
    cautions: tuple[str, ...]

    @property
    def molar_mass(self) -> float:
        return molar_mass(self.formula)

    @property
    def complexity(self) -> float:
        return 0.0 if self.id == "EDTA" else 0.5


@dataclass(frozen=True)
class Buffer:
    id: str
    name: str
    ligand: str | None
    pH_range: tuple[float, float]
    hazard: int
    cautions: tuple[str, ...]
    default_total_M: float = 0.0
    raw: dict = field(default_factory=dict, compare=False, repr=False)


@dataclass(frozen=True)
class MaskingAgent:
    id: str
    name: str
    ligand: str
    formula: str
    salt: str
    min_pH: float
    dose_range_M: tuple[float, float]
    hazard: int
    cautions: tuple[str, ...]
    reduces: dict = field(default_factory=dict, compare=False)
    masks: dict = field(default_factory=dict, compare=False)
    density_g_mL: float | None = None

    @property
    def molar_mass(self) -> float:
        return molar_mass(self.formula)


@dataclass(frozen=True)
class Indicator:
    id: str
    name: str
    aliases: tuple[str, ...]
    forms: dict
    metal_colour: str
    usable_pH: tuple[float, float]
    blocked_by: tuple[str, ...]
    needs_Mg_for_Ca: bool
    conc_M: float
    dose: str
    hazard: int
    sources: tuple[str, ...]

    def free_colour(self, protons: int) -> str:
        return self.forms.get(protons, self.forms.get(str(protons), "?"))

    def complex_colour(self, metal: str) -> str:
        return self.metal_colour.split(" (")[0]


@dataclass(frozen=True)
class Catalogue:
    titrants: dict[str, Titrant]
    buffers: dict[str, Buffer]
    masking: dict[str, MaskingAgent]
    indicators: dict[str, Indicator]

    def titrant(self, name: str) -> Titrant:
        return _pick(self.titrants, name, "titrant")

    def buffer(self, name: str) -> Buffer:
        return _pick(self.buffers, name, "buffer")

    def masking_agent(self, name: str) -> MaskingAgent:
        return _pick(self.masking, name, "masking agent")

    def indicator(self, name: str) -> Indicator:
        if name in self.indicators:
            return self.indicators[name]
        key = name.strip().lower().replace(" ", "_").replace("-", "_")
        for ind in self.indicators.values():
            if key in {ind.id.lower(), ind.name.lower().replace(" ", "_"), *(a.lower().replace(" ", "_") for a in ind.aliases)}:
                return ind
        raise UnknownNameError("indicator", name, self.indicators)


def _pick(table: dict, name: str, kind: str):
    if name in table:
        return table[name]
    lowered = {k.lower(): v for k, v in table.items()}
    if name.strip().lower() in lowered:
        return lowered[name.strip().lower()]
    raise UnknownNameError(kind, name, table)


@lru_cache(maxsize=1)
def catalogue() -> Catalogue:
    doc = data.document("reagents.yaml")
    titrants = {t["id"]: Titrant(t["id"], t["name"], t["formula"], t["salt"], int(t["hazard"]), tuple(t["cautions"]))
                for t in doc["titrants"]}
    buffers = {b["id"]: Buffer(b["id"], b["name"], b.get("ligand"), tuple(b["pH_range"]), int(b["hazard"]),
                               tuple(b["cautions"]), float(b.get("default_total_M", 0.0)), raw=b) for b in doc["buffers"]}
    masking = {m["id"]: MaskingAgent(m["id"], m["name"], m["ligand"], m["formula"], m["salt"], float(m["min_pH"]),
                                     tuple(m["dose_range_M"]), int(m["hazard"]), tuple(m["cautions"]),
                                     m.get("reduces") or {}, m.get("masks") or {}, m.get("density_g_mL"))
               for m in doc["masking"]}
    indicators = {}
    for d in data.document("indicators.yaml"):
        indicators[d["id"]] = Indicator(
            d["id"], d["name"], tuple(d.get("aliases", [])), {int(k): v for k, v in d["forms"].items()}, d["metal_colour"],
            tuple(d["usable_pH"]), tuple(d["blocked_by"]), bool(d["needs_Mg_for_Ca"]), float(d["conc_M"]), d["dose"],
            int(d["hazard"]), tuple(d["sources"]))
    db = database()
    for ind in indicators.values():
        for m in ind.blocked_by:
            db.metal(m)
    return Catalogue(titrants, buffers, masking, indicators)
