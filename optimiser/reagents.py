"""The reagents a method can use: titrants, buffers, masking agents, indicators and back-titration standards.

Everything here is read from the data folder (``reagents.yaml``, ``indicators.yaml``), each entry checked
against its schema in :mod:`optimiser.data`; the lists the search uses by default, the bench complexity of
each titrant, the buffer recipes and the safety rules for combinations of reagents are data, not code.
Molar masses are computed from each reagent's formula with the periodictable package, not typed in.
"""
from __future__ import annotations

import re

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import periodictable

from . import data
from .constants import TEMPERATURE_RANGE_C, database
from .errors import DataError, UnknownNameError

HAZARD_NAMES = ("none", "low", "moderate", "high", "severe")
KINDS = ("titrants", "buffers", "masking", "indicators")  # the reagent kinds a search chooses from


def molar_mass(formula: str) -> float:
    """Molar mass [g/mol] of a formula such as ``"Na2S2O3(H2O)5"`` (periodictable).

    >>> round(molar_mass("Na2S2O3(H2O)5"), 2)
    248.17
    """
    return float(periodictable.formula(formula).mass)


def _check_hazard(what: str, hazard: int) -> None:
    if hazard not in range(len(HAZARD_NAMES)):
        raise DataError(f"{what}: hazard must be 0-4 ({', '.join(HAZARD_NAMES)}); got {hazard!r}")


def _check_range(what: str, pair: tuple[float, float]) -> None:
    if len(pair) != 2 or not pair[0] < pair[1]:
        raise DataError(f"{what}: a range must be [low, high] with low < high; got {list(pair)}")


@dataclass(frozen=True)
class Titrant:
    """A complexing titrant.

    Attributes
    ----------
    id, name : str
        Id (also its ligand's id in the constants tables) and full name.
    formula : str
        Formula of the salt weighed (periodictable syntax).
    salt : str
        The salt as a bench knows it.
    hazard : int
        0-4 (:data:`HAZARD_NAMES`).
    cautions : tuple of str
        What a report prints about it.
    complexity : float
        What choosing it adds to a method's bench complexity [our own scale]: 0 for EDTA, 0.5 for a titrant
        with fewer published methods and less certain constants (common practice).
    search_default : bool
        Whether a scenario that lists no titrants searches it.
    aliases : tuple of str
        Other spellings a user may type (``reagents.yaml``), matched as :func:`spelling` reduces them.
    counter_ions : tuple of (str, float)
        Counter-ions per mole of titrant that its formula does not hold (a free acid dissolved with NaOH), as
        (metal id, mol/mol); the formula's own Na and K are counted by :mod:`optimiser.medium`.
    """

    id: str
    name: str
    formula: str
    salt: str
    hazard: int
    cautions: tuple[str, ...]
    complexity: float = 0.0
    search_default: bool = True
    aliases: tuple[str, ...] = ()
    counter_ions: tuple[tuple[str, float], ...] = ()

    def __post_init__(self) -> None:
        _check_hazard(f"titrant {self.id}", self.hazard)
        if not self.complexity >= 0:
            raise DataError(f"titrant {self.id}: complexity must be 0 or more; got {self.complexity}")

    @property
    def molar_mass(self) -> float:
        """Molar mass of the salt weighed [g/mol]."""
        return molar_mass(self.formula)


@dataclass(frozen=True)
class Solution:
    """A stock solution a recipe measures out: its name and its concentration [mol/L]."""

    name: str
    molarity_M: float

    def __post_init__(self) -> None:
        if not self.molarity_M > 0:
            raise DataError(f"solution {self.name!r}: molarity_M must be positive; got {self.molarity_M}")


# What each recipe kind needs: (weighed formula, measured solution) by their keys in reagents.yaml.
RECIPE_PARTS: dict[str, tuple[str | None, str]] = {
    "salt_plus_base_solution": ("acid_formula", "base_solution"),
    "salt_plus_acid_solution": ("base_formula", "acid_solution"),
    "base_plus_acid_solution": ("base_formula", "acid_solution"),
    "strong_base": (None, "base_solution"),
    "strong_acid": (None, "acid_solution"),
}


