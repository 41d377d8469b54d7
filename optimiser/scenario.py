"""Scenario files (YAML) -> validated, frozen objects.

The schema is the project's own (documented in the README). The text is read by :mod:`optimiser.yaml_reader`
(bounded in size and nesting, no aliases, no tags beyond plain values, no control characters); unknown and duplicate
keys are rejected; every value is checked for its type, its range and finiteness before anything is computed; every
error names the file, line and column and says what is allowed.
"""
from __future__ import annotations

import unicodedata
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from . import listed_methods, yaml_reader
from .anions import anion_totals
from .anions import resolve as anion_input
from .constants import IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C, database
from .errors import InputError, OptimiserError, ScenarioError, UnknownNameError, printable, quoted
from .method import Sample
from .objectives import OBJECTIVES as _OBJECTIVE_REGISTRY
from .reagents import HAZARD_NAMES, catalogue
from .strategies import strategy_ids
from .units import (
    CONCENTRATION_RANGE_M,
    BURETTE_RANGE_mL,
    SAMPLE_VOLUME_RANGE_mL,
    concentration_M,
    formula_mass,
    molarity,
    real,
    temperature_C,
    volume_mL,
)

OBJECTIVES = tuple(_OBJECTIVE_REGISTRY)  # the objectives the weights may name (optimiser.objectives)
MODES = strategy_ids()  # the strategies a search may use (optimiser.strategies)

_SCHEMA: dict[str, Any] = {
    "name": str, "description": str,
    "sample": {"volume": None, "ionic_strength": None, "temperature": None, "matrix": str, "acid": None, "pH": None,
               "anions": dict, "alkali_ions": dict},
    "analyte": {"name": None, "metals": dict, "report_as": str},
    "interferents": dict,
    "titrant": {"concentration": None, "burette": None},
    "search": {"pH": list, "titrants": list, "buffers": list, "masking": list, "indicators": list, "forbid": list,
               "max_masking_agents": int, "max_hazard": None, "modes": list, "back_metals": list},
    "targets": {"max_error_percent": None, "weights": dict},
    "methods": list,  # methods to evaluate beside the search's answer (optimiser.listed_methods)
}


@dataclass(frozen=True)
class SearchSpace:
    """What the search may choose from.

    The default reagents are the catalogue's (each entry's ``search_default`` in the data files, in file
    order) and the default back-titration standards are every standard in ``reagents.yaml``.
    """

    pH_range: tuple[float, float] = (1.0, 13.5)
    titrants: tuple[str, ...] = field(default_factory=lambda: catalogue().default_ids("titrants"))
    buffers: tuple[str, ...] = field(default_factory=lambda: catalogue().default_ids("buffers"))
    masking: tuple[str, ...] = field(default_factory=lambda: catalogue().default_ids("masking"))
    indicators: tuple[str, ...] = field(default_factory=lambda: catalogue().default_ids("indicators"))
    max_masking_agents: int = 2
    max_hazard: int = 4
    modes: tuple[str, ...] = MODES
    back_metals: tuple[str, ...] = field(default_factory=lambda: tuple(catalogue().standards))

    def __post_init__(self) -> None:
        lo, hi = self.pH_range
        if not (0 <= lo < hi <= 14):
            raise InputError(f"pH range must be two values 0 <= low < high <= 14; got {list(self.pH_range)}")
        if not self.titrants:
            raise InputError("no titrant is left to search (check titrants and forbid)")
        if not self.indicators:
            raise InputError("no indicator is left to search (check indicators and forbid)")
        if not self.buffers:
            raise InputError("no buffer is left to search (check buffers and forbid)")
        if not 0 <= self.max_masking_agents <= 2:
            raise InputError(f"max_masking_agents must be 0, 1 or 2; got {self.max_masking_agents}")
        if not self.modes:
            raise InputError(f"modes must list at least one of {', '.join(MODES)}")


@dataclass(frozen=True)
class Targets:
    max_error_percent: float = 0.5
    weights: Mapping[str, float] = field(default_factory=lambda: {k: 1.0 for k in OBJECTIVES})

    def __post_init__(self) -> None:
        if not self.max_error_percent > 0:
            raise InputError(f"max_error_percent must be positive; got {self.max_error_percent}")
        if not any(w > 0 for w in self.weights.values()):
            raise InputError("at least one objective weight must be positive")


