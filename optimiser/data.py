"""Load the tables and documents in ``optimiser/data`` once, through importlib.resources, and check them.

The tables are plain CSV and YAML (see ``data/README.md``). This module reads them into plain Python
structures and checks each against a small declared schema: the columns of every CSV table, and the keys
of every kind of YAML entry (required keys, optional keys with their defaults, types, allowed values, and
source keys that must resolve in ``references.csv``). Anything wrong raises :class:`DataError` naming the
file, the entry and the key, and what is allowed. Interpretation (charges, Davies, van 't Hoff) lives in
:mod:`optimiser.constants`; typed reagents in :mod:`optimiser.reagents`.
"""
from __future__ import annotations

import csv
import io
from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Any

import yaml

from .errors import DataError

# --- CSV tables -------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Column:
    """One column of a CSV table.

    Attributes
    ----------
    type : type
        ``str``, ``int`` or ``float``: what every non-empty cell must read as.
    required : bool
        Whether every row must fill it.
    reference : bool
        Whether its value is a source key that must resolve in ``references.csv``.
    """

    type: type = str
    required: bool = True
    reference: bool = False


_OPTIONAL_TEXT = Column(str, required=False)
_CONDITIONS = {"temperature_C": Column(float), "ionic_strength_M": Column(float)}
_SOURCE = {"source": Column(str, reference=True), "note": _OPTIONAL_TEXT}
_DH = {"dH_kJ_mol": Column(float, required=False)}

# the uncertainty of the stored log10 value [log units]: the source's figure, or its quality class's default
# (data/README.md); required in every constants table
_UNCERTAINTY = {"uncertainty": Column(float)}

COLUMNS: dict[str, dict[str, Column]] = {
    "protonation.csv": {"ligand": Column(), "h": Column(int), "log_beta": Column(float), **_CONDITIONS,
                        "medium": _OPTIONAL_TEXT, **_DH, **_UNCERTAINTY, **_SOURCE},
    "complexes.csv": {"metal": Column(), "ligand": Column(), "n": Column(int), "h": Column(int), "log_beta": Column(float),
                      **_CONDITIONS, "medium": _OPTIONAL_TEXT, **_DH, **_UNCERTAINTY, **_SOURCE},
    "hydrolysis.csv": {"metal": Column(), "n": Column(int), "log_beta": Column(float), **_CONDITIONS, **_DH, **_UNCERTAINTY, **_SOURCE},
    # m: metal ions per formula unit (1 if empty); h: H+ in the dissolution products (solid = m M + n X + h H+; HPO4
    # salts h = 1, basic salts such as malachite h = -2; 0 if empty)
    "solids.csv": {"solid": Column(), "metal": Column(), "ligand": Column(), "n": Column(int), "log_Ksp": Column(float),
                   **_CONDITIONS, **_DH, **_UNCERTAINTY, **_SOURCE, "m": Column(int, required=False),
                   "h": Column(int, required=False)},
    # the enthalpy of water is required: it moves the hydrolysis constants from the OH- to the H+ form
    "water.csv": {"reaction": Column(), "log_K": Column(float), **_CONDITIONS, "dH_kJ_mol": Column(float), **_UNCERTAINTY, **_SOURCE},
    "references.csv": {"key": Column(), "citation": Column(), "location": _OPTIONAL_TEXT, "note": _OPTIONAL_TEXT},
}


def _text(name: str) -> str:
    try:
        return resources.files("optimiser").joinpath("data", name).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise DataError(f"cannot read the file: {exc}", name) from None


def _reads_as(value: str, kind: type) -> bool:
    try:
        kind(value)
    except ValueError:
        return False
    return True


def _check_row(name: str, line: int, row: Mapping[str, str | None], columns: Mapping[str, Column]) -> None:
    for col, spec in columns.items():
        value = (row.get(col) or "").strip()
        if not value:
            if spec.required:
                raise DataError("field is empty (it is required)", name, f"line {line}", col)
        elif spec.type is not str and not _reads_as(value, spec.type):
            what = "a whole number" if spec.type is int else "a number"
            raise DataError(f"{value!r} is not {what}", name, f"line {line}", col)
    if None in row:  # csv puts the cells beyond the header under the key None
        raise DataError(f"the row has more cells than the header's {len(columns)} columns", name, f"line {line}")