@dataclass(frozen=True)
class BufferRecipe:
    """How a bench makes a buffer up for one aliquot.

    Attributes
    ----------
    kind : str
        One of :data:`RECIPE_PARTS`: ``salt_plus_base_solution`` (weigh the acid-form salt, add the base as
        a solution), ``salt_plus_acid_solution`` (weigh the base-form salt, add the acid as a solution),
        ``base_plus_acid_solution`` (weigh the whole base, protonate part of it with a strong acid),
        ``strong_base`` or ``strong_acid`` (no complexing buffer: the pH set with a strong base or acid).
    acid_formula, base_formula : str or None
        Formulas of the salts weighed (periodictable syntax).
    acid_solution, base_solution : Solution or None
        The solutions measured out.
    """

    kind: str
    acid_formula: str | None = None
    base_formula: str | None = None
    acid_solution: Solution | None = None
    base_solution: Solution | None = None

    def __post_init__(self) -> None:
        if self.kind not in RECIPE_PARTS:
            raise DataError(f"recipe kind {self.kind!r} is not known; allowed: {', '.join(RECIPE_PARTS)}")
        for part in RECIPE_PARTS[self.kind]:
            if part is not None and getattr(self, part) is None:
                raise DataError(f"a {self.kind} recipe needs {part}")

    @property
    def weighed_formula(self) -> str | None:
        """Formula of the salt weighed (None for a strong base or acid)."""
        part = RECIPE_PARTS[self.kind][0]
        return getattr(self, part) if part else None

    @property
    def solution(self) -> Solution:
        """The solution measured out."""
        return getattr(self, RECIPE_PARTS[self.kind][1])


@dataclass(frozen=True)
class Buffer:
    """A buffer, or a strong acid or base that sets the pH without a complexing ligand.

    Attributes
    ----------
    id, name : str
        Id and full name.
    ligand : str or None
        The complexing ligand it brings (None for a strong acid or base).
    pH_range : tuple of float
        Where it holds the pH.
    hazard : int
        0-4.
    cautions : tuple of str
        What a report prints about it.
    recipe : BufferRecipe
        How to make it up.
    default_total_M : float
        Total concentration of its ligand in the titrated solution when a method does not choose [mol/L].
    strong_alkali : bool
        It raises the pH with strong alkali: where hydroxides precipitate, a procedure adds most of the
        titrant before raising the pH.
    search_default : bool
        Whether a scenario that lists no buffers searches it.
    aliases : tuple of str
        Other spellings a user may type.
    """

    id: str
    name: str
    ligand: str | None
    pH_range: tuple[float, float]
    hazard: int
    cautions: tuple[str, ...]
    recipe: BufferRecipe
    default_total_M: float = 0.0
    strong_alkali: bool = False
    search_default: bool = True
    aliases: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        _check_hazard(f"buffer {self.id}", self.hazard)
        _check_range(f"buffer {self.id} pH_range", self.pH_range)
        strong = self.recipe.kind in ("strong_base", "strong_acid")
        if strong != (self.ligand is None):
            raise DataError(f"buffer {self.id}: a {self.recipe.kind} recipe goes with "
                            f"{'no ligand' if strong else 'a ligand'}; got ligand {self.ligand!r}")

    @property
    def raw(self) -> dict[str, Any]:
        """The recipe's formulas and solutions under their keys in reagents.yaml (for callers not yet using ``recipe``)."""
        r = self.recipe
        out: dict[str, Any] = {"id": self.id, "ligand": self.ligand}
        for key in ("acid_formula", "base_formula"):
            if getattr(r, key) is not None:
                out[key] = getattr(r, key)
        for key in ("acid_solution", "base_solution"):
            s = getattr(r, key)
            if s is not None:
                out[key] = {"name": s.name, "molarity_M": s.molarity_M}
        return out


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
    search_default: bool = True
    aliases: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        _check_hazard(f"masking agent {self.id}", self.hazard)
        _check_range(f"masking agent {self.id} dose_range_M", self.dose_range_M)

    @property
    def molar_mass(self) -> float:
        return molar_mass(self.formula)