@dataclass(frozen=True)
class Scenario:
    """A validated scenario: the sample, what is determined, and what the search may use."""

    name: str
    description: str
    sample: Sample
    analyte_label: str
    report_as: str | None
    titrant_conc_M: float
    burette_mL: float
    matrix: str
    search: SearchSpace
    targets: Targets
    source: str
    as_read: Mapping[str, Any] = field(default_factory=dict, compare=False, repr=False)
    methods: tuple[listed_methods.ListedMethod, ...] = ()  # listed for comparison with the search's answer

    @property
    def objectives(self) -> tuple[str, ...]:
        return tuple(k for k in OBJECTIVES if self.targets.weights.get(k, 0.0) > 0)


class _Marks:
    """Line and column of each key path in a YAML document (1-based), as :func:`yaml_reader.read` found them."""

    def __init__(self, marks: Mapping[tuple, tuple[int, int]], path: str):
        self.path = path
        self.marks = marks

    def error(self, message: str, key: tuple) -> ScenarioError:
        k = key
        while k and k not in self.marks:
            k = k[:-1]
        line, col = self.marks.get(k, (1, 1))
        return ScenarioError(message, self.path, line, col)


def _dotted(key: tuple) -> str:
    return ".".join(str(k) for k in key if k != "<key>")


LIST_OF_GROUPS = ("analyte",)  # sections that may also be a list of their mapping (several analytes determined apart)
_KINDS = {list: "a list", dict: "a mapping", str: "text", int: "a whole number"}


def _check_keys(doc: Mapping, schema: Mapping, marks: _Marks, key: tuple) -> None:
    for k in doc:
        if k not in schema:
            where = "the top level" if not key else _dotted(key)
            raise marks.error(f"unknown key {quoted(k)} in {where}; allowed: {', '.join(schema)}", key + (k, "<key>"))
        sub, v = schema[k], doc[k]
        if isinstance(sub, dict) and k in LIST_OF_GROUPS and isinstance(v, list):
            if not v:
                raise marks.error(f"{_dotted(key + (k,))} is empty; allowed: a mapping, or a list of mappings with keys "
                                  f"{', '.join(sub)}", key + (k,))
            for i, item in enumerate(v):
                if not isinstance(item, Mapping):
                    raise marks.error(f"{_dotted(key + (k,))} entries must be mappings with keys {', '.join(sub)}",
                                      key + (k, i))
                _check_keys(item, sub, marks, key + (k, i))
        elif isinstance(sub, dict):
            if not isinstance(v, Mapping):
                raise marks.error(f"{_dotted(key + (k,))} must be a mapping with keys {', '.join(sub)}", key + (k,))
            _check_keys(v, sub, marks, key + (k,))
        elif sub in _KINDS and v is not None and (not isinstance(v, sub) or isinstance(v, bool)):
            raise marks.error(f"{_dotted(key + (k,))} must be {_KINDS[sub]}; got {_shown(v)}", key + (k,))


def _shown(value: Any) -> str:
    """A value as a message shows it: text quoted and escaped, a list or mapping by its kind, a number as written."""
    if isinstance(value, str):
        return quoted(value)
    if isinstance(value, (list, dict)):
        return "a list" if isinstance(value, list) else "a mapping"
    if value is None:
        return "nothing (null)"
    return printable(repr(value), 40)


def _names(values, resolve, marks, key) -> tuple[str, ...]:
    out = []
    for i, v in enumerate(values):
        if not isinstance(v, str):
            raise marks.error(f"{_dotted(key)} entries must be names; got {_shown(v)}", key + (i,))
        try:
            out.append(resolve(v))
        except InputError as exc:
            raise marks.error(str(exc), key + (i,)) from None
    return tuple(dict.fromkeys(out))


