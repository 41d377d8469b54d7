"""Multi-objective search for selective titration conditions, complete over the discrete structure of a method.

1. **Enumerate** every structure (titrant, indicator, buffer, masking agents, strategy, standard) and prune it by
   the hard rules of :mod:`optimiser.structures` (no simulation).
2. **Survey**: simulate every structure left once, at the pH where Ringbom's model favours it
   (:mod:`optimiser.survey`); those that just miss feasibility get a second look at the middle and the far side of
   their range. A pair of masking agents is surveyed where each agent alone does something the method without it
   does not and both are among the :data:`PAIR_AGENTS` that do most alone.
3. **Refine** the continuous parts (pH, the masking doses, the buffer total) of the structures that lead:
   those on the survey's Pareto front, or where none is feasible, those nearest to feasibility (the constraint
   values are graded amounts, :func:`optimiser.objectives.violation_amounts`). The pH is scanned over each
   structure's range, then around its best point; the doses over their ranges.
4. **Polish** with pymoo (a mixed-variable genetic algorithm over the refined structures and their continuous
   parts, its first population the refined candidates): the only step the seed enters.

The answer is picked by :mod:`optimiser.decision`, moved to the middle of its robust window with the smallest
doses that keep the error within target (:mod:`optimiser.refinement`), and its robustness scanned
(:mod:`optimiser.robustness`). The result is a plain object: no plotting or file I/O here.
"""
from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from pymoo.core.individual import Individual
from pymoo.core.mixed import MixedVariableGA
from pymoo.core.population import Population
from pymoo.core.problem import Problem
from pymoo.core.variable import Choice, Real
from pymoo.indicators.hv import HV

from . import decision
from .candidate import Candidate, buffers_for
from .comparison import ListedOutcome, compare_with_robustness
from .decision import strategy_of
from .evaluation import Evaluation, Evaluator
from .objectives import CONSTRAINTS, conditional_curves
from .reagents import catalogue
from .refinement import refine
from .scenario import Scenario
from .search_stats import SearchStats
from .structures import Structure, enumerate_structures, structure_key
from .survey import BUFFER_LOG_RANGE, EDGE, SURVEY_DOSE, Survey, dose_of, position_of
from .survival import RankAndCrowdingSurvival
from .titration import Titration, simulate

CC_PH = np.round(np.arange(1.0, 13.51, 0.25), 2)  # pH grid of the conditional-constant curves in the result
REFINE_STRUCTURES = 10  # feasible structures whose continuous parts are refined (the survey's leaders)
REFINE_NEAR = 6  # and the infeasible structures nearest to feasibility (at least this many where few are feasible)
NEAR = 1.0  # ... whose graded violation is at most this (a criterion missed by its own limit at most)
PH_STEP = 0.5  # the refinement's first pH scan over a structure's range
PATTERN_STRUCTURES = 5  # feasible leaders refined further by a pattern search
PATTERN_STEPS = (0.2, 0.1, 0.05)  # its steps (pH units, log units of the buffer total, positions of the doses)
PATTERN_MOVES = 3  # moves at most per step
DOSE_POSITIONS = (0.0, 0.25, 0.5, 0.75, 1.0)  # masking doses tried, as positions in each agent's log range
POLISH_MIN_GAIN = 0.005  # the polishing stops after a generation that adds less than this share to the hypervolume of
#                          the front (its offspring found little the enumeration and refinement had not; our own rule)
PAIR_AGENTS = 4  # pairs of masking agents are surveyed among the agents that do most alone, at most this many (our own)
PAIR_PRUNED = ("a pair of masking agents where either agent alone does nothing the method without it does not, or is "
               f"not among the {PAIR_AGENTS} that do most alone (survey)")

__all__ = ["Candidate", "Evaluation", "Evaluator", "MethodProblem", "SearchResult", "Alternative", "run_search",
           "strategy_of", "buffers_for", "BUFFER_LOG_RANGE"]


@dataclass(frozen=True)
class Alternative:
    """A member of the Pareto set, with the strategy it stands for."""

    evaluation: Evaluation
    strategy: str