@dataclass(frozen=True)
class Indicator:
    """A metallochromic indicator.

    Attributes
    ----------
    forms : dict
        Colour of the free dye by number of bound protons (0 = fully deprotonated).
    complex_colours : Mapping[str, str]
        Colour of its metal complex: ``"default"`` for every metal, and the metals whose complex differs.
    usable_pH : tuple of float
        Where the free dye and its metal complex differ in colour.
    conc_M : float
        Typical effective concentration in the titrated solution [mol/L].
    sources : tuple of str
        Keys in ``references.csv``.
    search_default : bool
        Whether a scenario that lists no indicators searches it.
    working_temperature_C : float or None
        The temperature the dye is read at in published practice [degC] (the solution is warmed to it and the
        titration simulated there); None for room temperature, i.e. the sample's own.
    working_temperature_source : str or None
        Key in ``references.csv`` for it.
    visible_limit_M : float or None
        For a one-colour indicator (colourless free dye): the least concentration of its metal complex the eye sees
        in a titration flask [mol/L]; the end point is read where the colour vanishes. None for a two-colour one.
    """

    id: str
    name: str
    aliases: tuple[str, ...]
    forms: dict
    complex_colours: Mapping[str, str]
    usable_pH: tuple[float, float]
    blocked_by: tuple[str, ...]
    needs_Mg_for_Ca: bool
    conc_M: float
    dose: str
    hazard: int
    sources: tuple[str, ...]
    formula: str | None = None
    search_default: bool = True
    tolerated_mg_L: Mapping[str, float] = field(default_factory=dict)  # metal -> level a published method tolerates
    tolerated_source: str | None = None
    working_temperature_C: float | None = None
    working_temperature_source: str | None = None
    visible_limit_M: float | None = None

    def __post_init__(self) -> None:
        _check_hazard(f"indicator {self.id}", self.hazard)
        T = self.working_temperature_C
        if T is not None and not TEMPERATURE_RANGE_C[0] <= T <= TEMPERATURE_RANGE_C[1]:
            raise DataError(f"indicator {self.id}: working temperature {T:g} degC is outside the model's range "
                            f"{TEMPERATURE_RANGE_C[0]:g}-{TEMPERATURE_RANGE_C[1]:g} degC")
        _check_range(f"indicator {self.id} usable_pH", self.usable_pH)
        if "default" not in self.complex_colours:
            raise DataError(f"indicator {self.id}: complex_colours needs a 'default' colour; got {dict(self.complex_colours)}")

    def free_colour(self, protons: int) -> str:
        return self.forms.get(protons, self.forms.get(str(protons), "?"))

    def complex_colour(self, metal: str) -> str:
        """Colour of the indicator's complex with a metal (any spelling the database knows).

        >>> catalogue().indicator("murexide").complex_colour("Ni2+")
        'yellow'
        >>> catalogue().indicator("murexide").complex_colour("Ca")
        'pink'
        """
        return self.complex_colours.get(database().metal(metal), self.complex_colours["default"])

    @property
    def metal_colour(self) -> str:
        """Colour of the metal complex for most metals (``complex_colours["default"]``)."""
        return self.complex_colours["default"]


@dataclass(frozen=True)
class Standard:
    """A back-titration standard: a metal whose standard solution titrates the excess titrant back.

    Attributes
    ----------
    id : str
        The metal's id in the database.
    name, salt, formula : str
        Name, the salt weighed as a bench knows it, and its formula (periodictable syntax).
    hazard : int
        0-4.
    cautions : tuple of str
        What a report prints about it.
    """

    id: str
    name: str
    salt: str
    formula: str
    hazard: int
    cautions: tuple[str, ...]

    def __post_init__(self) -> None:
        _check_hazard(f"standard {self.id}", self.hazard)

    @property
    def molar_mass(self) -> float:
        return molar_mass(self.formula)


