"""Reading the reagent entries of the data files into the :class:`~optimiser.reagents.Catalogue`, and the checks
that need the whole catalogue or the constants database (metal ids, ligand charges, aliases, safety rules).

Every entry has already been checked against its schema by :mod:`optimiser.data`; a problem found here is a
``DataError`` naming the file, the entry and the key.
"""
from __future__ import annotations

from collections.abc import Mapping
from functools import lru_cache
from typing import Any

from . import data
from .constants import database
from .errors import DataError, InputError
from .reagents import (
    KINDS,
    Buffer,
    BufferRecipe,
    Catalogue,
    Indicator,
    MaskingAgent,
    PrimaryStandard,
    SafetyContradiction,
    SafetyRule,
    Solution,
    Standard,
    Titrant,
    spelling,
)


def _solution(d: Mapping[str, Any] | None) -> Solution | None:
    return None if d is None else Solution(d["name"], d["molarity_M"])


def _built(file: str, section: str | None, make) -> dict[str, Any]:
    """Entries of one kind as objects by id; a check that fails in ``__post_init__`` names the file and entry."""
    out = {}
    for d in data.entries(file, section):
        ident = d.get("id", d.get("name"))
        try:
            out[ident] = make(d)
        except DataError as exc:
            raise DataError(exc.message, file, f"{section}/{ident}" if section else ident) from None
    return out


def _titrant(d: Mapping[str, Any]) -> Titrant:
    return Titrant(d["id"], d["name"], d["formula"], d["salt"], d["hazard"], tuple(d["cautions"]), d["complexity"],
                   d["search_default"], tuple(d["aliases"]), tuple((k, float(v)) for k, v in d["counter_ions"].items()))


def _buffer(d: Mapping[str, Any]) -> Buffer:
    r = d["recipe"]
    recipe = BufferRecipe(r["kind"], r["acid_formula"], r["base_formula"], _solution(r["acid_solution"]),
                          _solution(r["base_solution"]))
    return Buffer(d["id"], d["name"], d["ligand"], tuple(d["pH_range"]), d["hazard"], tuple(d["cautions"]), recipe,
                  d["default_total_M"], d["strong_alkali"], d["search_default"], tuple(d["aliases"]))


def _masking(d: Mapping[str, Any]) -> MaskingAgent:
    return MaskingAgent(d["id"], d["name"], d["ligand"], d["formula"], d["salt"], d["min_pH"], tuple(d["dose_range_M"]),
                        d["hazard"], tuple(d["cautions"]), d["reduces"], d["masks"], d["density_g_mL"], d["search_default"],
                        tuple(d["aliases"]))


def _indicator(d: Mapping[str, Any]) -> Indicator:
    return Indicator(d["id"], d["name"], tuple(d["aliases"]), {int(k): v for k, v in d["forms"].items()},
                     dict(d["complex_colours"]), tuple(d["usable_pH"]), tuple(d["blocked_by"]), d["needs_Mg_for_Ca"],
                     d["conc_M"], d["dose"], d["hazard"], tuple(d["sources"]), d["formula"], d["search_default"],
                     dict((d["tolerated"] or {}).get("mg_per_L", {})),
                     (d["tolerated"] or {}).get("source"),
                     (d["working_temperature"] or {}).get("degC"), (d["working_temperature"] or {}).get("source"),
                     d["visible_limit_M"])


def _primary(d: Mapping[str, Any]) -> PrimaryStandard:
    return PrimaryStandard(d["id"], d["substance"], d["formula"], d["preparation"], d["source"], tuple(d["hazards"]))


def _standard(d: Mapping[str, Any]) -> Standard:
    return Standard(d["id"], d["name"], d["salt"], d["formula"], d["hazard"], tuple(d["cautions"]))


def _rule(d: Mapping[str, Any]) -> SafetyRule:
    return SafetyRule(d["name"], tuple(d["when_all"]), tuple(d["unless_any"]), d["hazard"], tuple(d["cautions"]))


def _check_metal(m: str, file: str, entry: str, key: str) -> None:
    """``m`` is a metal id of the database (not another spelling of one)."""
    db = database()
    try:
        ident = db.metal(m)
    except InputError as exc:
        raise DataError(str(exc), file, entry, key) from None
    if ident != m:
        raise DataError(f"{m!r} is a spelling of {ident!r}: use the id", file, entry, key)