@dataclass(frozen=True)
class SearchResult:
    """What the search found (read by the analysis, the report and the JSON writer).

    ``recommended`` is the method picked by the rule; ``meets_criteria`` says whether it meets every acceptance
    criterion and the error target (where it does not, it is the closest compromise, never a procedure to follow).
    ``stats`` says how the search went (structures considered, pruned by each rule, simulated, feasible).
    """

    scenario: Scenario
    seed: int
    evaluations: int
    generations: int
    wall_time_s: float
    objectives: tuple[str, ...]
    front: tuple[Alternative, ...]
    recommended: Evaluation | None
    recommended_titration: Titration | None
    rule: str
    meets_criteria: bool
    robust_pH: tuple[float, float] | None
    robust_dose: dict[str, tuple[float, float]]
    robustness_pH_scan: tuple[np.ndarray, np.ndarray] | None
    robustness_dose_scan: dict[str, tuple[np.ndarray, np.ndarray]]
    conditional: dict[str, np.ndarray]
    notes: tuple[str, ...] = ()
    history: tuple[np.ndarray, ...] = field(default=(), repr=False)
    listed: tuple[ListedOutcome, ...] = ()  # the scenario's listed methods beside the answer (optimiser.comparison)
    stats: SearchStats | None = None  # how the search went


class MethodProblem(Problem):
    """The pymoo problem of the polishing step: which of the refined structures, and its continuous parts (the pH
    as a position within the structure's range, the buffer total, each dose as a position in the agent's range)."""

    def __init__(self, scenario: Scenario, evaluator: Evaluator, structures: Sequence[Structure]):
        self.scenario, self.evaluator, self.structures = scenario, evaluator, list(structures)
        n_mask = max([len(s.masking) for s in self.structures] + [0])
        v = {"structure": Choice(options=list(range(len(self.structures)))), "pH": Real(bounds=(0.0, 1.0)),
             "log_buffer": Real(bounds=BUFFER_LOG_RANGE)}
        for i in range(n_mask):
            v[f"dose{i + 1}"] = Real(bounds=(0.0, 1.0))
        self.n_mask = n_mask
        super().__init__(vars=v, n_obj=len(scenario.objectives), n_ieq_constr=len(CONSTRAINTS))

    def decode(self, x: dict) -> Candidate:
        st = self.structures[int(x["structure"])]
        lo, hi = st.pH_range
        return st.candidate(lo + float(x["pH"]) * (hi - lo), float(x["log_buffer"]),
                            tuple(dose_of(a, float(x[f"dose{i + 1}"])) for i, a in enumerate(st.masking)))

    def encode(self, c: Candidate) -> dict:
        k = next(i for i, s in enumerate(self.structures) if s.key == structure_key(c))
        lo, hi = self.structures[k].pH_range
        x = {"structure": k, "pH": min(1.0, max(0.0, (c.pH - lo) / (hi - lo))),
             "log_buffer": min(BUFFER_LOG_RANGE[1], max(BUFFER_LOG_RANGE[0], c.log_buffer))}
        for i in range(self.n_mask):
            x[f"dose{i + 1}"] = min(1.0, max(0.0, position_of(*c.masking[i]))) if i < len(c.masking) else SURVEY_DOSE
        return x

    def _evaluate(self, X, out, *args, **kwargs):
        evals = self.evaluator.evaluate([self.decode(x) for x in X])
        out["F"] = np.array([e.F for e in evals], dtype=float)
        out["G"] = np.array([e.G for e in evals], dtype=float)


