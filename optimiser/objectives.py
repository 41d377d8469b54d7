"""What the search minimises and what it requires: a registry of objectives and of constraints.

An :class:`Objective` has a name (the key in the scenario's ``targets.weights``), a unit, a label, a direction and
a function of the evaluated facts. A violation has a kind, the constraint group it counts against (one pymoo
inequality per group) and a short text for summaries. Adding an objective: one :class:`Objective` in
:data:`OBJECTIVES` (and its name in the scenario's allowed weights).
"""
from __future__ import annotations

import math
from functools import lru_cache
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .conditional import Conditions, conditional_constant, feasibility, ml_constants
from .errors import InputError, MissingConstantError
from .medium import side_reactions
from .reagents import HAZARD_NAMES, catalogue

if TYPE_CHECKING:  # pragma: no cover
    from .candidate import Candidate
    from .scenario import Scenario
    from .titration import Titration

ERROR_CAP = 100.0  # % assigned where no end point is seen
COTITRATED_SHARE_MAX = 0.10  # an interferent more than 10 % titrated at the end point makes it drift with the
#                              interferent's amount (our own threshold; common practice: mask it or separate it)
PH_DRIFT_MAX = 0.1  # the pH must hold within 0.1 unit up to the end point (common practice: buffer capacity)
READABLE_DROPS = 10.0  # the indicator must turn from 10 % to 90 % within 10 drops (0.5 mL) to be read (our own
#                        threshold, calibrated on published methods: see tests/test_criteria.py)
SHARPNESS_CAP = 10.0  # mL
MARGIN_CAP = 12.0  # log units (no interferent left, or far beyond any practical need)


@dataclass(frozen=True)
class Facts:
    """What one candidate's evaluation established (the input of every objective)."""

    candidate: Candidate
    titration: Titration | None
    error_percent: float | None  # after standardisation, its causes added by magnitude (Titration.error_by_cause_percent)
    margin: float | None
    sharpness_mL: float | None
    hazard: int
    memory_share: float = 0.0


@dataclass(frozen=True)
class Objective:
    """One objective of the search (minimised as ``value``; ``direction`` says how a reader should read it)."""

    name: str
    unit: str
    label: str
    direction: str
    value: Callable[[Facts], float]


def complexity_of(c: Candidate) -> float:
    """Bench complexity: one per masking agent, plus what the strategy adds (a back-titration's second standard and
    titre: 1) and what the titrant adds (its data: fewer published methods and less certain constants than EDTA).
    Our own scale (common practice: simpler methods are preferred where they do the job)."""
    return len(c.masking) + c.strategy.complexity + catalogue().titrant(c.titrant).complexity


def memory_share(scenario: Scenario, c: Candidate) -> float:
    """Share (0-1) of a method's decisive constants that are from memory: each metal of the sample (and the
    strategy's standard) with the titrant, the indicator with the metals it shows, each masking agent with the
    metals of the sample. It adds to the bench complexity (a method that rests on remembered constants needs
    checking before use; common practice: prefer the familiar)."""
    from .constants import database

    db = database()
    metals = {db.metal(m) for m in (*scenario.sample.metals, *c.strategy.added_metals(c))}
    used = [k for m in metals for k in db.complexes.get((m, c.titrant), ()) if len(k.stoichiometry) == 2]
    shown = {db.metal(m) for m in scenario.sample.analyte} | {db.metal(c.strategy.complex_metal(c, scenario.sample))}
    used += [k for m in shown for k in db.complexes.get((m, c.indicator), ()) if len(k.stoichiometry) == 2]
    cat = catalogue()
    for a, _ in c.masking:
        lig = cat.masking_agent(a).ligand
        used += [k for m in metals for k in db.complexes.get((m, lig), ())]
    return sum(k.from_memory for k in used) / len(used) if used else 0.0


