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
from .titration import Titration


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
    if simpler.error_percent is None or e.error_percent is None:
        return simpler.error_percent is None and e.error_percent is None
    if abs(simpler.error_percent) > abs(e.error_percent) + 0.05:
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
    rule = ("among feasible Pareto members whose predicted |error| meets the target "
            f"({scenario.targets.max_error_percent:g} %), the one with the smallest weighted sum of the objectives, each "
            "normalised to 0-1 over the front (weights: " + ", ".join(f"{k} {w:g}" for k, w in zip(scenario.objectives, weights)) + ")")
    if not feas:
        return None, rule
    within = [e for e in feas if e.error_percent is not None and abs(e.error_percent) <= scenario.targets.max_error_percent]
    pool = within or feas
    if not within:
        rule += "; no member meets the error target, so the whole feasible front was used"
    F = np.array([e.F for e in pool])
    lo, hi = F.min(axis=0), F.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    score = ((F - lo) / span) @ weights
    order = np.lexsort((np.array([abs(e.error_percent or 0) for e in pool]), score))
    return pool[int(order[0])], rule


def missed_target_note(scenario: Scenario, t: Titration) -> str | None:
    """What to say when the recommended method misses the error target (None where it meets it)."""
    target = scenario.targets.max_error_percent
    if abs(t.error_percent) <= target:
        return None
    worst = max(t.cotitrated.items(), key=lambda kv: kv[1], default=None)
    why = (f"; {worst[0]} is {100 * worst[1]:.0f} % co-titrated at the end point" if worst and worst[1] > 0.01 else "")
    return (f"No method in the search space meets the error target of {target:g} %: the recommendation is "
            f"the closest compromise found (predicted error {t.error_percent:+.2f} %{why}). Widen the "
            "search (pH range, titrants, masking agents) or separate the interferent before the titration.")


def infeasible_note(evals: Sequence[Evaluation]) -> str:
    """Why no feasible method was found: the commonest violations among the candidates simulated."""
    counts: dict[str, int] = {}
    simulated = [e for e in evals if e.titration is not None] or list(evals)  # past the quick checks first
    for e in simulated:
        for kind in dict.fromkeys(e.kinds):
            counts[VIOLATIONS[kind][1]] = counts.get(VIOLATIONS[kind][1], 0) + 1
    top = sorted(counts.items(), key=lambda kv: -kv[1])[:4]
    return ("No feasible method was found in the search space. Most common reasons among the "
            f"{len(simulated)} candidates simulated: " + "; ".join(f"{k} ({n})" for k, n in top) + ".")
