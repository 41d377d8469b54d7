"""The search result as JSON documents, and file writing: atomic, in pairs, and into folders checked beforehand.

The bench procedure is :mod:`optimiser.procedure`; what a report shows is :mod:`optimiser.analysis`. Both read the
same search result, so the numbers an analyst reads in the report are the numbers in the JSON file.
"""
from __future__ import annotations

import contextlib
import json
import math
import os
import signal
import tempfile
import threading
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InputError, printable
from .objectives import complexity_of
from .reagents import HAZARD_NAMES
from .search import Evaluation, SearchResult, strategy_of
from .strategies import strategy
from .titration import DROP_mL, Titration

SCHEMA_VERSION = 2  # 2: no wall time (identical runs write identical files)


def _r(x: float | None, nd: int = 4) -> float | None:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return None
    return float(round(float(x), nd))


def solids_start_mmol_L(t) -> dict[str, float]:
    """Each solid present before the titrant is added, with its amount [mmol per litre of the aliquot]."""
    return {name: _r(1000 * float(amount[0]), 4) for name, amount in t.solids.items() if amount[0] > 1e-12}


def _method_json(result: SearchResult, e: Evaluation) -> dict[str, Any]:
    c = e.candidate
    t = e.titration
    return {
        "pH": _r(c.pH, 3), "buffer": c.buffer, "titrant": c.titrant, "titrant_conc_M": result.scenario.titrant_conc_M,
        "masking": [{"agent": a, "conc_M": _r(d, 6)} for a, d in (t.method.masking if t is not None else c.masking)],
        "indicator": c.indicator,
        **strategy(c.mode).json_fields(t.method if t is not None else c),  # "mode", "back_metal", the strategy's own
        "predicted_error_percent": _r(e.error_percent),
        "standardised_error_percent": _r(e.standardised_error_percent),
        "error_by_cause_percent": _r(t.error_by_cause_percent) if t is not None else None,
        "error_budget": {k: _r(v, 4) for k, v in t.budget.items()} if t is not None else {},
        "steps": steps_json(t) if t is not None else [],
        "error_budget_standardised": {k: _r(v, 4) for k, v in t.standardised_budget.items()} if t is not None else {},
        "selectivity_margin_log": _r(e.margin, 3),
        "endpoint_sharpness_mL": _r(e.sharpness_mL), "hazard": HAZARD_NAMES[e.hazard], "strategy": strategy_of(e),
        "precipitates": sorted(set(t.precipitates_start) | set(t.precipitates_end)) if t is not None else [],
        "solids_start_mmol_L": solids_start_mmol_L(t) if t is not None else {},
        "warnings": list(t.warnings) if t is not None else list(e.violations), "feasible": e.feasible,
        "violations": list(e.violations),
    }


def _listed_json(result: SearchResult) -> list[dict[str, Any]]:
    """The scenario's listed methods, each shaped like "recommended" plus how it stands against the search."""
    out = []
    for o in getattr(result, "listed", ()):
        e = o.evaluation
        out.append({"name": o.listed.name, "source": o.listed.source, **_method_json(result, e),
                    "buffer_total_M": _r(o.listed.buffer_total_M, 6), "complexity": _r(complexity_of(e.candidate), 2),
                    "meets_criteria": o.meets_criteria, "dominated": o.dominated, "dominated_by": o.dominated_by,
                    "dominated_by_recommendation": o.dominated_by_recommendation,
                    "robust_pH": [_r(x, 3) for x in o.robust_pH] if o.robust_pH else None,
                    "robust_dose_M": {k: [_r(v[0], 6), _r(v[1], 6)] for k, v in o.robust_dose.items()}})
    return out


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
        "evaluations": result.evaluations, "objectives": list(result.objectives),
        "meets_criteria": result.meets_criteria,
        "recommended": rec if result.meets_criteria else None,  # never a method that fails the criteria
        "closest_compromise": None if result.meets_criteria else rec,
        "rule": result.rule, "alternatives": alts,
        "conditional_constants": {"titrant": result.recommended.candidate.titrant if result.recommended else sc.search.titrants[0],
                                  "pH": [float(x) for x in cc["pH"]],
                                  **{m: [_r(v, 3) for v in cc[m]] for m in sc.sample.metals}},
        "notes": list(result.notes),
        "listed_methods": _listed_json(result),
        "search": stats.as_dict() if (stats := getattr(result, "stats", None)) is not None else None,
    }