def _check_indicators(cat: Catalogue) -> None:
    charges = database().charges
    for ind in cat.indicators.values():
        for m in ind.blocked_by:
            _check_metal(m, "indicators.yaml", ind.id, "blocked_by")
        for m in ind.complex_colours:
            if m != "default":
                _check_metal(m, "indicators.yaml", ind.id, "complex_colours")
        for m in ind.tolerated_mg_L:
            _check_metal(m, "indicators.yaml", ind.id, "tolerated.mg_per_L")
        if ind.id not in charges:
            raise DataError("the indicator's ligand has no charge in reagents.yaml (ligands:)", "indicators.yaml", ind.id, "id")


def _check_ligands(cat: Catalogue) -> None:
    charges = database().charges
    ligands = [(f"titrants/{t.id}", t.id) for t in cat.titrants.values()] + \
        [(f"buffers/{b.id}", b.ligand) for b in cat.buffers.values() if b.ligand] + \
        [(f"masking/{a.id}", a.ligand) for a in cat.masking.values()]
    for entry, lig in ligands:
        if lig not in charges:
            raise DataError(f"ligand {lig!r} has no charge in reagents.yaml (ligands:)", "reagents.yaml", entry, "ligand")
    declared = {d["id"]: d["charge"] for d in data.entries("reagents.yaml", "ligands")}
    for t in data.entries("reagents.yaml", "titrants"):
        if declared.get(t["id"]) != t["charge"]:
            raise DataError(f"charge {t['charge']} differs from the ligand's {declared.get(t['id'])} (ligands:)",
                            "reagents.yaml", f"titrants/{t['id']}", "charge")


def _check_aliases(cat: Catalogue) -> None:
    """Within each kind (and among the ligands), every id and alias names one entry only."""
    ligands = {d["id"]: d["aliases"] for d in data.entries("reagents.yaml", "ligands")}
    kinds = {kind: {i: getattr(e, "aliases", ()) for i, e in getattr(cat, kind).items()} for kind in KINDS}
    kinds["ligands"] = ligands
    for kind, table in kinds.items():
        seen: dict[str, str] = {}
        for ident, aliases in table.items():
            for name in dict.fromkeys(map(spelling, (ident, *aliases))):
                if name in seen:
                    file = "indicators.yaml" if kind == "indicators" else "reagents.yaml"
                    raise DataError(f"{name!r} names both {seen[name]!r} and {ident!r}", file, f"{kind}/{ident}", "aliases")
                seen[name] = ident


def _check_safety_rules(cat: Catalogue) -> None:
    known = set(cat.all_ids())
    for rule in cat.safety_rules:
        for key in ("when_all", "unless_any"):
            for r in getattr(rule, key):
                if r not in known:
                    raise DataError(f"{r!r} is not a reagent id; known: {', '.join(sorted(known))}", "reagents.yaml",
                                    f"safety_rules/{rule.name}", key)


@lru_cache(maxsize=1)
def catalogue() -> Catalogue:
    """Every reagent in the data folder, checked (cached)."""
    cat = Catalogue(
        titrants=_built("reagents.yaml", "titrants", _titrant),
        buffers=_built("reagents.yaml", "buffers", _buffer),
        masking=_built("reagents.yaml", "masking", _masking),
        indicators=_built("indicators.yaml", None, _indicator),
        standards=_built("reagents.yaml", "standards", _standard),
        safety_rules=tuple(_built("reagents.yaml", "safety_rules", _rule).values()),
        primary_standards=_built("reagents.yaml", "primary_standards", _primary),
        safety_contradictions=tuple(SafetyContradiction(**d) for d in data.entries("reagents.yaml", "safety_contradictions")),
    )
    # names that must resolve elsewhere: metal ids, ligand charges, the reagent ids of the safety rules
    _check_indicators(cat)
    for s in cat.standards.values():
        _check_metal(s.id, "reagents.yaml", f"standards/{s.id}", "id")
    for p in cat.primary_standards.values():
        _check_metal(p.id, "reagents.yaml", f"primary_standards/{p.id}", "id")
    for t in cat.titrants.values():
        for m, _ in t.counter_ions:
            _check_metal(m, "reagents.yaml", f"titrants/{t.id}", "counter_ions")
            if not database().metals[m].get("counter_ion"):
                raise DataError(f"{m!r} is not a counter-ion (metals.yaml: counter_ion)", "reagents.yaml",
                                f"titrants/{t.id}", "counter_ions")
    _check_ligands(cat)
    _check_aliases(cat)
    _check_safety_rules(cat)
    return cat
