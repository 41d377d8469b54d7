"""The methods a scenario lists, evaluated as the search's candidates are and set beside its answer.

Each listed method (:mod:`optimiser.listed_methods`) is simulated by the search's :class:`~optimiser.evaluation.
Evaluator`, so that its objectives and acceptance criteria are the search's own: once on the search's coarse curve,
to compare it with the search's front at equal resolution (is it dominated?), and once on the recommendation's fine
curve, for the figures shown beside the recommendation; then its robustness windows are scanned as the
recommendation's are. :func:`comparison_table` turns the outcome into plain rows for the report.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from .decision import meets_criteria
from .evaluation import Evaluation, Evaluator
from .listed_methods import ListedMethod
from .objectives import complexity_of
from .readout import DROP_mL, budget_label
from .reagents import HAZARD_NAMES, catalogue
from .robustness import robustness_many
from .scenario import Scenario
from .strategies import strategy

FINE_POINTS = 161  # the recommendation's curve (optimiser.search re-simulates it on as many points)


@dataclass(frozen=True)
class ListedOutcome:
    """A listed method, evaluated, and how it stands against the search's answer.

    Attributes
    ----------
    listed : ListedMethod
    evaluation : Evaluation
        On the fine curve, criteria as the search's (its ``violations`` are the criteria it fails).
    meets_criteria : bool
        Every acceptance criterion and the error target met.
    dominated_by : int
        Feasible members of the search's front that dominate it (:func:`constrained_dominates`; objectives on the
        search's coarse curve for both).
    dominated_by_recommendation : bool
        The recommendation dominates it (fine curve for both).
    robust_pH : (low, high) or None
        The pH window where |error| after standardisation stays within the target.
    robust_dose : dict
        Masking agent -> (low, high) dose window [mol/L].
    """

    listed: ListedMethod
    evaluation: Evaluation
    meets_criteria: bool
    dominated_by: int
    dominated_by_recommendation: bool
    robust_pH: tuple[float, float] | None = None
    robust_dose: dict[str, tuple[float, float]] = field(default_factory=dict)

    @property
    def dominated(self) -> bool:
        return self.dominated_by > 0 or self.dominated_by_recommendation


def dominates(a: Sequence[float], b: Sequence[float]) -> bool:
    """True where objectives ``a`` are no worse than ``b`` in every one and better in one (all minimised).

    >>> dominates((1.0, 2.0), (1.0, 3.0)), dominates((1.0, 2.0), (1.0, 2.0)), dominates((0.0, 4.0), (1.0, 3.0))
    (True, False, False)
    """
    fa, fb = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    return bool(np.all(fa <= fb) and np.any(fa < fb))


def constrained_dominates(a: Evaluation, b: Evaluation) -> bool:
    """True where ``a`` dominates ``b`` as the search ranks methods: a feasible method dominates one that fails an
    acceptance criterion; between two feasible methods, :func:`dominates` on their objectives."""
    if a.feasible != b.feasible:
        return a.feasible
    return a.feasible and dominates(a.F, b.F)


def _evaluator(scenario: Scenario, methods: Sequence[ListedMethod]) -> Evaluator:
    """An evaluator whose quick checks accept the listed buffers (a listed method need not use one the search may
    choose); every other criterion is the scenario's own."""
    sp = scenario.search
    buffers = tuple(dict.fromkeys([*sp.buffers, *(m.buffer for m in methods)]))
    return Evaluator(replace(scenario, search=replace(sp, buffers=buffers)))


def compare(scenario: Scenario, front: Sequence[Evaluation], recommended: Evaluation | None,
            with_robustness: bool = True) -> tuple[ListedOutcome, ...]:
    """Evaluate the scenario's listed methods and set each against the search's front and recommendation.

    Parameters
    ----------
    front : sequence of Evaluation
        The search's Pareto set (coarse curve); only its feasible members can dominate.
    recommended : Evaluation or None
        The recommendation, scored on the fine curve.
    """
    return _outcomes(scenario, front, recommended, with_robustness)[0]