def run_search(scenario: Scenario, seed: int = 1, pop_size: int = 20, n_gen: int = 5,
               progress: Callable[[int, int, int], None] | None = None, with_robustness: bool = True) -> SearchResult:
    """Search a scenario's space and return the Pareto set, the recommendation and its robustness window.

    Parameters
    ----------
    scenario : Scenario
    seed : int
        Random seed of the polishing step (the same scenario and seed give the same result).
    pop_size, n_gen : int
        Population size and number of generations of the polishing step (0 generations: none).
    progress : callable, optional
        Called as ``progress(step, n_steps, evaluations)`` after each step (enumeration and survey, refinement,
        polishing, recommendation).
    """
    t0 = time.perf_counter()
    ev = Evaluator(scenario)
    steps = 4

    def report(step):
        if progress is not None:
            progress(step, steps, ev.n_evaluations)

    structures, pruned, considered = enumerate_structures(scenario)
    by_key = {s.key: s for s in structures}
    surveyed, pair_pruned = _survey(scenario, ev, structures)
    if pair_pruned:
        pruned = pruned + ((PAIR_PRUNED, pair_pruned),)
    report(1)
    leaders = _leaders(scenario, [by_key[k] for k in surveyed], surveyed)
    _refine_structures(scenario, ev, leaders, surveyed)
    report(2)
    # the recommendation's structure is chosen among what the seed does not touch (enumeration, survey, refinement)
    settled = list(ev.cache.values())
    pool = decision.pareto(decision.prune_masking(ev, decision.pareto(settled), scenario))
    generations = 0
    if n_gen > 0 and leaders:
        generations = _polish(scenario, ev, leaders, seed, pop_size, n_gen)
    report(3)
    all_evals = list(ev.cache.values())
    front = decision.pareto(decision.prune_masking(ev, decision.pareto(all_evals), scenario))
    chosen, rule = decision.recommend(pool, scenario)
    rule += ("; the structure is chosen among the candidates of the enumeration and refinement, which do not depend on "
             "the seed, and takes a polished candidate of the same structure where one dominates it")
    if chosen is not None:
        chosen = _dominating(scenario, chosen, front)
    notes = []
    if chosen is None:
        notes.append(decision.infeasible_note(all_evals))
        chosen = decision.compromise(all_evals)
        if chosen is not None:
            rule += "; nothing meets every criterion, so the closest compromise that can be run is shown"
    rec_t = None
    pH_w, doses, scan_pH, scan_dose = None, {}, None, {}
    if chosen is not None:
        if decision.meets_criteria(scenario, chosen):
            chosen, how = refine(scenario, ev, chosen)
            rule += "; " + how
        rec_t = simulate(scenario.sample, chosen.candidate.method(scenario), n_points=161, pH_drift=True, standardise=True)
        chosen = ev.score(chosen.candidate, rec_t, [])  # the criteria again, on the finer curve
        note = decision.compromise_note(scenario, chosen)
        if note:
            notes.append(note)
    alts = tuple(Alternative(e, strategy_of(e)) for e in front)

    # the listed methods, then the robustness scans of the recommendation and of each listed method, in one split
    listed, scans = compare_with_robustness(scenario, [a.evaluation for a in alts], chosen, with_robustness)
    if scans is not None:
        pH_w, doses, scan_pH, scan_dose = scans
    report(4)
    curves = conditional_curves(scenario, chosen.candidate if chosen else None, CC_PH)
    stats = _stats(ev, considered, pruned)
    return SearchResult(scenario=scenario, seed=seed, evaluations=ev.n_evaluations, generations=generations,
                        wall_time_s=time.perf_counter() - t0, objectives=scenario.objectives, front=alts,
                        recommended=chosen, recommended_titration=rec_t, rule=rule,
                        meets_criteria=decision.meets_criteria(scenario, chosen), robust_pH=pH_w, robust_dose=doses,
                        robustness_pH_scan=scan_pH, robustness_dose_scan=scan_dose, conditional=curves,
                        notes=tuple(notes), listed=listed, stats=stats)


def _dominating(scenario: Scenario, e: Evaluation, front: Sequence[Evaluation]) -> Evaluation:
    """The best member of ``front`` of the same structure that dominates ``e`` (``e`` where none does)."""
    F = np.array(e.F)
    better = [x for x in front if structure_key(x.candidate) == structure_key(e.candidate) and x.feasible
              and decision.meets_criteria(scenario, x) and np.all(np.array(x.F) <= F) and np.any(np.array(x.F) < F)]
    return min(better, key=lambda x: (decision.absolute_score(scenario, x), x.candidate.key())) if better else e