def _hazard(value, marks, key) -> int:
    allowed = f"allowed: {', '.join(HAZARD_NAMES)} (or 0-4)"
    if isinstance(value, int) and not isinstance(value, bool) and 0 <= value <= 4:
        return value
    if isinstance(value, str) and value.strip().lower() in HAZARD_NAMES:
        return HAZARD_NAMES.index(value.strip().lower())
    raise marks.error(f"max_hazard is {_shown(value)}; {allowed}", key)


class _Reader:
    """A scenario document with the marks that locate its keys: reads one value at a time."""

    def __init__(self, doc: Mapping[str, Any], marks: _Marks):
        self.doc, self.marks = doc, marks

    def error(self, message: str, key: tuple) -> ScenarioError:
        return self.marks.error(message, key)

    def value(self, key: tuple, fn, *args):
        """``fn(value at key, *args)``; the package's errors come back located at the key."""
        d: Any = self.doc
        for k in key:
            d = d[k]
        try:
            return fn(d, *args)
        except ScenarioError:
            raise
        except OptimiserError as exc:
            raise self.error(f"{_dotted(key)}: {exc}", key) from None

    def ranged(self, key: tuple, fn, lo: float, hi: float, unit: str, at_most: bool = False) -> float:
        """``fn(value at key)`` (located as :meth:`value`), which must lie from ``lo`` to ``hi`` [``unit``]; the
        message says "at most ``hi``" where ``at_most`` (a value that cannot be below ``lo``)."""
        v = self.value(key, fn)
        if not lo <= v <= hi:
            u = f" {unit}" if unit else ""
            allowed = f"at most {hi:g}{u}" if at_most else f"between {lo:g} and {hi:g}{u}"
            raise self.error(f"{_dotted(key)} must be {allowed}; got {v:.4g}{u}", key)
        return v

    def list_(self, section: Mapping, key: tuple, non_empty: str | None = None) -> list:
        """A list-valued key that is present (null is not a list: it is refused, not taken as empty); ``non_empty``
        says what an empty list lacks."""
        v = section[key[-1]]
        if not isinstance(v, list):
            raise self.error(f"{_dotted(key)} must be a list; got {_shown(v)}", key)
        if non_empty and not v:
            raise self.error(f"{_dotted(key)} is empty; allowed: a list of at least one {non_empty}", key)
        return v

    def text(self, key: tuple, limit: int, one_line: bool = True, required: bool = False) -> str:
        """Text at ``key`` (stripped; "" when absent or null unless ``required``): at most ``limit`` characters, with
        no control or invisible character (a line break and a tab allowed where ``one_line`` is false)."""
        d: Any = self.doc
        for k in key[:-1]:
            d = d[k] if isinstance(d, list) else (d.get(k) or {})
        v = d.get(key[-1])
        if v is None and not required:
            return ""
        if not isinstance(v, str) or (required and not v.strip()):
            raise self.error(f"{_dotted(key)} must be {'non-empty ' if required else ''}text; got {_shown(v)}", key)
        v = v.strip()
        if len(v) > limit:
            raise self.error(f"{_dotted(key)} is {len(v):,} characters long; allowed: at most {limit:,}", key)
        for ch in v:
            if not (ch.isprintable() or unicodedata.category(ch) == "Zs" or (not one_line and ch in "\n\t")):
                raise self.error(f"{_dotted(key)} holds U+{ord(ch):04X}, a control or invisible character; allowed: "
                                 f"printable text{'' if one_line else ', tabs and line breaks'}", key)
        return v


def _document(text: str, path: str) -> tuple[Mapping[str, Any], _Marks]:
    """The YAML document (a mapping whose keys are all known) and the marks that locate its keys."""
    doc, found = yaml_reader.read(text, path)
    marks = _Marks(found, path)
    if not isinstance(doc, Mapping):
        raise marks.error("a scenario must be a YAML mapping with keys " + ", ".join(_SCHEMA), ())
    _check_keys(doc, _SCHEMA, marks, ())
    for required in ("name", "sample", "analyte", "titrant"):
        if required not in doc:
            raise marks.error(f"missing key {required!r} (a scenario needs name, sample, analyte and titrant)", ())
    return doc, marks


# The longest text each field may hold (characters).
TEXT_LIMITS = {"name": 200, "description": 10_000, "matrix": 500, "analyte_name": 200}