def compare_with_robustness(scenario: Scenario, front: Sequence[Evaluation], recommended: Evaluation | None,
                            with_robustness: bool = True) -> tuple[tuple[ListedOutcome, ...], tuple | None]:
    """:func:`compare`, and the recommendation's :func:`~optimiser.robustness.robustness` (None where there is no
    recommendation or ``with_robustness`` is False), all the robustness scans in one split over processes."""
    return _outcomes(scenario, front, recommended, with_robustness, scan_recommended=True)


def _outcomes(scenario: Scenario, front: Sequence[Evaluation], recommended: Evaluation | None, with_robustness: bool,
              scan_recommended: bool = False) -> tuple[tuple[ListedOutcome, ...], tuple | None]:
    listed = scenario.methods
    coarse: list[Evaluation] = []
    fine: list[Evaluation] = []
    if listed:
        evaluator = _evaluator(scenario, listed)
        candidates = [m.candidate() for m in listed]
        coarse = evaluator.evaluate_all(candidates)
        fine = evaluator.evaluate_all(candidates, n_points=FINE_POINTS)
    scanned = [ef for ef in fine if with_robustness and ef.titration is not None and ef.titration.endpoint_mL is not None]
    own = scan_recommended and with_robustness and recommended is not None
    windows = robustness_many(scenario, ([recommended] if own else []) + scanned) if own or scanned else []
    rec_scans = windows.pop(0) if own else None
    by_id = {id(ef): w for ef, w in zip(scanned, windows, strict=True)}
    feasible_front = [e for e in front if e.feasible]
    out = []
    for m, ec, ef in zip(listed, coarse, fine, strict=True):
        pH_w, doses = None, {}
        if id(ef) in by_id:
            pH_w, doses, _, _ = by_id[id(ef)]
        out.append(ListedOutcome(
            listed=m, evaluation=ef, meets_criteria=meets_criteria(scenario, ef),
            dominated_by=sum(constrained_dominates(f, ec) for f in feasible_front),
            dominated_by_recommendation=recommended is not None and recommended.feasible
            and constrained_dominates(recommended, ef),
            robust_pH=pH_w, robust_dose=dict(doses)))
    return tuple(out), rec_scans


# ---- plain rows for the report (no chemistry module is needed to render them)

@dataclass(frozen=True)
class ComparedColumn:
    """One method's column of the comparison: the recommendation's or a listed method's."""

    name: str
    source: str
    method: str
    recommendation: bool
    meets_criteria: bool
    dominated: str  # worded
    values: tuple[str, ...]  # one per aspect of :data:`ASPECTS`
    fails: tuple[str, ...]  # the criteria it fails, worded


ASPECTS = (
    "Error after standardisation / %", "Error as simulated / %", "Largest part of the budget (after standardisation)",
    "Every part within the target on its own", "Sharpness (10-90 % turned)", "Selectivity margin / log units",
    "Interferents titrated at the end point", "Highest reagent hazard", "Bench complexity (steps)",
    "Robust pH window", "Robust dose windows",
)


@dataclass(frozen=True)
class ComparisonTable:
    aspects: tuple[str, ...]
    columns: tuple[ComparedColumn, ...]
    target_percent: float


def _num(x: float | None, fmt: str | None = None) -> str:
    """A figure for the table: signed to 0.001 (never "-0.000"; :func:`optimiser.report.text.signed_fixed`) or by
    ``fmt``; "-" where there is none."""
    from .report.text import signed_fixed
    if fmt is None:
        return signed_fixed(x)
    return "-" if x is None or not np.isfinite(x) else fmt.format(x)


def describe(candidate, titrant_conc_M: float) -> str:
    """A method in one line: titrant, pH, buffer and its total, indicator, masking doses, and its strategy."""
    cat = catalogue()
    buf = cat.buffer(candidate.buffer)
    total = f" {1000 * 10 ** candidate.log_buffer:.3g} mM" if buf.ligand else ""
    masking = ", ".join(f"{a} {1000 * d:.3g} mM" for a, d in candidate.masking) or "no masking"
    return (f"{candidate.titrant} {titrant_conc_M:g} M, pH {candidate.pH:.2f} ({buf.id}{total}), "
            f"{cat.indicator(candidate.indicator).id}, {masking}, {strategy(candidate.mode).describe(candidate)}")