def hazard_of(c: Candidate, scenario: Scenario | None = None) -> int:
    """The highest hazard class (0-4) of the candidate's reagents (with the scenario, also those its strategy adds)."""
    cat = catalogue()
    levels = [cat.titrant(c.titrant).hazard, cat.buffer(c.buffer).hazard, cat.indicator(c.indicator).hazard]
    levels += [cat.masking_agent(a).hazard for a, _ in c.masking]
    if scenario is not None and (c.extra or c.strategy.composite):
        # the reagents a multi-step strategy adds (a second buffer and indicator, a demasking agent)
        try:
            levels.append(c.method(scenario).hazard)
        except InputError:  # a candidate its strategy refuses is screened out by its own checks
            pass
    return max(levels)


def _selectivity(f: Facts) -> float:
    if f.margin is not None:
        return -min(f.margin, MARGIN_CAP)
    return -MARGIN_CAP if f.titration is not None else 0.0


OBJECTIVES: dict[str, Objective] = {o.name: o for o in (
    Objective("error", "%", "titration error after standardisation, its causes added by magnitude", "smaller is better",
              lambda f: min(abs(f.error_percent), ERROR_CAP) if f.error_percent is not None else ERROR_CAP),
    Objective("selectivity", "log units", "-selectivity margin", "larger margin is better", _selectivity),
    Objective("sharpness", "mL", "end-point sharpness (10-90 % turned)", "smaller is better",
              lambda f: min(f.sharpness_mL, SHARPNESS_CAP) if f.sharpness_mL is not None else SHARPNESS_CAP),
    Objective("hazard", "class 0-4", "reagent hazard", "smaller is better", lambda f: float(f.hazard)),
    Objective("complexity", "steps", "bench complexity", "smaller is better",
              lambda f: complexity_of(f.candidate) + f.memory_share),
)}

# kind of violation -> (constraint group it counts against, short text for summaries)
VIOLATIONS = {
    "indicator_pH": ("readable", "the indicator shows no colour change at that pH"),
    "buffer": ("readable", "no allowed buffer holds the pH"),
    "masking_pH": ("readable", "a masking agent below its working pH"),
    "hazard": ("readable", "a reagent above the hazard limit"),
    "no_end_point": ("readable", "no end point (the indicator does not turn)"),
    "blocked": ("readable", "the indicator is blocked"),
    "missing_constant": ("readable", "a constant is missing"),
    "inapplicable": ("readable", "the method masks the analyte itself"),
    "strategy": ("readable", "the strategy's own conditions do not fit (a second step, an added complex)"),
    "not_converged": ("readable", "the equilibrium did not converge"),
    "analyte_solid": ("chemistry", "the analyte precipitates"),
    "slow": ("chemistry", "the analyte reacts too slowly"),
    "error_far": ("chemistry", "an error far beyond the target"),
    "budget_part": ("chemistry", "a part of the error budget beyond the target"),
    "analyte_unbound": ("chemistry", "the analyte is not bound at the end point"),
    "cotitrated_share": ("chemistry", "an interferent is partly titrated"),
    "pH_drift": ("chemistry", "the buffer does not hold the pH"),
    "too_gradual": ("readable", "the colour change is too gradual"),
    "no_contrast": ("readable", "the colour does not change"),
    "burette": ("volume", "the titre exceeds the burette"),
    "groups": ("chemistry", "an analyte the scenario names is not determined"),
}
CONSTRAINTS = ("readable", "chemistry", "volume")


def prescreen(scenario: Scenario, c: Candidate, buffers_for) -> list[tuple[str, str]]:
    """Violations (kind, text) that need no equilibrium (the simulation is skipped)."""
    cat = catalogue()
    out = []
    ind = cat.indicator(c.indicator)
    if not (ind.usable_pH[0] <= c.pH <= ind.usable_pH[1]):
        out.append(("indicator_pH", f"{ind.name} shows no colour change at pH {c.pH:.2f}"))
    if c.buffer not in buffers_for(c.pH, scenario.search.buffers):
        out.append(("buffer", f"no allowed buffer holds pH {c.pH:.2f}"))
    for a, _ in c.masking:
        agent = cat.masking_agent(a)
        if c.pH < agent.min_pH:
            out.append(("masking_pH", f"{agent.name} is not used below pH {agent.min_pH:g}"))
    out += c.strategy.prescreen(c, scenario)
    if hazard_of(c, scenario) > scenario.search.max_hazard:
        out.append(("hazard", f"hazard {HAZARD_NAMES[hazard_of(c, scenario)]} is above the scenario's limit"))
    return out