def titration_json(t: Titration, every: int = 1) -> dict[str, Any]:
    """The JSON object of ``optimiser simulate --json``."""
    V = t.volume_mL
    return {
        "equivalence": {"volume_mL": _r(t.equivalence_mL), "pM": {m: _r(v) for m, v in t.pM_eq.items()}},
        "endpoint": {"volume_mL": _r(t.endpoint_mL), "pM": {m: _r(v) for m, v in t.pM_ep.items()}},
        "error_percent": _r(t.error_percent), "indicator_blank_percent": _r(t.indicator_blank_percent),
        "standardised_error_percent": _r(t.standardised_error_percent),
        "error_by_cause_percent": _r(t.error_by_cause_percent),
        "error_budget": {k: _r(v) for k, v in t.budget.items()},
        "error_budget_standardised": {k: _r(v) for k, v in t.standardised_budget.items()},
        "sharpness_mL": _r(t.sharpness_mL),
        "sharpness_drops": _r(t.sharpness_drops, 1), "too_gradual": t.too_gradual,
        "cotitrated": {m: _r(v, 6) for m, v in t.cotitrated.items()},
        "precipitates": sorted(set(t.precipitates_start) | set(t.precipitates_end)),
        "precipitates_start": list(t.precipitates_start), "precipitates_endpoint": list(t.precipitates_end),
        "solids_start_mmol_L": solids_start_mmol_L(t),
        "blocked_by": list(t.blocked_by), "colour_change": list(t.colour_change), "mode": t.method.mode,
        "excess_mL": _r(t.excess_mL), "pH_drift": _r(t.pH_drift), "drop_mL": DROP_mL,
        "warnings": list(t.warnings), "assumptions": list(t.assumptions),
        "mass_balance_error": float(f"{t.mass_balance_error:.2e}"),
        "curve": {"volume_mL": [_r(v) for v in V[::every]],
                  "pM": {m: [_r(v) for v in arr[::every]] for m, arr in t.pM.items()},
                  "indicator_turned": [_r(v) for v in t.turned[::every]],
                  "ionic_strength_M": [_r(v, 6) for v in t.ionic_strength_M[::every]]},
        "strategy": t.method.strategy.json_fields(t.method),
        "steps": steps_json(t),
    }


def steps_json(t: Titration) -> list[dict[str, Any]]:
    """Each end point of the titration with its own step, volume, error, budget and colour change (one for a single
    titration; one per step and per derived result for a multi-step strategy)."""
    return [{"label": ep.label, "step": ep.step, "derived": ep.derived, "start_mL": _r(ep.start_mL),
             "volume_mL": _r(ep.volume_mL), "error_percent": _r(ep.error_percent),
             "standardised_error_percent": _r(ep.standardised_percent), "sharpness_mL": _r(ep.sharpness_mL),
             "colour_change": list(ep.colour_change), "error_budget": {k: _r(v) for k, v in ep.budget.items()},
             "error_budget_standardised": {k: _r(v) for k, v in ep.standardised_parts.items()}}
            for ep in t.endpoints]


def writable_folder(folder: Path, option: str = "--out") -> Path:
    """Make sure files can be written in ``folder`` before any work is done: create it if needed, then create and
    remove a probe file in it.

    Raises
    ------
    InputError
        ``folder`` is a file, lies below a file, cannot be created, or is read-only; the message names the option.
    """
    folder = Path(folder)
    shown = printable(str(folder))
    allowed = "allowed: a folder, new or existing, where files can be written"
    existing = folder
    while not os.path.lexists(existing) and existing != existing.parent:
        existing = existing.parent
    if os.path.lexists(existing) and not existing.is_dir():
        where = "is a file" if existing == folder else f"lies below the file {printable(str(existing))}"
        raise InputError(f"{option} {shown} {where}, not a folder; {allowed}")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(prefix=".optimiser-probe-", suffix=".tmp", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise InputError(f"{option} {shown}: cannot write in this folder (read-only, or no permission: "
                         f"{exc.strerror or exc}); {allowed}") from None
    return folder


Content = str | Callable[[Path], None]


@contextlib.contextmanager
def _signals_held():
    """SIGINT, SIGTERM and SIGHUP wait until the block is done (in the main thread; elsewhere nothing is held)."""
    held = {signal.SIGINT, signal.SIGTERM, signal.SIGHUP}
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def write_together(files: Sequence[tuple[Path, Content]]) -> None:
    """Write files that belong together (a report and its JSON): all of them appear, or none changes.

    Each file is written in full to a temporary file in its own folder (``.optimiser-*.tmp``; text, or a writer
    called with the temporary path) and flushed to disk; only when every one is complete are they renamed onto their
    names, in the order given, with SIGINT, SIGTERM and SIGHUP held until the last rename is done. An error while
    writing removes the temporaries and changes nothing.

    What remains: the renames are separate system calls, microseconds apart. A SIGKILL or a power cut between two
    of them leaves the first files new and the last ones old. Callers therefore put the file that marks a complete
    run last (the JSON result after its report, the batch index after its summary): a new last file always has its
    new companions beside it.
    """
    umask = os.umask(0)
    os.umask(umask)
    temps: list[tuple[str, Path]] = []
    try:
        for path, content in files:
            path = Path(path)
            path.parent.mkdir(parents=True, exist_ok=True)
            fd, tmp = tempfile.mkstemp(prefix=".optimiser-", suffix=".tmp", dir=path.parent)
            temps.append((tmp, path))
            with os.fdopen(fd, "w", encoding="utf-8") as f:
                if isinstance(content, str):
                    f.write(content)
            if not isinstance(content, str):
                content(Path(tmp))
            with open(tmp, "rb+") as f:
                os.fsync(f.fileno())
            os.chmod(tmp, 0o666 & ~umask)
        with _signals_held():
            while temps:
                tmp, path = temps[0]
                os.replace(tmp, path)
                temps.pop(0)
    finally:
        for tmp, _ in temps:
            try:
                os.unlink(tmp)
            except OSError:
                pass


def write_atomic(path: Path, text: str) -> None:
    """Write a file through a temporary file and a rename: never a half-written or broken file in place."""
    write_together([(Path(path), text)])


def dumps(obj: Any) -> str:
    def default(o):
        if isinstance(o, np.generic):
            return o.item()
        if isinstance(o, np.ndarray):
            return o.tolist()
        raise TypeError(f"cannot write {type(o).__name__} as JSON")
    return json.dumps(obj, indent=2, default=default, allow_nan=False) + "\n"