def _name(r: _Reader) -> str:
    return r.text(("name",), TEXT_LIMITS["name"], required=True)


def _conditions(r: _Reader) -> tuple[float, float, float]:
    """Sample volume [mL], ionic strength [M] and temperature [degC] from ``sample``."""
    s = r.doc["sample"]
    if "volume" not in s:
        raise r.error("sample.volume is required (for example 50 mL)", ("sample",))
    V0 = r.ranged(("sample", "volume"), volume_mL, *SAMPLE_VOLUME_RANGE_mL, "mL")
    I = 0.0  # the matrix's own background electrolyte (optimiser.medium computes the ionic strength of each point)
    if "ionic_strength" in s:
        I = r.ranged(("sample", "ionic_strength"), lambda v: molarity(v, "ionic strength"), 0.0, IONIC_STRENGTH_MAX_M,
                     "M", at_most=True)
    T = r.ranged(("sample", "temperature"), temperature_C, *TEMPERATURE_RANGE_C, "degC") if "temperature" in s else 25.0
    return V0, I, T


def _acid(r: _Reader) -> float:
    """Strong acid the sample holds as H+ [mol/L], from ``sample.acid`` (a concentration of H+) or ``sample.pH`` (an
    acid-preserved sample's pH, 0-7: 10^-pH mol/L); 0 when neither is given."""
    s = r.doc["sample"]
    if "acid" in s and "pH" in s:
        raise r.error("give the sample's acid either as sample.acid (mol/L of H+) or as sample.pH, not both",
                      ("sample", "pH"))
    if "acid" in s:
        return r.ranged(("sample", "acid"), lambda v: molarity(v, "sample acid"), 0.0, 2.0, "M", at_most=True)
    if "pH" in s:
        def number(v):
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise InputError(f"must be a number from 0 to 7; got {v!r}")
            return float(v)
        pH = r.ranged(("sample", "pH"), number, 0.0, 7.0, "")
        return 10.0 ** -pH if pH < 7.0 else 0.0
    return 0.0


def _anions(r: _Reader) -> tuple[dict[str, float], tuple[str, ...]]:
    """The sample's anions from ``sample.anions`` (name: concentration; :mod:`optimiser.anions`): ligand totals
    [mol/L] and the notes of the inputs used; none when the key is absent."""
    block = r.doc["sample"].get("anions") or {}
    lo, hi = CONCENTRATION_RANGE_M
    totals: dict[str, float] = {}
    for name in block:
        key = ("sample", "anions", name)
        try:
            one, _ = anion_totals({name: block[name]})
        except UnknownNameError as exc:
            raise r.error(str(exc), key + ("<key>",)) from None
        except InputError as exc:
            raise r.error(f"{_dotted(key)}: {exc}", key) from None
        (ligand, c), = one.items()
        if ligand in totals:
            other = next(n for n in block if n != name and anion_input(str(n)).ligand == ligand)
            raise r.error(f"sample.anions: {quoted(name)} and {quoted(other)} both give the sample's {ligand}; give one "
                          "of them", key + ("<key>",))
        if not lo <= c <= hi:
            raise r.error(f"{_dotted(key)} must be between {lo:g} and {hi:g} mol/L (leave out an anion that is absent); "
                          f"got {c:.4g} mol/L", key)
        totals[ligand] = c
    notes = tuple(dict.fromkeys(anion_input(str(n)).note for n in block if anion_input(str(n)).note))
    return totals, notes


def _alkali(r: _Reader) -> dict[str, float]:
    """The sample matrix's own alkali ions [mol/L], from ``sample.alkali_ions`` (ion: concentration, Na and K)."""
    block = r.doc["sample"].get("alkali_ions") or {}
    db = database()
    lo, hi = CONCENTRATION_RANGE_M
    out: dict[str, float] = {}
    for m, v in block.items():
        key = ("sample", "alkali_ions", m)
        try:
            mid = db.metal(str(m))
        except InputError as exc:
            raise r.error(str(exc), key + ("<key>",)) from None
        if not db.metals[mid].get("counter_ion"):
            allowed = ", ".join(k for k, row in db.metals.items() if row.get("counter_ion"))
            raise r.error(f"{m} is not an alkali ion (allowed: {allowed})", key + ("<key>",))
        if mid in out:
            raise r.error(f"{mid} is given twice", key + ("<key>",))
        try:
            c = concentration_M(v, mid)
        except InputError as exc:
            raise r.error(f"{_dotted(key)}: {exc}", key) from None
        if not lo <= c <= hi:
            raise r.error(f"{_dotted(key)} must be between {lo:g} and {hi:g} mol/L; got {c:.4g} mol/L", key)
        out[mid] = c
    return out