def _values(scenario: Scenario, e: Evaluation, robust_pH, robust_dose) -> tuple[str, ...]:
    t, target = e.titration, scenario.targets.max_error_percent
    std = t.standardised_budget if t is not None else {}
    part = t.largest_part if t is not None else None
    sharp = "-" if e.sharpness_mL is None else f"{e.sharpness_mL:.3f} mL ({e.sharpness_mL / DROP_mL:.1f} drops)"
    margin = ("no interferent left in solution" if e.margin is None and t is not None else _num(e.margin, "{:.1f}"))
    cotit = ", ".join(f"{m} {100 * v:.3g} %" for m, v in t.cotitrated.items()) if t is not None else "-"
    doses = "; ".join(f"{a} {1000 * lo:.3g}-{1000 * hi:.3g} mM" for a, (lo, hi) in robust_dose.items())
    return (
        _num(e.standardised_error_percent), _num(e.error_percent),
        f"{budget_label(part[0])} {_num(part[1])} %" if part else "-",
        ("yes" if all(abs(v) <= target for v in std.values()) else "no") if std else "-",
        sharp, margin, cotit or "no interferent",
        HAZARD_NAMES[e.hazard], f"{complexity_of(e.candidate):g}",
        f"pH {robust_pH[0]:.2f} to {robust_pH[1]:.2f}" if robust_pH else "none within the target",
        doses or ("-" if not e.candidate.masking else "none within the target"),
    )


def _fails(scenario: Scenario, e: Evaluation, meets: bool) -> tuple[str, ...]:
    """The criteria a method fails, worded (the error target too, which is not a constraint of the search)."""
    out = list(e.violations)
    if not meets and not out and e.standardised_error_percent is not None:
        out.append(f"error after standardisation {e.standardised_error_percent:+.2f} % beyond the target "
                   f"({scenario.targets.max_error_percent:g} %)")
    return tuple(out)


def _dominated_text(o: ListedOutcome) -> str:
    if not o.dominated:
        return "no: nothing the search found is at least as good on every objective"
    if not o.evaluation.feasible:
        n = o.dominated_by
        return ("yes: it fails acceptance criteria that " + ("the one feasible method of the search's front meets"
                if n == 1 else f"all {n} feasible methods of the search's front meet"))
    who = []
    if o.dominated_by_recommendation:
        who.append("the recommendation")
    if o.dominated_by:
        who.append(f"{o.dominated_by} member{'s' if o.dominated_by > 1 else ''} of the search's front")
    return "yes, by " + " and ".join(who)


def comparison_table(result) -> ComparisonTable | None:
    """The recommendation and each listed method, aspect by aspect (None where the scenario lists no method)."""
    listed = getattr(result, "listed", ())
    if not listed:
        return None
    sc, rec = result.scenario, result.recommended
    cols = []
    if rec is not None:
        cols.append(ComparedColumn(
            name="Recommended" if result.meets_criteria else "Closest compromise", source="this search",
            method=describe(rec.candidate, sc.titrant_conc_M), recommendation=True, meets_criteria=result.meets_criteria,
            dominated="-", values=_values(sc, rec, result.robust_pH, result.robust_dose),
            fails=_fails(sc, rec, result.meets_criteria)))
    for o in listed:
        e = o.evaluation
        cols.append(ComparedColumn(
            name=o.listed.name, source=o.listed.source, method=describe(e.candidate, sc.titrant_conc_M),
            recommendation=False, meets_criteria=o.meets_criteria, dominated=_dominated_text(o),
            values=_values(sc, e, o.robust_pH, o.robust_dose), fails=_fails(sc, e, o.meets_criteria)))
    return ComparisonTable(ASPECTS, tuple(cols), sc.targets.max_error_percent)