def _survey(scenario: Scenario, ev: Evaluator, structures: Sequence[Structure]) -> tuple[dict[tuple, Evaluation], int]:
    """One candidate per structure; pairs of masking agents where each agent alone does something, among the
    :data:`PAIR_AGENTS` agents that do most alone (feasible first, then by the weighted objectives, else by nearness
    to feasibility)."""
    survey = Survey(scenario)
    first = [s for s in structures if len(s.masking) <= 1]
    out = {s.key: e for s, e in zip(first, ev.evaluate([survey.candidate(s) for s in first]))}
    pairs, skipped = [], 0
    helpful: dict[tuple, set] = {}  # per structure without masking: the agents that do most alone
    for s in structures:
        if len(s.masking) < 2:
            continue
        base_key = s.key[:3] + ((),) + s.key[4:]
        base = out.get(base_key)
        if base_key not in helpful and base is not None:
            alone = [(a, out.get(s.key[:3] + ((a,),) + s.key[4:])) for a in scenario.search.masking]
            alone = [(a, e) for a, e in alone if e is not None and _does_something(e, base)]
            alone.sort(key=lambda x: (not x[1].feasible, decision.absolute_score(scenario, x[1]) if x[1].feasible
                                      else x[1].violation, x[0]))
            helpful[base_key] = {a for a, _ in alone[:PAIR_AGENTS]}
        if base is not None and all(a in helpful[base_key] for a in s.masking):
            pairs.append(s)
        else:
            skipped += 1
    out.update({s.key: e for s, e in zip(pairs, ev.evaluate([survey.candidate(s) for s in pairs]))})
    # a second look at the structures that just missed: the middle and the far side of their range
    near = [s for s in structures if s.key in out and not out[s.key].feasible and out[s.key].violation <= NEAR]
    again, owners = [], []
    for s in near:
        c = out[s.key].candidate
        lo, hi = s.pH_range
        for p in ((lo + hi) / 2, hi - EDGE * (hi - lo) if c.pH < (lo + hi) / 2 else lo + EDGE * (hi - lo)):
            if abs(p - c.pH) > 0.05:
                again.append(s.candidate(p, c.log_buffer, tuple(d for _, d in c.masking)))
                owners.append(s.key)
    for k, e in zip(owners, ev.evaluate(again)):
        out[k] = _best(scenario, [out[k], e])
    return out, skipped


def _does_something(e: Evaluation, base: Evaluation) -> bool:
    """True where a masking agent changes what the method without it achieves (feasibility, nearness to it, the
    margin, or the error by more than a tenth of a per cent)."""
    if e.feasible != base.feasible or abs(e.violation - base.violation) > 1e-6:
        return True
    if (e.margin or 0.0) != (base.margin or 0.0):
        return True
    a, b = e.standardised_error_percent, base.standardised_error_percent
    return (a is None) != (b is None) or (a is not None and abs(abs(a) - abs(b)) > 0.1)


def _leaders(scenario: Scenario, structures: Sequence[Structure], surveyed: dict[tuple, Evaluation]) -> list[Structure]:
    """The structures whose continuous parts are refined: the survey's feasible ones, front by front (Pareto
    layers; in each, structures whose titrant, indicator, buffer and strategy are not yet among the leaders first,
    then by the recommendation's weighted score), then the nearest to feasibility."""
    feas = [s for s in structures if surveyed[s.key].feasible]
    out: list[Structure] = []
    rest = list(feas)
    while rest and len(out) < REFINE_STRUCTURES:
        layer = decision.pareto([surveyed[s.key] for s in rest], dedupe=False)
        keys = {e.candidate.key() for e in layer}
        now = [s for s in rest if surveyed[s.key].candidate.key() in keys]
        seen = {(x.titrant, x.indicator, x.buffer, x.mode) for x in out}
        now.sort(key=lambda s: ((s.titrant, s.indicator, s.buffer, s.mode) in seen,  # another base first (diversity)
                                decision.weighted_score(scenario, [surveyed[x.key] for x in rest], surveyed[s.key]),
                                s.key))
        out += now[:REFINE_STRUCTURES - len(out)]
        rest = [s for s in rest if s not in now]
    near = sorted((s for s in structures if not surveyed[s.key].feasible),
                  key=lambda s: (surveyed[s.key].violation, s.key))
    n_near = sum(surveyed[s.key].violation <= NEAR for s in near[:REFINE_NEAR])
    return out + near[:max(n_near, min(REFINE_NEAR, REFINE_STRUCTURES - len(out)))]