def titration_violations(scenario: Scenario, c: Candidate, t: Titration) -> list[tuple[str, str]]:
    """Violations (kind, text) read from a simulated titration."""
    v = []
    err = t.error_percent
    if t.endpoint_mL is None:
        v.append(("no_end_point", "no end point: the indicator does not turn"))
    if t.blocked_by:
        v.append(("blocked", f"indicator blocked by {', '.join(t.blocked_by)}"))
    if not t.indicator_usable:
        v.append(("indicator_pH", "indicator shows no colour change at this pH"))
    if t.analyte_precipitates:
        v.append(("analyte_solid", f"the analyte precipitates ({', '.join(t.analyte_precipitates)})"))
    if c.strategy.slow_is_violation and t.slow_analytes:
        v.append(("slow", "the analyte reacts too slowly for a direct titration"))
    if err is not None and abs(err) > 10 * scenario.targets.max_error_percent:
        v.append(("error_far", f"error {err:+.1f} % is more than ten times the target"))
    missing = [g for g in (scenario.sample.analyte, *scenario.sample.groups) if g not in t.groups_determined]
    if missing:
        v.append(("groups", f"{' and '.join('+'.join(g) for g in missing)} not determined (the scenario names "
                            f"{len(scenario.sample.groups) + 1} analytes to determine separately)"))
    if t.titre_mL > scenario.burette_mL:
        v.append(("burette", f"titre {t.titre_mL:.1f} mL exceeds the {scenario.burette_mL:g} mL burette"))
    if t.endpoint_mL is not None:
        v += acceptance_violations(scenario, t)
    return v


def acceptance_violations(scenario: Scenario, t: Titration) -> list[tuple[str, str]]:
    """The acceptance criteria of a method with an end point (each a hard constraint):

    - every part of the error budget left after standardisation within the error target on its own (common
      practice in method validation: opposite biases must not be allowed to cancel);
    - the analyte bound at the end point to within the target (the reaction is complete where it is read);
    - no interferent more than :data:`COTITRATED_SHARE_MAX` titrated where its part exceeds a tenth of the target;
    - the pH held within :data:`PH_DRIFT_MAX` up to the end point (where the drift was computed);
    - a colour change that is seen: different colours, turning within :data:`READABLE_DROPS` drops.
    """
    from .readout import DROP_mL, budget_label

    target = scenario.targets.max_error_percent
    out = []
    for key, part in t.standardised_budget.items():
        if abs(part) > target:
            out.append(("budget_part", f"{budget_label(key)}: {part:+.2f} % on its own (target {target:g} %)"))
    unbound = t.analyte_unbound_percent
    if unbound > target:
        out.append(("analyte_unbound", f"{unbound:.2f} % of the analyte is still unbound at the end point "
                                       f"(at most {target:g} %)"))
    for m, share in t.cotitrated.items():
        part = t.budget.get(f"cotitration:{m}", 0.0)
        if share > COTITRATED_SHARE_MAX and abs(part) > 0.1 * target:
            out.append(("cotitrated_share", f"{m} is {100 * share:.0f} % titrated at the end point (at most "
                                             f"{100 * COTITRATED_SHARE_MAX:.0f} %)"))
    if t.pH_drift is not None and abs(t.pH_drift) > PH_DRIFT_MAX:
        out.append(("pH_drift", f"the pH moves by {t.pH_drift:+.2f} up to the end point (at most {PH_DRIFT_MAX:g}): "
                                "more buffer"))
    if t.colour_change[0] == t.colour_change[1]:
        out.append(("no_contrast", f"the indicator stays {t.colour_change[0]}: no colour change to see"))
    if t.sharpness_mL is None or t.sharpness_mL > READABLE_DROPS * DROP_mL:
        drops = "-" if t.sharpness_mL is None else f"{t.sharpness_mL / DROP_mL:.0f}"
        out.append(("too_gradual", f"the colour change takes {drops} drops (at most {READABLE_DROPS:g})"))
    return out