@dataclass(frozen=True)
class SafetyRule:
    """Cautions for a combination of reagents: a method using every reagent in ``when_all`` and none in
    ``unless_any`` (reagent ids) carries ``name``, ``hazard`` (0-4) and ``cautions``."""

    name: str
    when_all: tuple[str, ...]
    unless_any: tuple[str, ...]
    hazard: int
    cautions: tuple[str, ...]

    def __post_init__(self) -> None:
        _check_hazard(f"safety rule {self.name!r}", self.hazard)
        if not self.when_all:
            raise DataError(f"safety rule {self.name!r}: when_all must name at least one reagent")

    def applies_to(self, reagent_ids: Iterable[str]) -> bool:
        """Whether a method using these reagent ids falls under the rule."""
        used = set(reagent_ids)
        return all(r in used for r in self.when_all) and not any(r in used for r in self.unless_any)


@dataclass(frozen=True)
class SafetyContradiction:
    """Two instructions that must never be printed for the same method: ``first`` and ``second`` are regular
    expressions (case ignored), each matched within one caution; ``resolution`` says how the data keep them apart."""

    name: str
    first: str
    second: str
    resolution: str

    def __post_init__(self) -> None:
        for pattern in (self.first, self.second):
            try:
                re.compile(pattern)
            except re.error as exc:
                raise DataError(f"safety contradiction {self.name!r}: {pattern!r} is not a regular expression ({exc})") from None

    def found_in(self, cautions: Iterable[str]) -> tuple[str, str] | None:
        """The first caution matching ``first`` and the first matching ``second``, where both are there."""
        texts = list(cautions)
        a = next((c for c in texts if re.search(self.first, c, re.IGNORECASE)), None)
        b = next((c for c in texts if re.search(self.second, c, re.IGNORECASE)), None)
        return (a, b) if a is not None and b is not None else None


@dataclass(frozen=True)
class Catalogue:
    titrants: dict[str, Titrant]
    buffers: dict[str, Buffer]
    masking: dict[str, MaskingAgent]
    indicators: dict[str, Indicator]
    standards: dict[str, Standard] = field(default_factory=dict)
    safety_rules: tuple[SafetyRule, ...] = ()
    primary_standards: dict[str, PrimaryStandard] = field(default_factory=dict)
    safety_contradictions: tuple[SafetyContradiction, ...] = ()

    def titrant(self, name: str) -> Titrant:
        return _pick(self.titrants, name, "titrant")

    def buffer(self, name: str) -> Buffer:
        return _pick(self.buffers, name, "buffer")

    def masking_agent(self, name: str) -> MaskingAgent:
        return _pick(self.masking, name, "masking agent")

    def standard(self, name: str) -> Standard:
        return _pick(self.standards, name, "back-titration standard")

    def indicator(self, name: str) -> Indicator:
        if name in self.indicators:
            return self.indicators[name]
        key = spelling(name)
        for ind in self.indicators.values():
            if key in {spelling(ind.id), spelling(ind.name), *map(spelling, ind.aliases)}:
                return ind
        raise UnknownNameError("indicator", name, self.indicators,
                               {a: i.id for i in self.indicators.values() for a in (i.name, *i.aliases)})

    def reagent_id(self, name: str) -> str:
        """The id of a titrant, buffer, masking agent or indicator from any of its spellings ("thiosulphate").

        >>> catalogue().reagent_id("thiosulphate"), catalogue().reagent_id("Eriochrome Black T")
        ('thiosulfate', 'EBT')
        """
        for lookup in (self.titrant, self.buffer, self.masking_agent, self.indicator):
            try:
                return lookup(name).id
            except UnknownNameError:
                continue
        raise UnknownNameError("reagent", name, self.all_ids())

    def default_ids(self, kind: str) -> tuple[str, ...]:
        """Ids a search uses when a scenario does not list this kind, in the data file's order.

        Parameters
        ----------
        kind : str
            ``"titrants"``, ``"buffers"``, ``"masking"`` or ``"indicators"``.

        >>> catalogue().default_ids("titrants")
        ('EDTA', 'EGTA', 'CDTA', 'DTPA')
        """
        if kind not in KINDS:
            raise UnknownNameError("reagent kind", kind, KINDS)
        return tuple(i for i, r in getattr(self, kind).items() if r.search_default)

    def all_ids(self) -> tuple[str, ...]:
        """Every titrant, buffer, masking agent and indicator id."""
        return (*self.titrants, *self.buffers, *self.masking, *self.indicators)

    def safety_rules_for(self, reagent_ids: Iterable[str]) -> list[SafetyRule]:
        """The safety rules that apply to a method using these reagents (titrant, buffer, masking agents,
        indicator: their ids), in the data file's order.

        >>> [r.name for r in catalogue().safety_rules_for(["EDTA", "ammonia", "cyanide", "EBT"])]
        ['acid and cyanide']
        >>> catalogue().safety_rules_for(["EDTA", "NaOH", "cyanide", "calcon_carboxylic"])
        []
        """
        ids = tuple(reagent_ids)
        return [r for r in self.safety_rules if r.applies_to(ids)]

    def safety_conflicts(self, cautions: Iterable[str]) -> list[tuple[str, str, str]]:
        """The contradicting instructions among one method's cautions: (pair name, first text, second text) for
        each pair of ``safety_contradictions`` (reagents.yaml) found; empty when the texts agree.

        >>> catalogue().safety_conflicts(["Destroy residues with alkaline hypochlorite.", "Never mix it with hypochlorite."])[0][0]
        'hypochlorite treatment beside an ammonia method'
        """
        texts = tuple(cautions)
        return [(c.name, *found) for c in self.safety_contradictions if (found := c.found_in(texts)) is not None]


