"""Multi-objective search for selective titration conditions: the pymoo problem and the run.

Decision variables: pH (continuous) with the buffer that holds it, the buffer ligand's dose, the titrant,
up to two masking agents with log-scale doses, the indicator, and the strategy with its own choice (the
back-titration standard). The objectives and constraints are those of :mod:`optimiser.objectives`; the
candidates are evaluated in batches by :class:`optimiser.evaluation.Evaluator`; the answer is picked by
:mod:`optimiser.decision` and its robustness scanned by :mod:`optimiser.robustness`.

The result is a plain object: no plotting or file I/O here.
"""
from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from pymoo.algorithms.moo.nsga2 import RankAndCrowding
from pymoo.core.mixed import MixedVariableGA
from pymoo.core.problem import Problem
from pymoo.core.variable import Choice, Real
from pymoo.optimize import minimize

from . import decision, search_stats
from .candidate import Candidate, buffers_for
from .comparison import ListedOutcome, compare
from .decision import strategy_of
from .evaluation import Evaluation, Evaluator
from .objectives import CONSTRAINTS, conditional_curves
from .reagents import catalogue
from .robustness import robustness
from .scenario import Scenario
from .strategies import strategy
from .titration import Titration, simulate

NONE = "none"
BUFFER_LOG_RANGE = (-1.3, -0.3)  # log10 M of the buffer ligand's total: 0.05-0.5 M, the practical range (common practice)
CC_PH = np.round(np.arange(1.0, 13.51, 0.25), 2)  # pH grid of the conditional-constant curves in the result

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
    stats: search_stats.SearchStats | None = None  # how the search went


class MethodProblem(Problem):
    """The pymoo problem: mixed variables, evaluated a whole population at a time."""

    def __init__(self, scenario: Scenario, evaluator: Evaluator):
        sp = scenario.search
        self.scenario, self.evaluator = scenario, evaluator
        self.masking_options = (NONE, *sp.masking) if sp.max_masking_agents else (NONE,)
        cat = catalogue()
        v = {"pH": Real(bounds=sp.pH_range), "buffer_pick": Choice(options=[0, 1]),
             "log_buffer": Real(bounds=BUFFER_LOG_RANGE), "titrant": Choice(options=list(sp.titrants)),
             "indicator": Choice(options=list(sp.indicators)), "mode": Choice(options=list(self.modes(scenario))),
             "back_metal": Choice(options=list(sp.back_metals))}
        self.genes = {}  # a strategy's own variables, named "<mode>.<gene>"
        for mode in self.modes(scenario):
            for name, spec in strategy(mode).genes(scenario.sample, sp).items():
                key = f"{mode}.{name}"
                self.genes[key] = (mode, name)
                v[key] = Real(bounds=spec[1:3]) if spec[0] == "real" else Choice(options=list(spec[1]))
        for i in range(1, sp.max_masking_agents + 1):
            v[f"mask{i}"] = Choice(options=list(self.masking_options))
            v[f"dose{i}"] = Real(bounds=(0.0, 1.0))  # position within the agent's own log dose range
        self._dose_range = {a: tuple(math.log10(x) for x in cat.masking_agent(a).dose_range_M) for a in sp.masking}
        super().__init__(vars=v, n_obj=len(scenario.objectives), n_ieq_constr=len(CONSTRAINTS))

    @staticmethod
    def modes(scenario: Scenario) -> tuple[str, ...]:
        """The scenario's strategies that apply to its sample (each strategy says where it does)."""
        sp = scenario.search
        listed = "modes" in ((scenario.as_read or {}).get("search") or {})
        return tuple(m for m in sp.modes if strategy(m).applies(scenario.sample, sp)
                     or (listed and strategy(m).applies_when_asked(scenario.sample, sp))) or sp.modes[:1]

    def decode(self, x: dict) -> Candidate:
        sp = self.scenario.search
        pH = float(x["pH"])
        bufs = buffers_for(pH, sp.buffers) or [sp.buffers[0]]
        buf = bufs[int(x["buffer_pick"]) % len(bufs)]
        masks = []
        for i in range(1, sp.max_masking_agents + 1):
            a = str(x[f"mask{i}"])
            if a != NONE and a not in [m for m, _ in masks]:
                lo, hi = self._dose_range[a]
                masks.append((a, 10 ** (lo + float(x[f"dose{i}"]) * (hi - lo))))
        mode = str(x["mode"])
        extra = tuple(sorted((name, _plain(x[key])) for key, (m, name) in self.genes.items() if m == mode))
        return Candidate(pH=round(pH, 4), buffer=buf, log_buffer=round(float(x["log_buffer"]), 3), titrant=str(x["titrant"]),
                         masking=tuple(sorted(masks)), indicator=str(x["indicator"]), mode=mode,
                         back_metal=str(x["back_metal"]), extra=extra)

    def _evaluate(self, X, out, *args, **kwargs):
        evals = self.evaluator.evaluate([self.decode(x) for x in X])
        out["F"] = np.array([e.F for e in evals], dtype=float)
        out["G"] = np.array([e.G for e in evals], dtype=float)