def constraint_values(kinds, amounts: dict[str, float] | None = None) -> tuple[float, ...]:
    """One pymoo inequality per constraint group: the sum of its violations' graded amounts (how far from
    feasible, each at least :data:`MIN_AMOUNT`; 1 where no amount is given), 0 where none counts against it."""
    out = dict.fromkeys(CONSTRAINTS, 0.0)
    for kind in dict.fromkeys(kinds):
        out[VIOLATIONS[kind][0]] += max(MIN_AMOUNT, (amounts or {}).get(kind, 1.0))
    return tuple(out[g] for g in CONSTRAINTS)


MIN_AMOUNT = 0.01  # the least a violation counts (a criterion just missed is still missed)
UNMEASURED = 3.0  # what a violation without a measure of its distance counts (a missing end point, a block)


def _log_ratio(value: float, limit: float) -> float:
    """log10(value / limit): 0 at the limit, 1 at ten times it (0 where the value is 0)."""
    return math.log10(value / limit) if value > 0 and limit > 0 else 0.0


def violation_amounts(scenario: Scenario, c: Candidate, t: Titration | None) -> dict[str, float]:
    """How far a candidate is from each criterion it fails: log10 of the measure over its limit (0.3 = twice as
    much as allowed, 1 = ten times), pH units for the ranges, hazard classes for the hazard, :data:`UNMEASURED` where
    nothing measures the distance (no end point, a blocked indicator): the graded constraint values the search
    moves along."""
    from .readout import DROP_mL

    cat = catalogue()
    target = scenario.targets.max_error_percent
    ind = cat.indicator(c.indicator)
    a: dict[str, float] = {k: UNMEASURED for k in VIOLATIONS}
    a["indicator_pH"] = max(ind.usable_pH[0] - c.pH, c.pH - ind.usable_pH[1], 0.0)
    lo, hi = cat.buffer(c.buffer).pH_range
    a["buffer"] = max(lo - c.pH, c.pH - hi, 0.0)
    a["masking_pH"] = max([cat.masking_agent(m).min_pH - c.pH for m, _ in c.masking] + [0.0])
    a["hazard"] = float(hazard_of(c) - scenario.search.max_hazard)
    if t is None:
        return a
    ratio = _log_ratio
    err = t.error_percent
    if err is not None:
        a["error_far"] = ratio(abs(err), 10 * target)
    parts = [abs(p) for p in t.standardised_budget.values()]
    a["budget_part"] = ratio(max(parts, default=0.0), target)
    a["analyte_unbound"] = ratio(-t.budget.get("analyte_unbound", 0.0), target)
    a["cotitrated_share"] = ratio(max(t.cotitrated.values(), default=0.0), COTITRATED_SHARE_MAX)
    if t.pH_drift is not None:
        a["pH_drift"] = ratio(abs(t.pH_drift), PH_DRIFT_MAX)
    if t.sharpness_mL is not None:
        a["too_gradual"] = ratio(t.sharpness_mL, READABLE_DROPS * DROP_mL)
    a["burette"] = ratio(t.titre_mL, scenario.burette_mL)
    solid = max((t.speciation_start.get(m, {}).get("solid", 0.0) for m in scenario.sample.analyte), default=0.0)
    a["analyte_solid"] = UNMEASURED * solid  # the share of the analyte precipitated
    if t.endpoint_mL is None:  # how far the indicator is from turning: what is left to turn (less is nearer)
        a["no_end_point"] = UNMEASURED
    return a


