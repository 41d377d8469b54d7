"""Scenario files (YAML) -> validated, frozen objects.

The schema is the project's own (documented in the README). YAML is read with safe loading only;
unknown keys and duplicate keys are rejected; every error names the file, line and column and says what
is allowed.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

import yaml

from .constants import IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C, database
from .errors import InputError, OptimiserError, ScenarioError
from .method import Sample
from .objectives import OBJECTIVES as _OBJECTIVE_REGISTRY
from .reagents import HAZARD_NAMES, catalogue
from .strategies import strategy_ids
from .units import concentration_M, molarity, temperature_C, volume_mL

OBJECTIVES = tuple(_OBJECTIVE_REGISTRY)  # the objectives the weights may name (optimiser.objectives)
MODES = strategy_ids()  # the strategies a search may use (optimiser.strategies)

_SCHEMA: dict[str, Any] = {
    "name": str, "description": str,
    "sample": {"volume": None, "ionic_strength": None, "temperature": None, "matrix": str},
    "analyte": {"name": None, "metals": dict, "report_as": str},
    "interferents": dict,
    "titrant": {"concentration": None, "burette": None},
    "search": {"pH": list, "titrants": list, "buffers": list, "masking": list, "indicators": list, "forbid": list,
               "max_masking_agents": int, "max_hazard": None, "modes": list, "back_metals": list},
    "targets": {"max_error_percent": None, "weights": dict},
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

    @property
    def objectives(self) -> tuple[str, ...]:
        return tuple(k for k in OBJECTIVES if self.targets.weights.get(k, 0.0) > 0)


class _Marks:
    """Line and column of each key path in a YAML document (1-based), from the composed node tree."""

    def __init__(self, text: str, path: str):
        self.path = path
        self.marks: dict[tuple, tuple[int, int]] = {}
        try:
            node = yaml.compose(text, Loader=yaml.SafeLoader)
        except yaml.YAMLError as exc:
            mark = getattr(exc, "problem_mark", None)
            problem = getattr(exc, "problem", None) or str(exc)
            raise ScenarioError(f"malformed YAML: {problem}", path, mark.line + 1 if mark else None,
                                mark.column + 1 if mark else None) from None
        if node is not None:
            self._walk(node, ())

    def _walk(self, node, key):
        self.marks[key] = (node.start_mark.line + 1, node.start_mark.column + 1)
        if isinstance(node, yaml.MappingNode):
            seen = set()
            for k, v in node.value:
                name = k.value
                if name in seen:
                    raise ScenarioError(f"duplicate key {name!r}", self.path, k.start_mark.line + 1, k.start_mark.column + 1)
                seen.add(name)
                self.marks[key + (name, "<key>")] = (k.start_mark.line + 1, k.start_mark.column + 1)
                self._walk(v, key + (name,))
        elif isinstance(node, yaml.SequenceNode):
            for i, v in enumerate(node.value):
                self._walk(v, key + (i,))

    def error(self, message: str, key: tuple) -> ScenarioError:
        k = key
        while k and k not in self.marks:
            k = k[:-1]
        line, col = self.marks.get(k, (None, None))
        return ScenarioError(message, self.path, line, col)


def _check_keys(doc: Mapping, schema: Mapping, marks: _Marks, key: tuple) -> None:
    for k in doc:
        if k not in schema:
            where = "top level" if not key else ".".join(map(str, key))
            raise marks.error(f"unknown key {k!r} in {where}; allowed: {', '.join(schema)}", key + (k, "<key>"))
        sub = schema[k]
        if isinstance(sub, dict):
            if not isinstance(doc[k], Mapping):
                raise marks.error(f"{'.'.join(map(str, key + (k,)))} must be a mapping with keys {', '.join(sub)}", key + (k,))
            _check_keys(doc[k], sub, marks, key + (k,))
        elif sub in (list, dict, str, int) and doc[k] is not None and not isinstance(doc[k], sub):
            kind = {list: "a list", dict: "a mapping", str: "text", int: "a whole number"}[sub]
            raise marks.error(f"{'.'.join(map(str, key + (k,)))} must be {kind}", key + (k,))


def _names(values, resolve, marks, key) -> tuple[str, ...]:
    out = []
    for i, v in enumerate(values):
        if not isinstance(v, str):
            raise marks.error(f"{'.'.join(map(str, key))} entries must be names", key + (i,))
        try:
            out.append(resolve(v))
        except InputError as exc:
            raise marks.error(str(exc), key + (i,)) from None
    return tuple(dict.fromkeys(out))


def _hazard(value, marks, key) -> int:
    if isinstance(value, bool):
        raise marks.error(f"max_hazard must be one of {', '.join(HAZARD_NAMES)} (or 0-4)", key)
    if isinstance(value, int) and 0 <= value <= 4:
        return value
    if isinstance(value, str) and value.lower() in HAZARD_NAMES:
        return HAZARD_NAMES.index(value.lower())
    raise marks.error(f"max_hazard must be one of {', '.join(HAZARD_NAMES)} (or 0-4); got {value!r}", key)


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
            raise self.error(f"{'.'.join(key)}: {exc}", key) from None

    def list_(self, section: Mapping, key: tuple) -> list:
        """A list-valued key that is present (null is not a list: it is refused, not taken as empty)."""
        v = section[key[-1]]
        if not isinstance(v, list):
            raise self.error(f"{'.'.join(map(str, key))} must be a list", key)
        return v


def _document(text: str, path: str) -> tuple[Mapping[str, Any], _Marks]:
    """The YAML document (a mapping whose keys are all known) and the marks that locate its keys."""
    marks = _Marks(text, path)
    try:
        doc = yaml.safe_load(text)
    except yaml.YAMLError as exc:  # compose succeeded, so this is a constructor problem (bad tag, ...)
        mark = getattr(exc, "problem_mark", None)
        raise ScenarioError(f"cannot read the YAML: {getattr(exc, 'problem', exc)}", path,
                            mark.line + 1 if mark else None, mark.column + 1 if mark else None) from None
    if not isinstance(doc, Mapping):
        raise ScenarioError("a scenario must be a YAML mapping with keys " + ", ".join(_SCHEMA), path, 1, 1)
    _check_keys(doc, _SCHEMA, marks, ())
    for required in ("name", "sample", "analyte", "titrant"):
        if required not in doc:
            raise marks.error(f"missing key {required!r} (a scenario needs name, sample, analyte and titrant)", ())
    return doc, marks


def _name(r: _Reader) -> str:
    name = r.doc["name"]
    if not isinstance(name, str) or not name.strip():
        raise r.error("name must be non-empty text", ("name",))
    return name.strip()


def _conditions(r: _Reader) -> tuple[float, float, float]:
    """Sample volume [mL], ionic strength [M] and temperature [degC] from ``sample``."""
    s = r.doc["sample"]
    if "volume" not in s:
        raise r.error("sample.volume is required (for example 50 mL)", ("sample",))
    V0 = r.value(("sample", "volume"), volume_mL)
    I = r.value(("sample", "ionic_strength"), molarity, "ionic strength") if "ionic_strength" in s else 0.1
    if I > IONIC_STRENGTH_MAX_M:
        raise r.error(f"sample.ionic_strength must be at most {IONIC_STRENGTH_MAX_M:g} M (Davies holds to about 0.5 M)",
                      ("sample", "ionic_strength"))
    T = r.value(("sample", "temperature"), temperature_C) if "temperature" in s else 25.0
    lo, hi = TEMPERATURE_RANGE_C
    if not lo <= T <= hi:
        raise r.error(f"sample.temperature must be between {lo:g} and {hi:g} degC", ("sample", "temperature"))
    return V0, I, T


def _add_metals(r: _Reader, block: Mapping, key: tuple, metals: dict[str, float]) -> list[str]:
    """Read ``block`` (metal: concentration) into ``metals``; the ids added, in order."""
    db = database()
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
            metals[mid] = concentration_M(v, mid)
        except InputError as exc:
            raise r.error(f"{'.'.join(map(str, key + (m,)))}: {exc}", key + (m,)) from None
        added.append(mid)
    return added


def _metals(r: _Reader) -> tuple[dict[str, float], list[str], str, Any]:
    """Every metal's concentration [M], the analyte metals, the analyte's label and ``report_as``."""
    a = r.doc["analyte"]
    if "metals" not in a or not a["metals"]:
        raise r.error("analyte.metals is required: the metal or metals determined, with concentrations", ("analyte",))
    metals: dict[str, float] = {}
    analyte = _add_metals(r, a["metals"], ("analyte", "metals"), metals)
    if any(metals[m] <= 0 for m in analyte):
        raise r.error("every analyte metal needs a positive concentration", ("analyte", "metals"))
    _add_metals(r, r.doc.get("interferents") or {}, ("interferents",), metals)
    label = a.get("name")
    if label is not None and not isinstance(label, str):
        raise r.error("analyte.name must be text", ("analyte", "name"))
    return metals, analyte, label or " + ".join(analyte), a.get("report_as")


def _titrant(r: _Reader) -> tuple[float, float]:
    """Titrant concentration [M] and burette volume [mL]."""
    t = r.doc["titrant"]
    if "concentration" not in t:
        raise r.error("titrant.concentration is required (for example 0.01 M)", ("titrant",))
    cT = r.value(("titrant", "concentration"), molarity, "titrant concentration")
    if not 1e-4 <= cT <= 1.0:
        raise r.error("titrant.concentration must be between 0.0001 and 1 M", ("titrant", "concentration"))
    burette = r.value(("titrant", "burette"), volume_mL) if "burette" in t else 25.0
    return cT, burette


def _forbid(r: _Reader, sp: Mapping) -> set[str]:
    """The lower-cased names in ``search.forbid``, each checked to be a reagent."""
    forbid = set()
    for i, f in enumerate(sp.get("forbid") or []):
        if not isinstance(f, str):
            raise r.error("search.forbid entries must be reagent names", ("search", "forbid", i))
        forbid.add(f.strip().lower())
    return forbid


def _check_forbid(r: _Reader, forbid: set[str]) -> None:
    known = {x.lower() for x in catalogue().all_ids()}
    for f in forbid:
        if f not in known:
            raise r.error(f"search.forbid: unknown reagent {f!r}; known: {', '.join(sorted(known))}", ("search", "forbid"))


def _pH_range(r: _Reader, sp: Mapping) -> tuple[float, float]:
    rng = sp["pH"]
    if not isinstance(rng, list) or len(rng) != 2 or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in rng):
        raise r.error("search.pH must be [low, high], two numbers", ("search", "pH"))
    if not (0 <= rng[0] < rng[1] <= 14):
        raise r.error(f"search.pH must satisfy 0 <= low < high <= 14; got {rng}", ("search", "pH"))
    return float(rng[0]), float(rng[1])


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
        out[key] = tuple(c for c in chosen if c.lower() not in forbid)
    return out


def _modes(r: _Reader, sp: Mapping) -> tuple[str, ...]:
    modes = r.list_(sp, ("search", "modes"))
    for i, m in enumerate(modes):
        if m not in MODES:
            raise r.error(f"search.modes: {m!r} is not a mode; allowed: {', '.join(MODES)}", ("search", "modes", i))
    return tuple(modes)


def _back_metals(r: _Reader, sp: Mapping) -> tuple[str, ...]:
    standards = list(catalogue().standards)
    metals = r.list_(sp, ("search", "back_metals"))
    for i, m in enumerate(metals):
        if m not in standards:
            allowed = " or ".join([", ".join(standards[:-1]), standards[-1]] if len(standards) > 1 else standards)
            raise r.error(f"search.back_metals: the back-titration standard must be {allowed}", ("search", "back_metals", i))
    return tuple(metals)


def _search(r: _Reader) -> SearchSpace:
    sp = r.doc.get("search") or {}
    forbid = _forbid(r, sp)
    kwargs: dict[str, Any] = {}
    if "pH" in sp:
        kwargs["pH_range"] = _pH_range(r, sp)
    kwargs.update(_reagents(r, sp, forbid))
    _check_forbid(r, forbid)
    if "max_masking_agents" in sp:
        if not isinstance(sp["max_masking_agents"], int):
            raise r.error("search.max_masking_agents must be a whole number", ("search", "max_masking_agents"))
        kwargs["max_masking_agents"] = sp["max_masking_agents"]
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


def _weights(r: _Reader, tg: Mapping) -> dict[str, float]:
    weights = tg["weights"]
    if not isinstance(weights, Mapping):
        raise r.error("targets.weights must be a mapping", ("targets", "weights"))
    w = {}
    for k, v in weights.items():
        if k not in OBJECTIVES:
            raise r.error(f"unknown objective {k!r}; allowed: {', '.join(OBJECTIVES)}", ("targets", "weights", k, "<key>"))
        if isinstance(v, bool) or not isinstance(v, (int, float)) or v < 0:
            raise r.error(f"weight of {k} must be a number of 0 or more (0 drops the objective)", ("targets", "weights", k))
        w[k] = float(v)
    return {k: w.get(k, 1.0) for k in OBJECTIVES}


def _targets(r: _Reader) -> Targets:
    tg = r.doc.get("targets") or {}
    kwargs: dict[str, Any] = {}
    if "max_error_percent" in tg:
        v = tg["max_error_percent"]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not v > 0:
            raise r.error("targets.max_error_percent must be a positive number", ("targets", "max_error_percent"))
        kwargs["max_error_percent"] = float(v)
    if "weights" in tg:
        kwargs["weights"] = _weights(r, tg)
    try:
        return Targets(**kwargs)
    except InputError as exc:
        raise r.error(f"targets: {exc}", ("targets",)) from None


def parse(text: str, path: str = "<scenario>") -> Scenario:
    """Validate a scenario document and return a :class:`Scenario`.

    The sections are read in order (name, sample, analyte and interferents, titrant, search, targets); the
    first error found is raised.

    Raises
    ------
    ScenarioError
        With the file, line and column of the offending key or value.
    """
    doc, marks = _document(text, path)
    r = _Reader(doc, marks)
    name = _name(r)
    V0, I, T = _conditions(r)
    metals, analyte, label, report_as = _metals(r)
    cT, burette = _titrant(r)
    search = _search(r)
    targets = _targets(r)
    try:
        sample = Sample(volume_mL=V0, metals=metals, analyte=tuple(analyte), ionic_strength_M=I, temperature_C=T)
    except InputError as exc:
        raise r.error(str(exc), ("analyte",)) from None
    return Scenario(name=name, description=str(doc.get("description") or ""), sample=sample, analyte_label=str(label),
                    report_as=report_as, titrant_conc_M=cT, burette_mL=burette, matrix=str(doc["sample"].get("matrix") or ""),
                    search=search, targets=targets, source=path, as_read=doc)


def load(path: str | Path) -> Scenario:
    """Read and validate one scenario file."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ScenarioError("no such file", str(p)) from None
    except IsADirectoryError:
        raise ScenarioError("is a folder, not a scenario file", str(p)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ScenarioError(f"cannot read the file: {exc}", str(p)) from None
    return parse(text, str(p))


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