def _plain(v):
    """A gene's value as a plain Python value (rounded where real, so that the cache sees repeats)."""
    if isinstance(v, (float, np.floating)):
        return round(float(v), 3)
    if isinstance(v, np.integer):
        return int(v)
    return v.item() if hasattr(v, "item") else v


def run_search(scenario: Scenario, seed: int = 1, pop_size: int = 40, n_gen: int = 25,
               progress: Callable[[int, int, int], None] | None = None, with_robustness: bool = True) -> SearchResult:
    """Search a scenario's space and return the Pareto set, the recommendation and its robustness window.

    Parameters
    ----------
    scenario : Scenario
    seed : int
        Random seed (the same scenario and seed give the same result).
    pop_size, n_gen : int
        Population size and number of generations.
    progress : callable, optional
        Called as ``progress(generation, n_gen, evaluations)`` after each generation.
    """
    t0 = time.perf_counter()
    evaluator = Evaluator(scenario)
    problem = MethodProblem(scenario, evaluator)
    history = []

    def callback(algorithm):
        history.append(algorithm.opt.get("F").copy())
        if progress is not None:
            progress(algorithm.n_gen, n_gen, evaluator.n_evaluations)

    algo = MixedVariableGA(pop_size=pop_size, survival=RankAndCrowding(crowding_func="cd"))
    res = minimize(problem, algo, ("n_gen", n_gen), seed=seed, callback=callback, verbose=False)
    all_evals = list(evaluator.cache.values())
    front = decision.pareto(decision.prune_masking(evaluator, decision.pareto(all_evals)))
    chosen, rule = decision.recommend(front, scenario)
    notes = []
    if chosen is None:
        notes.append(decision.infeasible_note(all_evals))
        chosen = decision.compromise(all_evals)
        if chosen is not None:
            rule += "; nothing meets every criterion, so the closest compromise that can be run is shown"
    rec_t = None
    pH_w, doses, scan_pH, scan_dose = None, {}, None, {}
    if chosen is not None:
        rec_t = simulate(scenario.sample, chosen.candidate.method(scenario), n_points=161, pH_drift=True, standardise=True)
        chosen = evaluator.score(chosen.candidate, rec_t, [])  # the criteria again, on the finer curve
        if with_robustness:
            pH_w, doses, scan_pH, scan_dose = robustness(scenario, chosen)
        note = decision.compromise_note(scenario, chosen)
        if note:
            notes.append(note)
    alts = tuple(Alternative(e, strategy_of(e)) for e in front)
    curves = conditional_curves(scenario, chosen.candidate if chosen else None, CC_PH)
    stats = search_stats.from_evaluations(evaluator.cache.values())
    listed = compare(scenario, [a.evaluation for a in alts], chosen, with_robustness)
    return SearchResult(scenario=scenario, seed=seed, evaluations=evaluator.n_evaluations,
                        generations=res.algorithm.n_gen, wall_time_s=time.perf_counter() - t0,
                        objectives=scenario.objectives, front=alts, recommended=chosen, recommended_titration=rec_t,
                        rule=rule, meets_criteria=decision.meets_criteria(scenario, chosen), robust_pH=pH_w, robust_dose=doses, robustness_pH_scan=scan_pH,
                        robustness_dose_scan=scan_dose, conditional=curves, notes=tuple(notes), history=tuple(history),
                        listed=listed, stats=stats)
