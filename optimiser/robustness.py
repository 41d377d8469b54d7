"""How far a method can drift: the pH window and each masking dose's window where the error stays within target."""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from . import parallel
from .evaluation import PARALLEL_MIN, Evaluation
from .method import Method
from .reagents import catalogue
from .scenario import Scenario
from .titration import simulate_many, standardised

SCAN_POINTS = 81  # coarse curve points per scanned method


def robustness(scenario: Scenario, e: Evaluation, half_width: float = 1.0, step: float = 0.05):
    """Scan pH (and each masking dose) around a method; the windows where |error| after standardisation stays within
    the target: the titrant is standardised once, at the method's set-point, and the sample titrated off it.

    Parameters
    ----------
    half_width : float
        pH units scanned on each side (within the buffer's working range, where it holds the pH).
    step : float
        pH step of the scan.

    Returns
    -------
    pH_window, dose_windows, pH_scan, dose_scans
        (low, high) or None; agent -> (low, high) [mol/L]; (pH grid, errors); agent -> (doses [mol/L], errors).
    """
    return robustness_many(scenario, [e], half_width, step)[0]


def robustness_many(scenario: Scenario, evaluations: Sequence[Evaluation], half_width: float = 1.0,
                    step: float = 0.05) -> list[tuple]:
    """:func:`robustness` of several methods, every scanned method of all of them in one split over processes."""
    scans = [_scans(scenario, e, half_width, step) for e in evaluations]
    errs = _errors(scenario, [m for sc in scans for m in sc.methods], [sc.e_std for sc in scans for _ in sc.methods])
    out, start = [], 0
    for e, sc in zip(evaluations, scans, strict=True):
        out.append(_windows(scenario, e, sc, errs[start:start + len(sc.methods)]))
        start += len(sc.methods)
    return out


@dataclass(frozen=True)
class _Scans:
    """The methods a robustness scan simulates: the pH grid's, then each masking agent's dose grid's in turn."""

    grid: np.ndarray  # pH
    dose_grids: tuple[np.ndarray, ...]  # log10 dose [mol/L], one per masking agent of the method
    masking: tuple[tuple[str, float], ...]  # the method's masking as its strategy completes it (agent, dose [mol/L])
    methods: tuple[Method, ...]
    e_std: float  # the error of the standardisation at the set-point [%]


def _scans(scenario: Scenario, e: Evaluation, half_width: float, step: float) -> _Scans:
    c = e.candidate
    lo, hi = catalogue().buffer(c.buffer).pH_range  # beyond its working range the buffer does not hold the pH
    grid = np.round(np.arange(c.pH - half_width, c.pH + half_width + 1e-9, step), 4)
    grid = grid[(grid >= max(0.0, lo)) & (grid <= min(14.0, hi))]
    grid = np.union1d(grid, [c.pH])
    methods = [replace(c.method(scenario), pH=float(p)) for p in grid]
    std = e.titration.standardisation if e.titration is not None else None
    e_std = std.error_percent if std is not None and std.error_percent is not None else 0.0
    m0 = c.method(scenario)  # its masking as the strategy completes it (demasking adds the agent it undoes)
    dose_grids = []
    for a, d in m0.masking:
        lo, hi = (math.log10(x) for x in catalogue().masking_agent(a).dose_range_M)
        lg = np.log10(d) + np.arange(-1.0, 1.0001, 0.1)
        lg = np.union1d(lg[(lg >= lo - 1e-9) & (lg <= hi + 1e-9)], [np.log10(d)])
        dose_grids.append(lg)
        for x in lg:
            methods.append(replace(m0, masking=tuple((b, 10 ** x if b == a else dd) for b, dd in m0.masking)))
    return _Scans(grid, tuple(dose_grids), tuple(m0.masking), tuple(methods), e_std)


def _windows(scenario: Scenario, e: Evaluation, sc: _Scans, errs: np.ndarray):
    """:func:`robustness`'s windows and scans from the errors of the scan's methods, in their order."""
    c, target = e.candidate, scenario.targets.max_error_percent
    errs_pH = errs[:len(sc.grid)]
    pH_window = window(sc.grid, errs_pH, c.pH, target)
    doses = {}
    dose_scans = {}
    start = len(sc.grid)
    for (a, d), lg in zip(sc.masking, sc.dose_grids, strict=True):
        de = errs[start:start + len(lg)]
        start += len(lg)
        dose_scans[a] = (10 ** lg, de)
        w = window(lg, de, np.log10(d), target)
        if w is not None:
            doses[a] = (float(10 ** w[0]), float(10 ** w[1]))
    return pH_window, doses, (sc.grid, errs_pH), dose_scans


def _errors(scenario: Scenario, methods: Sequence[Method], e_std: float | Sequence[float]) -> np.ndarray:
    """The error left after the titrant was standardised at the method's set-point (``e_std``, one for all or one per
    method), per method (NaN where there is no usable end point); the methods split over processes (:mod:`optimiser.parallel`)."""
    def errors_of(part: Sequence[tuple[Method, float]]) -> list[float]:
        errors: list = []
        out = []
        for t, (_, e0) in zip(simulate_many(scenario.sample, [m for m, _ in part], n_points=SCAN_POINTS, errors=errors),
                              part, strict=True):
            if t is None or t.error_percent is None or t.blocked_by or not t.indicator_usable:
                out.append(math.nan)
            else:
                out.append(standardised(t.error_percent, e0))
        return out
    e0 = [float(e_std)] * len(methods) if isinstance(e_std, (int, float)) else list(e_std)
    return np.array(parallel.map_split(errors_of, list(zip(methods, e0, strict=True)), PARALLEL_MIN), dtype=float)


def window(x: np.ndarray, err: np.ndarray, x0: float, target: float) -> tuple[float, float] | None:
    """The contiguous range of ``x`` around ``x0`` where |err| <= target (None where x0 itself fails)."""
    ok = np.isfinite(err) & (np.abs(err) <= target)
    i0 = int(np.argmin(np.abs(x - x0)))
    if not ok[i0]:
        return None
    lo = hi = i0
    while lo > 0 and ok[lo - 1]:
        lo -= 1
    while hi < len(x) - 1 and ok[hi + 1]:
        hi += 1
    return float(x[lo]), float(x[hi])