def _refine_structures(scenario: Scenario, ev: Evaluator, leaders: Sequence[Structure],
                       surveyed: dict[tuple, Evaluation]) -> None:
    """The continuous parts of each leader: a pH scan over its range (at the survey's buffer total and at the
    largest), the masking doses and the buffer total at its best pH, then a pattern search (pH, buffer total, doses;
    the steps halved twice) from the best point of the first :data:`PATTERN_STRUCTURES` leaders feasible after the
    scans (where none is, the first leaders). All structures go
    in one batch per step."""
    best = {s.key: surveyed[s.key] for s in leaders}
    scan = []
    for s in leaders:
        lo, hi = s.pH_range
        c = best[s.key].candidate
        levels = (c.log_buffer, BUFFER_LOG_RANGE[1]) if catalogue().buffer(s.buffer).ligand else (c.log_buffer,)
        for p in np.unique(np.round(np.r_[np.arange(lo, hi + 1e-9, PH_STEP), hi], 2)):
            for lb in levels:
                scan.append(s.candidate(p, lb, tuple(d for _, d in c.masking)))
    _update(scenario, best, ev.evaluate(scan))
    doses = []
    for s in leaders:
        c = best[s.key].candidate
        for i in range(len(s.masking)):
            for q in DOSE_POSITIONS:
                d = [x for _, x in c.masking]
                d[i] = dose_of(s.masking[i], q)
                doses.append(s.candidate(c.pH, c.log_buffer, tuple(d)))
        if catalogue().buffer(s.buffer).ligand:
            doses += [s.candidate(c.pH, lb, tuple(x for _, x in c.masking)) for lb in BUFFER_LOG_RANGE]
    _update(scenario, best, ev.evaluate(doses))
    # the pattern search refines the leaders that are feasible after the scans (where none is, the nearest)
    top = [s for s in leaders if best[s.key].feasible][:PATTERN_STRUCTURES] or leaders[:PATTERN_STRUCTURES]
    for step in PATTERN_STEPS:
        for _ in range(PATTERN_MOVES):
            before = {s.key: best[s.key].candidate.key() for s in top}
            _update(scenario, best, ev.evaluate([n for s in top for n in _neighbours(s, best[s.key].candidate, step)]))
            if all(best[s.key].candidate.key() == before[s.key] for s in top):
                break


def _neighbours(s: Structure, c: Candidate, step: float) -> list[Candidate]:
    """The pattern search's neighbours of a candidate: pH +/- step, log buffer total +/- step, each dose's position
    +/- step (within their ranges)."""
    pos = [position_of(a, d) for a, d in c.masking]
    out = []
    for p in (c.pH - step, c.pH + step):
        if s.pH_range[0] - 1e-9 <= p <= s.pH_range[1] + 1e-9:
            out.append(s.candidate(p, c.log_buffer, tuple(d for _, d in c.masking)))
    if catalogue().buffer(s.buffer).ligand:
        for lb in (c.log_buffer - step, c.log_buffer + step):
            if BUFFER_LOG_RANGE[0] - 1e-9 <= lb <= BUFFER_LOG_RANGE[1] + 1e-9:
                out.append(s.candidate(c.pH, lb, tuple(d for _, d in c.masking)))
    for i, a in enumerate(s.masking):
        for q in (pos[i] - step, pos[i] + step):
            if -1e-9 <= q <= 1 + 1e-9:
                d = [x for _, x in c.masking]
                d[i] = dose_of(a, min(1.0, max(0.0, q)))
                out.append(s.candidate(c.pH, c.log_buffer, tuple(d)))
    return out


