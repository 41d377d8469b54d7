"""From evaluated candidates to one answer: the Pareto set, pruning of reagents that do nothing, the
recommendation rule, and what to say when nothing is feasible."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from .evaluation import Evaluation, Evaluator
from .objectives import VIOLATIONS
from .reagents import catalogue
from .scenario import Scenario


def strategy_of(e: Evaluation) -> str:
    """The kind of selectivity a method stands for (how the report groups alternatives)."""
    c = e.candidate
    if c.strategy.family is not None:
        return c.strategy.family
    if c.masking:
        return "masking"
    if catalogue().titrant(c.titrant).complexity > 0:
        return "another titrant"
    if e.titration is not None and e.titration.precipitates_start:
        return "pH control (precipitation)"
    return "pH control"


def pareto(evals: Sequence[Evaluation]) -> list[Evaluation]:
    """The non-dominated feasible evaluations (all of them where none is feasible), near-duplicates dropped."""
    feas = [e for e in evals if e.feasible] or list(evals)
    F = np.array([e.F for e in feas])
    keep = []
    for i in range(len(feas)):
        dominated = np.any(np.all(F <= F[i], axis=1) & np.any(F < F[i], axis=1))
        if not dominated:
            keep.append(feas[i])
    # deduplicate near-identical members (same discrete choices, objectives within rounding)
    out, seen = [], set()
    for e in sorted(keep, key=lambda e: e.F):
        c = e.candidate
        k = (c.buffer, c.titrant, tuple(a for a, _ in c.masking), c.indicator, c.mode, round(c.pH, 1),
             tuple(round(f, 2) for f in e.F))
        if k not in seen:
            seen.add(k)
            out.append(e)
    return out


def _no_worse(simpler: Evaluation, e: Evaluation) -> bool:
    """True when a method without some masking agent does the job as well (small tolerances, our own)."""
    if not simpler.feasible and e.feasible:
        return False
    a, b = simpler.standardised_error_percent, e.standardised_error_percent
    if a is None or b is None:
        return a is None and b is None
    if abs(a) > abs(b) + 0.05:
        return False
    if simpler.sharpness_mL is not None and e.sharpness_mL is not None and simpler.sharpness_mL > 1.05 * e.sharpness_mL + 0.005:
        return False
    if simpler.margin is not None:
        if e.margin is None and simpler.margin < 6.0:  # 6: about 0.1 % (Ringbom; textbook threshold)
            return False
        if e.margin is not None and simpler.margin < e.margin - 0.1:
            return False
    return True


def prune_masking(evaluator: Evaluator, front: Sequence[Evaluation]) -> list[Evaluation]:
    """Drop every masking agent that does nothing (a practitioner adds no reagent without a reason).

    Each member loses, one at a time, any agent whose removal leaves the error, sharpness, margin and feasibility no
    worse; the simpler variants are evaluated (in batch) like any other candidate.
    """
    current = list(front)
    for _ in range(3):  # at most two agents per method
        variants, owners = [], []
        for k, e in enumerate(current):
            for a, _ in e.candidate.masking:
                variants.append(replace(e.candidate, masking=tuple(m for m in e.candidate.masking if m[0] != a)))
                owners.append(k)
        if not variants:
            break
        changed = False
        for k, v in zip(owners, evaluator.evaluate(variants)):
            if len(v.candidate.masking) < len(current[k].candidate.masking) and _no_worse(v, current[k]):
                current[k] = v
                changed = True
        if not changed:
            break
    return list({e.candidate.key(): e for e in current}.values())


def recommend(front: Sequence[Evaluation], scenario: Scenario) -> tuple[Evaluation | None, str]:
    """Pick one method from the front by a stated rule; returns it (None where nothing is feasible) and the rule."""
    weights = np.array([scenario.targets.weights[k] for k in scenario.objectives])
    feas = [e for e in front if e.feasible]
    rule = ("among feasible Pareto members (every acceptance criterion met) whose predicted |error| after "
            "standardisation meets the target "
            f"({scenario.targets.max_error_percent:g} %), the one with the smallest weighted sum of the objectives, each "
            "normalised to 0-1 over the front (weights: " + ", ".join(f"{k} {w:g}" for k, w in zip(scenario.objectives, weights)) + ")")
    if not feas:
        return None, rule
    target = scenario.targets.max_error_percent
    within = [e for e in feas if e.standardised_error_percent is not None and abs(e.standardised_error_percent) <= target]
    pool = within or feas
    if not within:
        rule += "; no member meets the error target, so the whole feasible front was used"
    F = np.array([e.F for e in pool])
    lo, hi = F.min(axis=0), F.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    score = ((F - lo) / span) @ weights
    order = np.lexsort((np.array([abs(e.standardised_error_percent or 0) for e in pool]), score))
    return pool[int(order[0])], rule


def compromise(evals: Sequence[Evaluation]) -> Evaluation | None:
    """The closest compromise where nothing is feasible: a method that can be run and read (only chemistry criteria
    fail), with the fewest failing criteria, then the smallest error after standardisation. None where none can be
    run."""
    runnable = [e for e in evals if e.titration is not None and e.titration.endpoint_mL is not None
                and not any(VIOLATIONS[k][0] != "chemistry" for k in e.kinds)]
    if not runnable:
        return None
    return min(runnable, key=lambda e: (len(e.kinds), abs(e.standardised_error_percent or 0.0), e.candidate.key()))


def meets_criteria(scenario: Scenario, e: Evaluation | None) -> bool:
    """True where a method meets every acceptance criterion and, after standardisation, the error target."""
    if e is None or not e.feasible or e.standardised_error_percent is None:
        return False
    return abs(e.standardised_error_percent) <= scenario.targets.max_error_percent


def compromise_note(scenario: Scenario, e: Evaluation) -> str | None:
    """What to say when the recommended method is only the closest compromise (None where it meets the criteria)."""
    if meets_criteria(scenario, e):
        return None
    target = scenario.targets.max_error_percent
    t = e.titration
    failing = "; ".join(e.violations) if e.violations else (
        f"the error after standardisation is {e.standardised_error_percent:+.2f} % (target {target:g} %)")
    worst = max(t.cotitrated.items(), key=lambda kv: kv[1], default=None) if t is not None else None
    why = (f"; {worst[0]} is {100 * worst[1]:.0f} % co-titrated at the end point" if worst and worst[1] > 0.01 else "")
    return (f"No method meets the criteria. The closest compromise found fails: {failing}{why}. It is shown for "
            "comparison only, not as a procedure to follow. Widen the search (pH range, titrants, masking agents), "
            "separate the interferent before the titration, or relax the target.")


def infeasible_note(evals: Sequence[Evaluation]) -> str:
    """Why no feasible method was found: the commonest violations among the candidates simulated."""
    counts: dict[str, int] = {}
    simulated = [e for e in evals if e.simulated] or list(evals)  # past the quick checks (a failed simulation too)
    for e in simulated:
        for kind in dict.fromkeys(e.kinds):
            counts[VIOLATIONS[kind][1]] = counts.get(VIOLATIONS[kind][1], 0) + 1
    top = sorted(counts.items(), key=lambda kv: -kv[1])[:4]
    return ("No feasible method was found in the search space. Most common reasons among the "
            f"{len(simulated)} candidates simulated: " + "; ".join(f"{k} ({n})" for k, n in top) + ".")
