"""The search result as JSON documents, and atomic file writing.

The bench procedure is :mod:`optimiser.procedure`; what a report shows is :mod:`optimiser.analysis`. Both read the
same search result, so the numbers an analyst reads in the report are the numbers in the JSON file.
"""
from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from .reagents import HAZARD_NAMES
from .search import Evaluation, SearchResult, strategy_of
from .strategies import strategy
from .titration import DROP_mL, Titration

SCHEMA_VERSION = 1


def _r(x: float | None, nd: int = 4) -> float | None:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return None
    return float(round(float(x), nd))


def _method_json(result: SearchResult, e: Evaluation) -> dict[str, Any]:
    c = e.candidate
    t = e.titration
    return {
        "pH": _r(c.pH, 3), "buffer": c.buffer, "titrant": c.titrant, "titrant_conc_M": result.scenario.titrant_conc_M,
        "masking": [{"agent": a, "conc_M": _r(d, 6)} for a, d in c.masking], "indicator": c.indicator,
        **strategy(c.mode).json_fields(c),  # "mode", "back_metal"
        "predicted_error_percent": _r(e.error_percent),
        "standardised_error_percent": _r(e.standardised_error_percent),
        "error_budget": {k: _r(v, 4) for k, v in t.budget.items()} if t is not None else {},
        "error_budget_standardised": {k: _r(v, 4) for k, v in t.standardised_budget.items()} if t is not None else {},
        "selectivity_margin_log": _r(e.margin, 3),
        "endpoint_sharpness_mL": _r(e.sharpness_mL), "hazard": HAZARD_NAMES[e.hazard], "strategy": strategy_of(e),
        "precipitates": sorted(set(t.precipitates_start) | set(t.precipitates_end)) if t is not None else [],
        "warnings": list(t.warnings) if t is not None else list(e.violations), "feasible": e.feasible,
        "violations": list(e.violations),
    }


def to_json(result: SearchResult) -> dict[str, Any]:
    """The JSON document of a run (stable keys; documented in the README)."""
    sc = result.scenario
    rec = None
    if result.recommended is not None:
        rec = _method_json(result, result.recommended)
        rec["robust_pH"] = [_r(x, 3) for x in result.robust_pH] if result.robust_pH else None
        rec["robust_dose_M"] = {k: [_r(v[0], 6), _r(v[1], 6)] for k, v in result.robust_dose.items()}
        t = result.recommended_titration
        rec["endpoint_mL"] = _r(t.endpoint_mL)
        rec["equivalence_mL"] = _r(t.equivalence_mL)
        rec["colour_change"] = list(t.colour_change)
        rec["cotitrated"] = {k: _r(v, 6) for k, v in t.cotitrated.items()}
        rec["indicator_blank_percent"] = _r(t.indicator_blank_percent)
    alts = []
    for a in result.front:
        if result.recommended is not None and a.evaluation.candidate == result.recommended.candidate:
            continue
        alts.append(_method_json(result, a.evaluation))
    cc = result.conditional
    return {
        "schema": SCHEMA_VERSION, "scenario": sc.name, "analyte": list(sc.sample.analyte), "seed": result.seed,
        "evaluations": result.evaluations, "wall_time_s": _r(result.wall_time_s, 2), "objectives": list(result.objectives),
        "meets_criteria": result.meets_criteria,
        "recommended": rec if result.meets_criteria else None,  # never a method that fails the criteria
        "closest_compromise": None if result.meets_criteria else rec,
        "rule": result.rule, "alternatives": alts,
        "conditional_constants": {"titrant": result.recommended.candidate.titrant if result.recommended else sc.search.titrants[0],
                                  "pH": [float(x) for x in cc["pH"]],
                                  **{m: [_r(v, 3) for v in cc[m]] for m in sc.sample.metals}},
        "notes": list(result.notes),
    }


def titration_json(t: Titration, every: int = 1) -> dict[str, Any]:
    """The JSON object of ``optimiser simulate --json``."""
    V = t.volume_mL
    return {
        "equivalence": {"volume_mL": _r(t.equivalence_mL), "pM": {m: _r(v) for m, v in t.pM_eq.items()}},
        "endpoint": {"volume_mL": _r(t.endpoint_mL), "pM": {m: _r(v) for m, v in t.pM_ep.items()}},
        "error_percent": _r(t.error_percent), "indicator_blank_percent": _r(t.indicator_blank_percent),
        "standardised_error_percent": _r(t.standardised_error_percent),
        "error_budget": {k: _r(v) for k, v in t.budget.items()},
        "error_budget_standardised": {k: _r(v) for k, v in t.standardised_budget.items()},
        "sharpness_mL": _r(t.sharpness_mL),
        "sharpness_drops": _r(t.sharpness_drops, 1), "too_gradual": t.too_gradual,
        "cotitrated": {m: _r(v, 6) for m, v in t.cotitrated.items()},
        "precipitates": sorted(set(t.precipitates_start) | set(t.precipitates_end)),
        "precipitates_start": list(t.precipitates_start), "precipitates_endpoint": list(t.precipitates_end),
        "blocked_by": list(t.blocked_by), "colour_change": list(t.colour_change), "mode": t.method.mode,
        "excess_mL": _r(t.excess_mL), "pH_drift": _r(t.pH_drift), "drop_mL": DROP_mL,
        "warnings": list(t.warnings), "assumptions": list(t.assumptions),
        "mass_balance_error": float(f"{t.mass_balance_error:.2e}"),
        "curve": {"volume_mL": [_r(v) for v in V[::every]],
                  "pM": {m: [_r(v) for v in arr[::every]] for m, arr in t.pM.items()},
                  "indicator_turned": [_r(v) for v in t.turned[::every]]},
    }


def write_atomic(path: Path, text: str) -> None:
    """Write a file through a temporary file and a rename: never a half-written or broken file in place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def dumps(obj: Any) -> str:
    def default(o):
        if isinstance(o, np.generic):
            return o.item()
        if isinstance(o, np.ndarray):
            return o.tolist()
        raise TypeError(f"cannot write {type(o).__name__} as JSON")
    return json.dumps(obj, indent=2, default=default, allow_nan=False) + "\n"