def selectivity_margin(scenario: Scenario, c: Candidate, t: Titration | None) -> float | None:
    """delta log(cK') of the analyte over the strongest interferent still in solution, after masking.

    The analyte's term is the weakest member of an analyte group (all of it must titrate). Concentrations are the
    sample's, undiluted (the same definition as the analyte's feasibility in the report). Interferent
    concentrations are what is left dissolved and unmasked at the start of the titration (precipitated, reduced
    and assumption-masked parts removed); the conditional constants include the buffer's and masking agents'
    ligands. None when no interferent is left.
    """
    s = scenario.sample
    cond, alkali = side_reactions(s, t.method if t is not None else c.method(scenario))
    ligands = tuple(sorted(c.ligand_totals().items()))

    def log_cK(metal: str, conc: float) -> float:
        if conc <= 0:
            return -math.inf
        k = _log_K_conditional(metal, c.titrant, float(c.pH), _binding(metal, ligands), float(cond.ionic_strength_M),
                               float(cond.temperature_C), tuple(sorted(alkali.items())))
        return float(feasibility(k, conc))

    try:
        analyte = min(log_cK(m, s.metals[m]) for m in s.analyte)
        worst = -math.inf
        for m in s.interferents:
            conc = s.metals[m]
            if t is not None:
                sp = t.speciation_start.get(m)
                if sp is not None:
                    conc *= max(0.0, 1.0 - sp["solid"] - sp["masked"])
                else:
                    conc = 0.0  # reduced or masked away entirely
            worst = max(worst, log_cK(m, conc) if conc > 1e-12 else -math.inf)
    except MissingConstantError:
        return None
    return None if worst == -math.inf else analyte - worst


TABLE_IONIC_STRENGTH_M = 0.1  # where no method is chosen: the ionic strength of the handbook tables (common practice)


def _binding(metal: str, ligands: tuple[tuple[str, float], ...]) -> tuple[tuple[str, float], ...]:
    """The ligand totals of a method that bind ``metal`` (a ligand with no constant with it leaves its alpha_M as it
    is), so that methods differing only in agents the metal ignores share one memoised log K'."""
    return tuple((lig, x) for lig, x in ligands if _binds(metal, lig))


@lru_cache(maxsize=None)
def _binds(metal: str, ligand: str) -> bool:
    return bool(ml_constants(metal, ligand))


@lru_cache(maxsize=50_000)
def _log_K_conditional(metal: str, titrant: str, pH: float, ligands: tuple, I: float, T: float, alkali: tuple) -> float:
    """log K' of a metal with a titrant at one pH, ligand totals, conditions and alkali ions (memoised: the candidates
    of a search that differ only in their indicator or strategy share it)."""
    return float(conditional_constant(metal, titrant, pH, dict(ligands), Conditions(I, T), dict(alkali)).log_K_conditional)


def conditional_curves(scenario: Scenario, c: Candidate | None, pH: np.ndarray) -> dict[str, np.ndarray]:
    """log K' of every metal with the method's titrant across pH (with its buffer and masking ligands), and without
    the ligands. Without a method, the scenario's first titrant and no ligands."""
    s = scenario.sample
    cond, alkali = side_reactions(s, c.method(scenario)) if c is not None else (Conditions(TABLE_IONIC_STRENGTH_M, s.temperature_C), {})
    titrant = c.titrant if c else scenario.search.titrants[0]
    ligands = c.ligand_totals() if c is not None else {}
    out = {"pH": pH}
    for m in s.metals:
        for lig_set, suffix in ((ligands, ""), ({}, " (no ligands)")):
            try:
                out[m + suffix] = conditional_constant(m, titrant, pH, lig_set, cond, alkali).log_K_conditional
            except MissingConstantError:
                out[m + suffix] = np.full_like(pH, np.nan)
    return out