@lru_cache(maxsize=None)
def table(name: str) -> tuple[dict[str, str], ...]:
    """Rows of a CSV table as dicts of strings, checked against its declared columns.

    Parameters
    ----------
    name : str
        File name inside ``optimiser/data``, e.g. ``"complexes.csv"``.

    Raises
    ------
    DataError
        A column missing from or unknown to the header, a required cell empty, a number that does not
        read as one, or a source key that is not in ``references.csv`` (naming file, line and column).
    """
    reader = csv.DictReader(io.StringIO(_text(name)))
    columns = COLUMNS.get(name)
    if columns is None:
        raise DataError(f"no columns are declared for this table; declared: {', '.join(COLUMNS)}", name)
    header = reader.fieldnames or []
    for col in header:
        if col not in columns:
            raise DataError(f"unknown column; allowed: {', '.join(columns)}", name, "header", col)
    for col, spec in columns.items():
        if spec.required and col not in header:
            raise DataError("required column is missing", name, "header", col)
    rows = tuple(reader)
    refs = references() if name != "references.csv" else {}
    for i, row in enumerate(rows, start=2):
        _check_row(name, i, row, columns)
        for col, spec in columns.items():
            if spec.reference and row[col] not in refs:
                raise DataError(f"source key {row[col]!r} is not in references.csv", name, f"line {i}", col)
    return rows


@lru_cache(maxsize=None)
def references() -> dict[str, dict[str, str]]:
    """Reference key -> row of ``references.csv`` (keys unique)."""
    out: dict[str, dict[str, str]] = {}
    for i, row in enumerate(table("references.csv"), start=2):
        if row["key"] in out:
            raise DataError("duplicate reference key", "references.csv", f"line {i}", row["key"])
        out[row["key"]] = row
    return out


# --- YAML documents ---------------------------------------------------------------------------------------

_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)  # libyaml's safe loader where PyYAML has it (the same
#                                                           documents, about 20 times faster to read)


@lru_cache(maxsize=None)
def document(name: str) -> Any:
    """A YAML document from ``optimiser/data`` (safe loading), unchecked: see :func:`entries`."""
    try:
        return yaml.load(_text(name), Loader=_LOADER)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        raise DataError(f"malformed YAML{where}: {getattr(exc, 'problem', None) or exc}", name) from None


_TYPE_NAMES = {str: "text", int: "a whole number", float: "a number", bool: "true or false", list: "a list",
               dict: "a mapping"}


@dataclass(frozen=True)
class Key:
    """One key of a YAML entry (or of a mapping inside one).

    Attributes
    ----------
    type : type
        ``str``, ``int``, ``float`` (an integer is accepted and converted), ``bool``, ``list`` or ``dict``.
    required : bool
        Whether the entry must give it; otherwise ``default`` is filled in.
    default : Any
        The value of an optional key that is absent (a list or dict default is copied).
    nullable : bool
        Whether ``null`` is allowed.
    choices : tuple, optional
        The values allowed.
    items : Key, optional
        For a list: each item; for a mapping with free keys (metal ids, numbers of protons): each value.
    keys : Mapping[str, Key], optional
        For a mapping with fixed keys: its own schema (unknown keys rejected).
    reference : bool
        The value (or each item of the list) is a source key that must resolve in ``references.csv``.
    """

    type: type
    required: bool = True
    default: Any = None
    nullable: bool = False
    choices: tuple | None = None
    items: Key | None = None
    keys: Mapping[str, Key] | None = None
    reference: bool = False


Schema = Mapping[str, Key]


def optional(type_: type, default: Any = None, **kwargs: Any) -> Key:
    """A key an entry may leave out (``default`` is filled in)."""
    return Key(type_, required=False, default=default, **kwargs)