def _add_metals(r: _Reader, block: Mapping, key: tuple, metals: dict[str, float]) -> list[str]:
    """Read ``block`` (metal: concentration) into ``metals``; the ids added, in order."""
    db = database()
    lo, hi = CONCENTRATION_RANGE_M
    added = []
    for m, v in block.items():
        try:
            mid = db.metal(str(m))
        except InputError as exc:
            raise r.error(str(exc), key + (m, "<key>")) from None
        if db.metals[mid].get("internal"):
            raise r.error(f"{m} is not a metal a sample can be given in", key + (m, "<key>"))
        if mid in metals:
            raise r.error(f"{mid} is given twice (as analyte and interferent, or twice)", key + (m, "<key>"))
        try:
            c = concentration_M(v, mid)
        except InputError as exc:
            raise r.error(f"{_dotted(key + (m,))}: {exc}", key + (m,)) from None
        if not lo <= c <= hi:
            raise r.error(f"{_dotted(key + (m,))} must be between {lo:g} and {hi:g} mol/L (leave out a metal that is "
                          f"absent); got {c:.4g} mol/L", key + (m,))
        metals[mid] = c
        added.append(mid)
    return added


def _metals(r: _Reader) -> tuple[dict[str, float], list[str], str, str | None, tuple[tuple[str, ...], ...]]:
    """Every metal's concentration [M], the analyte metals, the analyte's label and ``report_as``, and the further
    groups determined separately (``analyte`` given as a list: the first group is the analyte, the others groups)."""
    entries = r.doc["analyte"]
    keys = [("analyte", i) for i in range(len(entries))] if isinstance(entries, list) else [("analyte",)]
    metals: dict[str, float] = {}
    groups: list[list[str]] = []
    label, report_as = "", None
    for n, key in enumerate(keys):
        a = entries[key[1]] if len(key) > 1 else entries
        if "metals" not in a or not a["metals"]:
            raise r.error(f"{_dotted(key)}.metals is required: the metal or metals determined, with concentrations", key)
        groups.append(_add_metals(r, a["metals"], key + ("metals",), metals))
        if n == 0:
            label = r.text(key + ("name",), TEXT_LIMITS["analyte_name"])
            if a.get("report_as") is not None:
                report_as = r.text(key + ("report_as",), 50)
                r.value(key + ("report_as",), formula_mass)
    _add_metals(r, r.doc.get("interferents") or {}, ("interferents",), metals)
    analyte = groups[0]
    return metals, analyte, label or " + ".join(analyte), report_as, tuple(tuple(g) for g in groups[1:])


def _titrant(r: _Reader) -> tuple[float, float]:
    """Titrant concentration [M] and burette volume [mL]."""
    t = r.doc["titrant"]
    if "concentration" not in t:
        raise r.error("titrant.concentration is required (for example 0.01 M)", ("titrant",))
    cT = r.ranged(("titrant", "concentration"), lambda v: molarity(v, "titrant concentration"), 1e-4, 1.0, "mol/L")
    burette = r.ranged(("titrant", "burette"), volume_mL, *BURETTE_RANGE_mL, "mL") if "burette" in t else 25.0
    return cT, burette


def _forbid(r: _Reader, sp: Mapping) -> set[str]:
    """The ids of the reagents in ``search.forbid`` (any of their spellings), each checked to be a reagent."""
    if "forbid" not in sp:
        return set()
    cat = catalogue()
    return set(_names(r.list_(sp, ("search", "forbid")), cat.reagent_id, r.marks, ("search", "forbid")))