def spelling(name: str) -> str:
    """A name reduced for matching: case, surrounding space, and the difference between space, - and _ ignored.

    >>> spelling(" Nitric-acid ")
    'nitric_acid'
    """
    return "_".join(str(name).strip().lower().replace("-", " ").replace("_", " ").split())


def _pick(table: dict, name: str, kind: str):
    """The entry of ``table`` whose id or one of whose ``aliases`` is ``name`` (as :func:`spelling` reduces them)."""
    if name in table:
        return table[name]
    key = spelling(name)
    for ident, entry in table.items():
        if key == spelling(ident) or key in map(spelling, getattr(entry, "aliases", ())):
            return entry
    raise UnknownNameError(kind, name, table, {a: i for i, e in table.items() for a in getattr(e, "aliases", ())})


def ligand_id(name: str) -> str:
    """The id of a ligand (``reagents.yaml``, ``ligands:``) from its id or one of its aliases (``ammonia`` -> NH3).

    >>> ligand_id("ammonia"), ligand_id("thiosulphate"), ligand_id("EDTA")
    ('NH3', 'thiosulfate', 'EDTA')
    """
    entries = data.entries("reagents.yaml", "ligands")
    for d in entries:
        if name == d["id"]:
            return d["id"]
    key = spelling(name)
    for d in entries:
        if key == spelling(d["id"]) or key in map(spelling, d["aliases"]):
            return d["id"]
    raise UnknownNameError("ligand", name, [d["id"] for d in entries], {a: d["id"] for d in entries for a in d["aliases"]})


@dataclass(frozen=True)
class PrimaryStandard:
    """What the titrant is standardised against for one analyte metal: the substance weighed and how it is dissolved."""

    id: str
    substance: str
    formula: str
    preparation: str
    source: str
    hazards: tuple[str, ...] = ()  # of the substance and its dissolution (stocks.HAZARD_WORDS)

    @property
    def molar_mass(self) -> float:
        """[g/mol] of the substance weighed."""
        return molar_mass(self.formula)


# the catalogue is read and checked in its own module; imported last, as it builds on the classes above
from .reagent_data import catalogue  # noqa: E402, F401
