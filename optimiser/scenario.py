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
from .reagents import HAZARD_NAMES, catalogue
from .titration import Sample
from .units import concentration_M, molarity, temperature_C, volume_mL

OBJECTIVES = ("error", "selectivity", "sharpness", "hazard", "complexity")
MODES = ("direct", "back")

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


def parse(text: str, path: str = "<scenario>") -> Scenario:
    """Validate a scenario document and return a :class:`Scenario`.

    Raises
    ------
    ScenarioError
        With the file, line and column of the offending key or value.
    """
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
    db = database()
    cat = catalogue()

    def field_(key: tuple, fn, *args):
        d: Any = doc
        for k in key:
            d = d[k]
        try:
            return fn(d, *args)
        except ScenarioError:
            raise
        except OptimiserError as exc:
            raise marks.error(f"{'.'.join(key)}: {exc}", key) from None

    name = doc["name"]
    if not isinstance(name, str) or not name.strip():
        raise marks.error("name must be non-empty text", ("name",))
    s = doc["sample"]
    if "volume" not in s:
        raise marks.error("sample.volume is required (for example 50 mL)", ("sample",))
    V0 = field_(("sample", "volume"), volume_mL)
    I = field_(("sample", "ionic_strength"), molarity, "ionic strength") if "ionic_strength" in s else 0.1
    if I > IONIC_STRENGTH_MAX_M:
        raise marks.error(f"sample.ionic_strength must be at most {IONIC_STRENGTH_MAX_M:g} M (Davies holds to about 0.5 M)",
                          ("sample", "ionic_strength"))
    T = field_(("sample", "temperature"), temperature_C) if "temperature" in s else 25.0
    lo, hi = TEMPERATURE_RANGE_C
    if not lo <= T <= hi:
        raise marks.error(f"sample.temperature must be between {lo:g} and {hi:g} degC", ("sample", "temperature"))

    a = doc["analyte"]
    if "metals" not in a or not a["metals"]:
        raise marks.error("analyte.metals is required: the metal or metals determined, with concentrations", ("analyte",))
    metals: dict[str, float] = {}
    analyte = []

    def add_metals(block: Mapping, key: tuple, is_analyte: bool) -> None:
        for m, v in block.items():
            try:
                mid = db.metal(str(m))
            except InputError as exc:
                raise marks.error(str(exc), key + (m, "<key>")) from None
            if db.metals[mid].get("internal"):
                raise marks.error(f"{m} is not a metal a sample can be given in", key + (m, "<key>"))
            if mid in metals:
                raise marks.error(f"{mid} is given twice (as analyte and interferent, or twice)", key + (m, "<key>"))
            try:
                metals[mid] = concentration_M(v, mid)
            except InputError as exc:
                raise marks.error(f"{'.'.join(map(str, key + (m,)))}: {exc}", key + (m,)) from None
            if is_analyte:
                analyte.append(mid)

    add_metals(a["metals"], ("analyte", "metals"), True)
    if any(metals[m] <= 0 for m in analyte):
        raise marks.error("every analyte metal needs a positive concentration", ("analyte", "metals"))
    add_metals(doc.get("interferents") or {}, ("interferents",), False)
    label = a.get("name")
    if label is not None and not isinstance(label, str):
        raise marks.error("analyte.name must be text", ("analyte", "name"))
    label = label or " + ".join(analyte)
    report_as = a.get("report_as")

    t = doc["titrant"]
    if "concentration" not in t:
        raise marks.error("titrant.concentration is required (for example 0.01 M)", ("titrant",))
    cT = field_(("titrant", "concentration"), molarity, "titrant concentration")
    if not 1e-4 <= cT <= 1.0:
        raise marks.error("titrant.concentration must be between 0.0001 and 1 M", ("titrant", "concentration"))
    burette = field_(("titrant", "burette"), volume_mL) if "burette" in t else 25.0

    sp = doc.get("search") or {}
    base = SearchSpace()
    forbid = set()
    if "forbid" in sp:
        for i, f in enumerate(sp["forbid"] or []):
            if not isinstance(f, str):
                raise marks.error("search.forbid entries must be reagent names", ("search", "forbid", i))
            forbid.add(f.strip().lower())
    kwargs: dict[str, Any] = {}
    if "pH" in sp:
        rng = sp["pH"]
        if len(rng) != 2 or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in rng):
            raise marks.error("search.pH must be [low, high], two numbers", ("search", "pH"))
        if not (0 <= rng[0] < rng[1] <= 14):
            raise marks.error(f"search.pH must satisfy 0 <= low < high <= 14; got {rng}", ("search", "pH"))
        kwargs["pH_range"] = (float(rng[0]), float(rng[1]))
    for key, resolver in (("titrants", lambda v: cat.titrant(v).id), ("buffers", lambda v: cat.buffer(v).id),
                          ("masking", lambda v: cat.masking_agent(v).id), ("indicators", lambda v: cat.indicator(v).id)):
        chosen = _names(sp[key], resolver, marks, ("search", key)) if key in sp else cat.default_ids(key)
        kwargs[key] = tuple(c for c in chosen if c.lower() not in forbid)
    known = {x.lower() for x in cat.all_ids()}
    for f in forbid:
        if f not in known:
            raise marks.error(f"search.forbid: unknown reagent {f!r}; known: {', '.join(sorted(known))}", ("search", "forbid"))
    if "max_masking_agents" in sp:
        kwargs["max_masking_agents"] = sp["max_masking_agents"]
    if "max_hazard" in sp:
        kwargs["max_hazard"] = _hazard(sp["max_hazard"], marks, ("search", "max_hazard"))
    if "modes" in sp:
        for i, m in enumerate(sp["modes"]):
            if m not in MODES:
                raise marks.error(f"search.modes: {m!r} is not a mode; allowed: {', '.join(MODES)}", ("search", "modes", i))
        kwargs["modes"] = tuple(sp["modes"])
    if "back_metals" in sp:
        standards = list(cat.standards)
        allowed = " or ".join([", ".join(standards[:-1]), standards[-1]] if len(standards) > 1 else standards)
        for i, m in enumerate(sp["back_metals"]):
            if m not in standards:
                raise marks.error(f"search.back_metals: the back-titration standard must be {allowed}", ("search", "back_metals", i))
        kwargs["back_metals"] = tuple(sp["back_metals"])
    kwargs["max_hazard"] = kwargs.get("max_hazard", base.max_hazard)
    try:
        search = SearchSpace(**kwargs)
    except InputError as exc:
        raise marks.error(f"search: {exc}", ("search",)) from None

    tg = doc.get("targets") or {}
    t_kwargs: dict[str, Any] = {}
    if "max_error_percent" in tg:
        v = tg["max_error_percent"]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not v > 0:
            raise marks.error("targets.max_error_percent must be a positive number", ("targets", "max_error_percent"))
        t_kwargs["max_error_percent"] = float(v)
    if "weights" in tg:
        w = {}
        for k, v in tg["weights"].items():
            if k not in OBJECTIVES:
                raise marks.error(f"unknown objective {k!r}; allowed: {', '.join(OBJECTIVES)}", ("targets", "weights", k, "<key>"))
            if isinstance(v, bool) or not isinstance(v, (int, float)) or v < 0:
                raise marks.error(f"weight of {k} must be a number of 0 or more (0 drops the objective)", ("targets", "weights", k))
            w[k] = float(v)
        t_kwargs["weights"] = {k: w.get(k, 1.0) for k in OBJECTIVES}
    try:
        targets = Targets(**t_kwargs)
    except InputError as exc:
        raise marks.error(f"targets: {exc}", ("targets",)) from None
    try:
        sample = Sample(volume_mL=V0, metals=metals, analyte=tuple(analyte), ionic_strength_M=I, temperature_C=T)
    except InputError as exc:
        raise marks.error(str(exc), ("analyte",)) from None
    desc = doc.get("description") or ""
    return Scenario(name=name.strip(), description=str(desc), sample=sample, analyte_label=str(label),
                    report_as=report_as, titrant_conc_M=cT, burette_mL=burette, matrix=str(s.get("matrix") or ""),
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