def _pH_range(r: _Reader, sp: Mapping) -> tuple[float, float]:
    rng = sp["pH"]
    if not isinstance(rng, list) or len(rng) != 2 or \
            not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in rng):
        raise r.error("search.pH must be [low, high], two numbers", ("search", "pH"))
    lo, hi = (r.value(("search", "pH", i), real, "the value") for i in (0, 1))
    if not (0 <= lo < hi <= 14):
        raise r.error(f"search.pH must satisfy 0 <= low < high <= 14; got [{lo:g}, {hi:g}]", ("search", "pH"))
    return lo, hi


def _reagents(r: _Reader, sp: Mapping, forbid: set[str]) -> dict[str, tuple[str, ...]]:
    """The titrants, buffers, masking agents and indicators to search: as listed, or the catalogue's defaults;
    less the forbidden ones."""
    cat = catalogue()
    resolvers = {"titrants": lambda v: cat.titrant(v).id, "buffers": lambda v: cat.buffer(v).id,
                 "masking": lambda v: cat.masking_agent(v).id, "indicators": lambda v: cat.indicator(v).id}
    out = {}
    for key, resolver in resolvers.items():
        if key in sp:
            chosen = _names(r.list_(sp, ("search", key)), resolver, r.marks, ("search", key))
        else:
            chosen = cat.default_ids(key)
        out[key] = tuple(c for c in chosen if c not in forbid)
    return out


def _modes(r: _Reader, sp: Mapping) -> tuple[str, ...]:
    modes = r.list_(sp, ("search", "modes"), non_empty=f"mode ({', '.join(MODES)})")
    for i, m in enumerate(modes):
        if not isinstance(m, str) or m not in MODES:
            raise r.error(f"search.modes: {_shown(m)} is not a mode; allowed: {', '.join(MODES)}", ("search", "modes", i))
    return tuple(dict.fromkeys(modes))


def _back_metals(r: _Reader, sp: Mapping) -> tuple[str, ...]:
    standards = list(catalogue().standards)
    allowed = " or ".join([", ".join(standards[:-1]), standards[-1]] if len(standards) > 1 else standards)
    metals = r.list_(sp, ("search", "back_metals"), non_empty=f"standard ({allowed})")
    out = []
    for i, m in enumerate(metals):
        try:
            mid = database().metal(m) if isinstance(m, str) else None
        except InputError:
            mid = None
        if mid not in standards:
            raise r.error(f"search.back_metals: the back-titration standard must be {allowed}; got {_shown(m)}",
                          ("search", "back_metals", i))
        out.append(mid)
    return tuple(dict.fromkeys(out))


def _search(r: _Reader) -> SearchSpace:
    sp = r.doc.get("search") or {}
    forbid = _forbid(r, sp)
    kwargs: dict[str, Any] = {}
    if "pH" in sp:
        kwargs["pH_range"] = _pH_range(r, sp)
    kwargs.update(_reagents(r, sp, forbid))
    if "max_masking_agents" in sp:
        v = sp["max_masking_agents"]
        if isinstance(v, bool) or not isinstance(v, int) or not 0 <= v <= 2:
            raise r.error(f"search.max_masking_agents must be a whole number: 0, 1 or 2; got {_shown(v)}",
                          ("search", "max_masking_agents"))
        kwargs["max_masking_agents"] = v
    if "max_hazard" in sp:
        kwargs["max_hazard"] = _hazard(sp["max_hazard"], r.marks, ("search", "max_hazard"))
    if "modes" in sp:
        kwargs["modes"] = _modes(r, sp)
    if "back_metals" in sp:
        kwargs["back_metals"] = _back_metals(r, sp)
    try:
        return SearchSpace(**kwargs)
    except InputError as exc:
        raise r.error(f"search: {exc}", ("search",)) from None


WEIGHT_RANGE = (0.0, 100.0)
MAX_ERROR_PERCENT_RANGE = (0.001, 100.0)


