"""The recommended method's set-point moved well inside its robust window, and its doses cut to what is needed.

A search ends wherever its last candidate happened to land, often at the edge of the pH window where the error
stays within target: a bench that drifts by 0.1 pH unit then fails. The refinement scans the pH around the chosen
method, moves the set-point to the middle of the window where the error stays within target (where the pH range
of its indicator, buffer and masking agents allows), then lowers each masking dose to the smallest of a log grid
that still keeps the error within target at the middle and at both ends of that window, and the method feasible
(common practice: no more reagent than needed).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from .evaluation import Evaluation, Evaluator
from .robustness import _errors, window
from .scenario import Scenario
from .structures import PH_INSET
from .survey import dose_of, position_of
from .reagents import catalogue

SCAN_HALF_WIDTH = 1.0  # pH units scanned on each side of the set-point
SCAN_STEP = 0.1  # pH step of the scan
DOSE_STEPS = 8  # the dose grid: this many steps over each agent's log dose range


def refine(scenario: Scenario, ev: Evaluator, e: Evaluation) -> tuple[Evaluation, str]:
    """The refined method (evaluated like any candidate) and a sentence that says what was done."""
    target = scenario.targets.max_error_percent
    lo, hi = _allowed(scenario, e.candidate)
    said: list[str] = []
    e, w = _centre(scenario, ev, e, lo, hi, said)
    c = e.candidate
    edges = [p for p in (w if w is not None else ()) if abs(p - c.pH) > 1e-6]
    cut = False
    for a, dose in c.masking:
        here = position_of(a, dose)
        tries = [q for q in np.linspace(0.0, 1.0, DOSE_STEPS + 1) if q < here - 1e-6]
        if not tries:
            continue
        variants = [replace(c, masking=tuple((b, dose_of(b, q) if b == a else d) for b, d in c.masking)) for q in tries]
        for v in ev.evaluate(variants):  # smallest first
            if _ok(scenario, v) and _holds(scenario, v, edges, target):
                said.append(f"{a} was cut from {1000 * dose:.3g} to {1000 * dict(v.candidate.masking)[a]:.3g} mM, "
                            "the smallest dose that keeps the error within target across that window")
                e, c, cut = v, v.candidate, True
                break
    if cut:  # the window moves with the doses: centred once more
        e, _ = _centre(scenario, ev, e, lo, hi, said)
    return e, "; ".join(said) if said else "the set-point and doses were kept (already central and least)"


def _centre(scenario: Scenario, ev: Evaluator, e: Evaluation, lo: float, hi: float,
            said: list[str]) -> tuple[Evaluation, tuple[float, float] | None]:
    """The method moved to the middle of its pH window (within ``lo``-``hi``) where it stays feasible there."""
    c = e.candidate
    w = _window(scenario, e, lo, hi)
    if w is not None:
        centre = round(float(np.clip((w[0] + w[1]) / 2, lo, hi)), 2)
        if abs(centre - c.pH) >= 0.01:
            moved = ev.evaluate([replace(c, pH=centre)])[0]
            if _ok(scenario, moved):
                said.append(f"the set-point was moved to pH {centre:.2f}, the middle of the pH window where the "
                            f"error stays within target ({w[0]:.2f}-{w[1]:.2f})")
                return moved, w
    return e, w


def _allowed(scenario: Scenario, c) -> tuple[float, float]:
    """The pH range the method's reagents and the scenario allow."""
    cat = catalogue()
    lo = max([scenario.search.pH_range[0], cat.indicator(c.indicator).usable_pH[0], cat.buffer(c.buffer).pH_range[0]]
             + [cat.masking_agent(a).min_pH for a, _ in c.masking]) + PH_INSET
    hi = min(scenario.search.pH_range[1], cat.indicator(c.indicator).usable_pH[1], cat.buffer(c.buffer).pH_range[1]) - PH_INSET
    return lo, hi


def _window(scenario: Scenario, e: Evaluation, lo: float, hi: float) -> tuple[float, float] | None:
    c = e.candidate
    grid = np.round(np.arange(c.pH - SCAN_HALF_WIDTH, c.pH + SCAN_HALF_WIDTH + 1e-9, SCAN_STEP), 4)
    grid = np.union1d(grid[(grid >= lo) & (grid <= hi)], [c.pH])
    errs = _errors(scenario, [replace(c.method(scenario), pH=float(p)) for p in grid], _standardisation(e))
    return window(grid, errs, c.pH, scenario.targets.max_error_percent)


def _standardisation(e: Evaluation) -> float:
    std = e.titration.standardisation if e.titration is not None else None
    return std.error_percent if std is not None and std.error_percent is not None else 0.0


def _ok(scenario: Scenario, e: Evaluation) -> bool:
    err = e.standardised_error_percent
    return e.feasible and err is not None and abs(err) <= scenario.targets.max_error_percent


def _holds(scenario: Scenario, e: Evaluation, pHs, target: float) -> bool:
    if not pHs:
        return True
    c = e.candidate
    errs = _errors(scenario, [replace(c.method(scenario), pH=float(p)) for p in pHs], _standardisation(e))
    return bool(np.all(np.isfinite(errs)) and np.all(np.abs(errs) <= target))