def _describe(spec: Key) -> str:
    what = _TYPE_NAMES[spec.type]
    if spec.items is not None and spec.type is list:
        what += f" of {_TYPE_NAMES[spec.items.type]}"
    if spec.choices is not None:
        what = "one of " + ", ".join(map(str, spec.choices))
    return what + (" (or null)" if spec.nullable else "")


def _typed(value: Any, spec: Key, where: tuple[str, str, str]) -> Any:
    """``value`` checked for type, null and allowed values (a float key converts an integer)."""
    if value is None:
        if spec.nullable:
            return None
        raise DataError(f"must be {_describe(spec)}; got null", *where)
    is_number = isinstance(value, (int, float)) and not isinstance(value, bool)
    if spec.type is float and is_number:
        value = float(value)
    elif not isinstance(value, spec.type) or (spec.type is int and not is_number):
        raise DataError(f"must be {_describe(spec)}; got {value!r}", *where)
    if spec.choices is not None and value not in spec.choices:
        raise DataError(f"{value!r} is not allowed; allowed: {', '.join(map(str, spec.choices))}", *where)
    return value


def _value(value: Any, spec: Key, where: tuple[str, str, str]) -> Any:
    """``value`` checked against ``spec``, nested lists and mappings included; raises DataError(file, entry, key)."""
    value = _typed(value, spec, where)
    if value is None:
        return None
    file, entry, key = where
    if spec.reference:
        _check_references(value if isinstance(value, list) else [value], where)
    if spec.keys is not None:
        return _mapping(value, spec.keys, where)
    if spec.items is not None and spec.type is list:
        return [_value(v, spec.items, (file, entry, f"{key}[{i}]")) for i, v in enumerate(value)]
    if spec.items is not None and spec.type is dict:
        return {k: _value(v, spec.items, (file, entry, f"{key}.{k}")) for k, v in value.items()}
    return value


def _check_references(keys: list, where: tuple[str, str, str]) -> None:
    refs = references()
    for k in keys:
        if k not in refs:
            raise DataError(f"source key {k!r} is not in references.csv (add it there, with the full citation)", *where)


def _mapping(doc: Mapping[str, Any], schema: Schema, where: tuple[str, str, str]) -> dict[str, Any]:
    """Every key of ``doc`` checked, every optional key filled with its default."""
    file, entry, prefix = where
    dotted = (prefix + ".") if prefix else ""
    for k in doc:
        if k not in schema:
            raise DataError(f"unknown key; allowed: {', '.join(schema)}", file, entry, dotted + str(k))
    out: dict[str, Any] = {}
    for k, spec in schema.items():
        if k not in doc:
            if spec.required:
                raise DataError(f"missing key (required: {', '.join(n for n, s in schema.items() if s.required)})",
                                file, entry, dotted + k)
            out[k] = spec.default.copy() if isinstance(spec.default, (list, dict)) else spec.default
            continue
        out[k] = _value(doc[k], spec, (file, entry, dotted + k))
    return out


_HAZARD = Key(int, choices=(0, 1, 2, 3, 4))
_TEXTS = Key(list, items=Key(str))
_NUMBER_PAIR = Key(list, items=Key(float))
_SOLUTION = Key(dict, keys={"name": Key(str), "molarity_M": Key(float)})
# Is the reagent in the search space of a scenario that does not list its kind? (data owns the defaults)
_SEARCH_DEFAULT = Key(bool)
# Other spellings a user may type for an entry (British spellings, common names); matched ignoring case and the
# difference between space, - and _.
_ALIASES = optional(list, [], items=Key(str))

RECIPE_KINDS = ("salt_plus_base_solution", "salt_plus_acid_solution", "base_plus_acid_solution", "strong_base", "strong_acid")

# A stock solution (stocks.yaml): one schema for every section; the stocks module reads what each section uses.
STOCK_SECTIONS = ("titrants", "buffers", "masking", "indicators", "standards", "neutralisers")
_STOCK: Schema = {
    "id": Key(str), "name": optional(str), "formula": optional(str), "conc_M": optional(list, [], items=Key(float)),
    "dissolve": optional(str, ""), "acid_solution": optional(dict, keys=_SOLUTION.keys),
    "base_solution": optional(dict, keys=_SOLUTION.keys), "recipe": optional(str), "batch_mL": optional(float, 1000.0),
    "solid": optional(bool, False), "hazards": optional(list, [], items=Key(str)), "shelf_life": Key(str),
    "timing": optional(dict, keys={"text": Key(str), "source": Key(str, reference=True)}),
    "source": Key(str, reference=True), "alkaline_only": optional(bool, False)}