def _weights(r: _Reader, tg: Mapping) -> dict[str, float]:
    weights = tg["weights"]
    if not isinstance(weights, Mapping):
        raise r.error(f"targets.weights must be a mapping of objective: weight; got {_shown(weights)}",
                      ("targets", "weights"))
    w = {}
    for k in weights:
        if k not in OBJECTIVES:
            raise r.error(f"unknown objective {quoted(k)}; allowed: {', '.join(OBJECTIVES)}",
                          ("targets", "weights", k, "<key>"))
        w[k] = r.ranged(("targets", "weights", k), lambda v: real(v, "the weight"), *WEIGHT_RANGE, "")
    return {k: w.get(k, 1.0) for k in OBJECTIVES}


def _targets(r: _Reader) -> Targets:
    tg = r.doc.get("targets") or {}
    kwargs: dict[str, Any] = {}
    if "max_error_percent" in tg:
        kwargs["max_error_percent"] = r.ranged(("targets", "max_error_percent"), lambda v: real(v, "the error"),
                                               *MAX_ERROR_PERCENT_RANGE, "%")
    if "weights" in tg:
        kwargs["weights"] = _weights(r, tg)
    try:
        return Targets(**kwargs)
    except InputError as exc:
        raise r.error(f"targets: {exc}", ("targets",)) from None


def parse(text: str, path: str = "<scenario>") -> Scenario:
    """Validate a scenario document and return a :class:`Scenario`.

    The sections are read in order (name, sample, analyte and interferents, titrant, search, targets, methods); the
    first error found is raised.

    Raises
    ------
    ScenarioError
        With the file, line and column of the offending key or value.
    """
    doc, marks = _document(text, path)
    r = _Reader(doc, marks)
    name = _name(r)
    description = r.text(("description",), TEXT_LIMITS["description"], one_line=False)
    V0, I, T = _conditions(r)
    matrix = r.text(("sample", "matrix"), TEXT_LIMITS["matrix"])
    metals, analyte, label, report_as, groups = _metals(r)
    cT, burette = _titrant(r)
    search = _search(r)
    targets = _targets(r)
    anions, anion_notes = _anions(r)
    methods = listed_methods.read(r, cT)
    try:
        sample = Sample(volume_mL=V0, metals=metals, analyte=tuple(analyte), ionic_strength_M=I, temperature_C=T,
                        acid_M=_acid(r), anions=anions, anion_notes=anion_notes, alkali_M=_alkali(r), groups=groups)
    except InputError as exc:
        raise r.error(str(exc), ("analyte",)) from None
    return Scenario(name=name, description=description, sample=sample, analyte_label=label, report_as=report_as,
                    titrant_conc_M=cT, burette_mL=burette, matrix=matrix, search=search, targets=targets, source=path,
                    as_read=doc, methods=methods)


def load(path: str | Path) -> Scenario:
    """Read and validate one scenario file (UTF-8, at most :data:`yaml_reader.MAX_BYTES`)."""
    p = Path(path)
    try:
        if p.is_dir():
            raise ScenarioError("is a folder, not a scenario file", str(p))
        with p.open("rb") as f:
            if not p.is_file():
                raise ScenarioError("is not a regular file; allowed: a scenario file", str(p))
            data = f.read(yaml_reader.MAX_BYTES + 1)
    except FileNotFoundError:
        raise ScenarioError("no such file", str(p)) from None
    except OSError as exc:
        raise ScenarioError(f"cannot read the file: {exc.strerror or exc}", str(p)) from None
    return parse(yaml_reader.decode(data, str(p)), str(p))


DEMO = "demo_hardness.yaml"


def demo_text() -> str:
    return resources.files("optimiser").joinpath("scenarios", DEMO).read_text(encoding="utf-8")


def demo() -> Scenario:
    """The built-in demo scenario (shipped inside the package)."""
    return parse(demo_text(), f"<built-in demo {DEMO}>")


def find_scenarios(paths) -> list[Path]:
    """Every *.yaml / *.yml in the files and folders given (folders searched recursively), sorted."""
    out: list[Path] = []
    for p in map(Path, paths):
        if p.is_dir():
            out += sorted(q for q in p.rglob("*") if q.suffix in (".yaml", ".yml") and q.is_file())
        else:
            out.append(p)
    return list(dict.fromkeys(out))