def _best(scenario: Scenario, evals: Sequence[Evaluation]) -> Evaluation:
    """Feasible before infeasible; among feasible the smallest weighted sum of the objectives (scaled by their
    caps), else the nearest to feasibility; ties by the candidate's key (deterministic)."""
    return min(evals, key=lambda e: (not e.feasible, decision.absolute_score(scenario, e) if e.feasible else e.violation,
                                     e.candidate.key()))


def _update(scenario: Scenario, best: dict[tuple, Evaluation], evals: Sequence[Evaluation]) -> None:
    for e in evals:
        k = structure_key(e.candidate)
        if k in best:
            best[k] = _best(scenario, [best[k], e])


def _polish(scenario: Scenario, ev: Evaluator, leaders: Sequence[Structure], seed: int, pop_size: int,
            n_gen: int) -> int:
    """pymoo's mixed-variable genetic algorithm over the leaders, its first population their best candidates."""
    problem = MethodProblem(scenario, ev, leaders)
    keys = {s.key for s in leaders}
    known = [e for e in ev.cache.values() if structure_key(e.candidate) in keys]
    known.sort(key=lambda e: (not e.feasible, decision.absolute_score(scenario, e) if e.feasible else e.violation,
                              e.candidate.key()))
    seeds = [problem.encode(e.candidate) for e in known[:pop_size]]
    rng = np.random.default_rng(seed)
    while len(seeds) < pop_size:  # where few are known, random points of the leaders fill the first population
        st = int(rng.integers(len(leaders)))
        x = {"structure": st, "pH": float(rng.random()), "log_buffer": float(rng.uniform(*BUFFER_LOG_RANGE))}
        x.update({f"dose{i + 1}": float(rng.random()) for i in range(problem.n_mask)})
        seeds.append(x)
    pop = Population.create(*[Individual(X=x) for x in seeds])
    algo = MixedVariableGA(pop_size=pop_size, sampling=pop, survival=RankAndCrowdingSurvival())
    algo.setup(problem, termination=("n_gen", n_gen), seed=seed, verbose=False)
    scale = _FrontScale(ev)
    last = scale.hypervolume(ev)
    while algo.has_next():
        algo.next()
        now = scale.hypervolume(ev)
        if algo.n_gen >= 2 and now - last <= POLISH_MIN_GAIN * max(last, 1e-12):
            break
        last = now
    return max(int(algo.n_gen or 1) - 1, 0)


class _FrontScale:
    """The hypervolume of the feasible front of everything evaluated, on the objectives scaled to 0-1 over what was
    known when the polishing began (reference point 1.1 on each): the polishing's measure of progress."""

    def __init__(self, ev: Evaluator):
        F = np.array([e.F for e in ev.cache.values() if e.feasible] or [e.F for e in ev.cache.values()], dtype=float)
        self.lo, hi = F.min(axis=0), F.max(axis=0)
        self.span = np.where(hi > self.lo, hi - self.lo, 1.0)
        self.indicator = HV(ref_point=np.full(F.shape[1], 1.1))

    def hypervolume(self, ev: Evaluator) -> float:
        F = np.array([e.F for e in ev.cache.values() if e.feasible], dtype=float)
        if not len(F):
            return 0.0
        X = (F - self.lo) / self.span
        X = X[np.all(X < 1.1, axis=1)]  # beyond the reference point on some objective: no volume
        return float(self.indicator(X)) if len(X) else 0.0


def _stats(ev: Evaluator, considered: int, pruned: tuple[tuple[str, int], ...]) -> SearchStats:
    simulated, feasible = set(), set()
    for e in ev.cache.values():
        k = structure_key(e.candidate)
        if e.simulated:
            simulated.add(k)
        if e.feasible:
            feasible.add(k)
    return SearchStats(structures_considered=considered, structures_pruned=pruned,
                       structures_simulated=len(simulated), structures_feasible=len(feasible),
                       candidates_simulated=ev.n_simulated, candidates_prescreened=ev.n_prescreened)