SCHEMAS: dict[tuple[str, str | None], Schema] = {
    ("metals.yaml", None): {
        "id": Key(str), "element": Key(str), "charge": Key(int), "name": Key(str), "aliases": _ALIASES,
        "internal": optional(bool, False), "binds_titrant": optional(bool, True), "slow_with_titrant": optional(bool, False),
        "counter_ion": optional(bool, False)},
    ("reagents.yaml", "ligands"): {"id": Key(str), "charge": Key(int), "aliases": _ALIASES},
    ("reagents.yaml", "titrants"): {
        "id": Key(str), "name": Key(str), "charge": Key(int), "formula": Key(str), "salt": Key(str), "hazard": _HAZARD,
        "cautions": _TEXTS, "complexity": Key(float), "search_default": _SEARCH_DEFAULT, "aliases": _ALIASES,
        # counter-ions per mole of titrant where the formula weighed does not hold them (a free acid dissolved with NaOH)
        "counter_ions": optional(dict, {}, items=Key(float))},
    ("reagents.yaml", "buffers"): {
        "id": Key(str), "name": Key(str), "ligand": Key(str, nullable=True), "pH_range": _NUMBER_PAIR,
        "recipe": Key(dict, keys={
            "kind": Key(str, choices=RECIPE_KINDS),
            "acid_formula": optional(str), "base_formula": optional(str),
            "acid_solution": optional(dict, keys=_SOLUTION.keys), "base_solution": optional(dict, keys=_SOLUTION.keys)}),
        "strong_alkali": optional(bool, False), "default_total_M": optional(float, 0.0), "hazard": _HAZARD,
        "cautions": _TEXTS, "search_default": _SEARCH_DEFAULT, "aliases": _ALIASES},
    ("reagents.yaml", "masking"): {
        "id": Key(str), "name": Key(str), "ligand": Key(str), "formula": Key(str), "salt": Key(str),
        "density_g_mL": optional(float), "min_pH": Key(float), "dose_range_M": _NUMBER_PAIR, "hazard": _HAZARD,
        "reduces": optional(dict, {}, items=Key(dict, keys={
            "to": Key(str), "mol_reagent_per_mol_metal": Key(float), "note": Key(str)})),
        "masks": optional(dict, {}, items=Key(dict, keys={
            "pH_range": _NUMBER_PAIR, "min_ratio": Key(float), "note": Key(str)})),
        "cautions": _TEXTS, "search_default": _SEARCH_DEFAULT, "aliases": _ALIASES},
    ("reagents.yaml", "standards"): {
        "id": Key(str), "name": Key(str), "salt": Key(str), "formula": Key(str), "hazard": _HAZARD, "cautions": _TEXTS},
    ("reagents.yaml", "primary_standards"): {
        "id": Key(str), "substance": Key(str), "formula": Key(str), "preparation": Key(str),
        "source": Key(str, reference=True), "hazards": optional(list, [], items=Key(str))},
    ("reagents.yaml", "safety_rules"): {
        "name": Key(str), "when_all": Key(list, items=Key(str)), "unless_any": optional(list, [], items=Key(str)),
        "hazard": _HAZARD, "cautions": _TEXTS},
    ("anions.yaml", "ligands"): {
        "id": Key(str), "name": Key(str), "expel": optional(str), "expel_source": optional(str, reference=True),
        "assumption": optional(str, "")},
    ("anions.yaml", "inputs"): {
        "id": Key(str), "ligand": Key(str), "formula": Key(str), "as": Key(dict, items=Key(float)), "molar": Key(str),
        "aliases": _ALIASES, "note": optional(str, "")},
    ("reagents.yaml", "safety_contradictions"): {
        "name": Key(str), "first": Key(str), "second": Key(str), "resolution": Key(str)},
    **{("stocks.yaml", section): _STOCK for section in STOCK_SECTIONS},
    ("indicators.yaml", None): {
        "id": Key(str), "name": Key(str), "aliases": _ALIASES,
        "forms": Key(dict, items=Key(str)), "complex_colours": Key(dict, items=Key(str)),
        "usable_pH": _NUMBER_PAIR, "blocked_by": Key(list, items=Key(str)), "needs_Mg_for_Ca": Key(bool),
        "conc_M": Key(float), "dose": Key(str), "formula": Key(str), "hazard": _HAZARD,
        "sources": Key(list, items=Key(str), reference=True), "search_default": _SEARCH_DEFAULT,
        # levels of a blocking metal that a published method tolerates [mg/L in the sample], and their source
        "tolerated": optional(dict, None, nullable=True, keys={
            "source": Key(str, reference=True), "mg_per_L": Key(dict, items=Key(float))}),
        # the temperature the dye is read at in published practice (the solution is warmed to it), and its source
        # a one-colour indicator: the least concentration of its metal complex the eye sees [mol/L] (the end point is
        # read where the colour vanishes); absent for a two-colour indicator, read at the mixed colour
        "visible_limit_M": optional(float, None, nullable=True),
        "working_temperature": optional(dict, None, nullable=True, keys={
            "degC": Key(float), "source": Key(str, reference=True)})},
}


