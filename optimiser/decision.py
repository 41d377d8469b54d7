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


def pareto(evals: Sequence[Evaluation], dedupe: bool = True) -> list[Evaluation]:
    """The non-dominated feasible evaluations (all of them where none is feasible), near-duplicates dropped."""
    feas = [e for e in evals if e.feasible] or list(evals)
    F = np.array([e.F for e in feas])
    keep = []
    for i in range(len(feas)):
        dominated = np.any(np.all(F <= F[i], axis=1) & np.any(F < F[i], axis=1))
        if not dominated:
            keep.append(feas[i])
    if not dedupe:
        return keep
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


BURETTE_READING_mL = 0.02  # a burette is read to about 0.02 mL (common practice): a colour change slower by less
#                            than that (and 5 %) is not seen as slower


def _no_worse(simpler: Evaluation, e: Evaluation, needed_margin: float | None = None) -> bool:
    """True when a method without some masking agent does the job as well (small tolerances, our own): no less
    feasible, no larger error, no slower colour change, and a selectivity margin no smaller, or already at least
    ``needed_margin`` (what the error target needs: the margin beyond it buys nothing)."""
    if not simpler.feasible and e.feasible:
        return False
    if simpler.feasible and not e.feasible:
        return True
    a, b = simpler.standardised_error_percent, e.standardised_error_percent
    if a is None or b is None:
        return a is None and b is None
    if abs(a) > abs(b) + 0.05:
        return False
    if (simpler.sharpness_mL is not None and e.sharpness_mL is not None
            and simpler.sharpness_mL > 1.05 * e.sharpness_mL + BURETTE_READING_mL):
        return False
    if simpler.margin is not None and (needed_margin is None or simpler.margin < needed_margin):
        if e.margin is None and simpler.margin < 6.0:  # 6: about 0.1 % (Ringbom; textbook threshold)
            return False
        if e.margin is not None and simpler.margin < e.margin - 0.1:
            return False
    return True


def prune_masking(evaluator: Evaluator, front: Sequence[Evaluation], scenario: Scenario | None = None) -> list[Evaluation]:
    """Drop every masking agent that does nothing needed (a practitioner adds no reagent without a reason).

    Each member loses, one at a time, any agent whose removal leaves the error, sharpness and feasibility no worse
    and the selectivity margin no smaller, or already at what the scenario's error target needs
    (:func:`optimiser.structures.required_log_cK`); the simpler variants are evaluated (in batch) like any other
    candidate.
    """
    from .structures import required_log_cK

    needed = required_log_cK(scenario.targets.max_error_percent) if scenario is not None else None
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
            if len(v.candidate.masking) < len(current[k].candidate.masking) and _no_worse(v, current[k], needed):
                current[k] = v
                changed = True
        if not changed:
            break
    return list({e.candidate.key(): e for e in current}.values())


CLEAR_WIN = 0.1  # share of the sum of the weights by which a less familiar method must beat the most familiar (our own)
ABSOLUTE_SCALES = {"error": None, "selectivity": 2.0, "sharpness": 0.5, "hazard": 1.0, "complexity": 1.0}
# fixed scales of the objectives where no front is at hand to normalise over (the error's is the scenario's target;
# 2 log units of margin, 0.5 mL (ten drops) of sharpness, one hazard class, one bench step: our own)


def weighted_score(scenario: Scenario, pool: Sequence[Evaluation], e: Evaluation) -> float:
    """The recommendation's score of ``e``: the weighted sum of its objectives, each normalised to 0-1 over
    ``pool``."""
    weights = np.array([scenario.targets.weights[k] for k in scenario.objectives])
    F = np.array([x.F for x in pool])
    lo, hi = F.min(axis=0), F.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    return float(((np.array(e.F) - lo) / span) @ weights)


def absolute_score(scenario: Scenario, e: Evaluation) -> float:
    """The weighted sum of the objectives on fixed scales (:data:`ABSOLUTE_SCALES`): comparable across searches."""
    total = 0.0
    for k, f in zip(scenario.objectives, e.F):
        scale = ABSOLUTE_SCALES.get(k) or scenario.targets.max_error_percent
        total += scenario.targets.weights[k] * f / scale
    return total


def familiarity(e: Evaluation) -> float:
    """How unfamiliar a method is: the titrant's share of the complexity (availability, cost, published practice),
    the strategy's (a second standard and titre), and the share of its decisive constants that are from memory
    (0 = the most familiar: EDTA, a direct titration, published constants)."""
    c = e.candidate
    return catalogue().titrant(c.titrant).complexity + c.strategy.complexity + e.memory_share


def recommend(front: Sequence[Evaluation], scenario: Scenario) -> tuple[Evaluation | None, str]:
    """Pick one method from the front by a stated rule; returns it (None where nothing is feasible) and the rule."""
    weights = np.array([scenario.targets.weights[k] for k in scenario.objectives])
    feas = [e for e in front if e.feasible]
    rule = ("among feasible Pareto members (every acceptance criterion met) whose predicted |error| after "
            "standardisation meets the target "
            f"({scenario.targets.max_error_percent:g} %), the one with the smallest weighted sum of the objectives, each "
            "normalised to 0-1 over the front (weights: " + ", ".join(f"{k} {w:g}" for k, w in zip(scenario.objectives, weights)) + ")"
            "; the complexity counts the titrant's availability and cost (its complexity in the data) and the share of "
            "the method's decisive constants that are from memory, and a less familiar method (another titrant, "
            "another strategy, constants from memory) is chosen only where it beats the most familiar one by more than "
            f"{100 * CLEAR_WIN:g} % of the summed weights")
    if not feas:
        return None, rule
    target = scenario.targets.max_error_percent
    within = [e for e in feas if e.standardised_error_percent is not None and abs(e.standardised_error_percent) <= target]
    pool = within or feas
    if not within:
        rule += "; no member meets the error target, so the whole feasible front was used"
    score = np.array([weighted_score(scenario, pool, e) for e in pool])
    order = sorted(range(len(pool)), key=lambda i: (round(score[i], 9), abs(pool[i].standardised_error_percent or 0),
                                                    pool[i].candidate.key()))
    best = pool[order[0]]
    least = min(familiarity(e) for e in pool)
    if familiarity(best) > least + 1e-9:
        familiar = [i for i in order if familiarity(pool[i]) <= least + 1e-9]
        if score[familiar[0]] <= score[order[0]] + CLEAR_WIN * float(weights.sum()):
            best = pool[familiar[0]]
    return best, rule


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