def entries(name: str, section: str | None = None) -> tuple[dict[str, Any], ...]:
    """The entries of a YAML data file (or of one section of it), each checked against its schema.

    Parameters
    ----------
    name : str
        File name inside ``optimiser/data``, e.g. ``"indicators.yaml"``.
    section : str, optional
        Top-level key holding the list (``"titrants"``); None for a file that is a list itself.

    Returns
    -------
    tuple of dict
        One dict per entry with every declared key (optional ones filled with their defaults).

    Raises
    ------
    DataError
        An unknown or missing key, a value of the wrong type, an id given twice, or a source key that does
        not resolve, naming the file, the entry (``section/id``) and the key, and what is allowed.

    Examples
    --------
    >>> [t["id"] for t in entries("reagents.yaml", "titrants")]
    ['EDTA', 'EGTA', 'CDTA', 'DTPA']
    """
    schema = SCHEMAS.get((name, section))
    if schema is None:
        known = ", ".join(f"{f}" + (f" ({s})" if s else "") for f, s in SCHEMAS)
        raise DataError(f"no schema is declared for section {section!r}; declared: {known}", name)
    label = f"{section}/" if section else ""
    out: list[dict[str, Any]] = []
    seen: set[str] = set()
    for i, item in enumerate(_section(name, section)):
        ident = item.get("id", item.get("name")) if isinstance(item, Mapping) else None
        entry = f"{label}{ident}" if isinstance(ident, str) else f"{label}[{i}]"
        if not isinstance(item, Mapping):
            raise DataError(f"each entry must be a mapping with keys {', '.join(schema)}", name, entry)
        checked = _mapping(item, schema, (name, entry, ""))
        key = checked.get("id", checked.get("name"))
        if key in seen:
            raise DataError("given twice", name, entry, "id" if "id" in schema else "name")
        seen.add(key)
        out.append(checked)
    return tuple(out)


def _section(name: str, section: str | None) -> list:
    """The list of entries of a file, or of one of its sections (the file's sections checked against SCHEMAS)."""
    doc = document(name)
    if section is not None:
        sections = [s for f, s in SCHEMAS if f == name]
        if not isinstance(doc, Mapping):
            raise DataError(f"must be a mapping with the sections {', '.join(sections)}", name)
        for s in doc:
            if s not in sections:
                raise DataError(f"unknown section; allowed: {', '.join(sections)}", name, None, str(s))
        if section not in doc:
            raise DataError("missing section", name, None, section)
        doc = doc[section]
    if not isinstance(doc, list):
        raise DataError("must be a list of entries", name, None, section)
    return doc
