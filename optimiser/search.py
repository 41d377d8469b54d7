"""Multi-objective search for selective titration conditions (pymoo, mixed variables).

Decision variables: pH (continuous) with the buffer that holds it, the buffer ligand's dose, the titrant,
up to two masking agents with log-scale doses, the indicator, and the mode (direct or back-titration with
a Zn or Mg standard). Objectives (minimised): |titration error| [%], -selectivity margin [log units],
end-point sharpness [mL], reagent hazard [0-4] and bench complexity (:func:`complexity_of`). Constraints (G <= 0 feasible): the method is readable (an
end point exists, the indicator changes colour at that pH and is not blocked), the analyte does not
precipitate, the titre fits the burette, and the reagents suit the pH and the scenario's limits.

The chemistry of a whole population is solved in a few vectorised calls (candidates that share a chemical
system go into one equilibrium solve). The result is a plain object: no plotting or file I/O here.
"""
from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from pymoo.algorithms.moo.nsga2 import RankAndCrowding
from pymoo.core.mixed import MixedVariableGA
from pymoo.core.problem import Problem
from pymoo.core.variable import Choice, Real
from pymoo.indicators.hv import HV
from pymoo.optimize import minimize

from .conditional import Conditions, conditional_constant, feasibility
from .errors import ConvergenceError, InapplicableMethodError, MissingConstantError
from .reagents import HAZARD_NAMES, catalogue
from .scenario import Scenario
from .titration import Method, Titration, simulate, simulate_many

NONE = "none"
ERROR_CAP = 100.0  # % assigned where no end point is seen
SHARPNESS_CAP = 10.0  # mL
MARGIN_CAP = 12.0  # log units (no interferent left, or far beyond any practical need)
BUFFER_LOG_RANGE = (-1.3, -0.3)  # log10 M of the buffer ligand's total: 0.05-0.5 M, the practical range (common practice)
SEARCH_POINTS = 41  # coarse curve points per candidate during the search (the recommendation is re-run finer)


@dataclass(frozen=True)
class Candidate:
    """One point of the search space, decoded (what a pymoo individual means)."""

    pH: float
    buffer: str
    log_buffer: float
    titrant: str
    masking: tuple[tuple[str, float], ...]
    indicator: str
    mode: str
    back_metal: str

    def method(self, scenario: Scenario) -> Method:
        cat = catalogue()
        buf = cat.buffer(self.buffer)
        return Method(pH=self.pH, buffer=self.buffer, buffer_total_M=10 ** self.log_buffer if buf.ligand else 0.0,
                      titrant=self.titrant, titrant_conc_M=scenario.titrant_conc_M, masking=self.masking,
                      indicator=self.indicator, mode=self.mode, back_metal=self.back_metal)

    def ligand_totals(self) -> dict[str, float]:
        """Total concentration of each ligand the method adds (buffer ligand and masking agents) [mol/L]."""
        cat = catalogue()
        out: dict[str, float] = {}
        buf = cat.buffer(self.buffer)
        if buf.ligand:
            out[buf.ligand] = 10 ** self.log_buffer
        for a, dose in self.masking:
            lig = cat.masking_agent(a).ligand
            out[lig] = out.get(lig, 0.0) + dose
        return out

    def key(self) -> tuple:
        return (round(self.pH, 3), self.buffer, round(self.log_buffer, 2), self.titrant,
                tuple((a, round(math.log10(c), 2)) for a, c in self.masking), self.indicator, self.mode,
                self.back_metal if self.mode == "back" else "")


@dataclass(frozen=True)
class Evaluation:
    """Objectives, constraints and the simulation behind one candidate."""

    candidate: Candidate
    error_percent: float | None
    margin: float | None
    sharpness_mL: float | None
    hazard: int
    violations: tuple[str, ...]
    titration: Titration | None
    kinds: tuple[str, ...]
    F: tuple[float, ...]
    G: tuple[float, ...]

    @property
    def feasible(self) -> bool:
        return all(g <= 0 for g in self.G)


@dataclass(frozen=True)
class Alternative:
    """A member of the Pareto set, with the strategy it stands for."""

    evaluation: Evaluation
    strategy: str


@dataclass(frozen=True)
class SearchResult:
    """What the search found (read by the report and the JSON writer)."""

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
    robust_pH: tuple[float, float] | None
    robust_dose: dict[str, tuple[float, float]]
    robustness_pH_scan: tuple[np.ndarray, np.ndarray] | None
    robustness_dose_scan: dict[str, tuple[np.ndarray, np.ndarray]]
    conditional: dict[str, np.ndarray]
    notes: tuple[str, ...] = ()
    history: tuple[np.ndarray, ...] = field(default=(), repr=False)


def buffers_for(pH: float, allowed: Sequence[str]) -> list[str]:
    """Buffers (in the scenario's order) whose working range holds this pH."""
    cat = catalogue()
    return [b for b in allowed if cat.buffer(b).pH_range[0] <= pH <= cat.buffer(b).pH_range[1]]


def hazard_of(c: Candidate) -> int:
    cat = catalogue()
    levels = [cat.titrant(c.titrant).hazard, cat.buffer(c.buffer).hazard, cat.indicator(c.indicator).hazard]
    levels += [cat.masking_agent(a).hazard for a, _ in c.masking]
    return max(levels)


def complexity_of(c: Candidate) -> float:
    """Bench complexity: one per masking agent, one for a back-titration (a second standard and a second
    titre), a half for a titrant other than EDTA (fewer published methods, less certain constants). Our own
    scale (common practice: simpler methods are preferred where they do the job)."""
    return len(c.masking) + (1.0 if c.mode == "back" else 0.0) + (0.5 if c.titrant != "EDTA" else 0.0)


def selectivity_margin(scenario: Scenario, c: Candidate, t: Titration | None) -> float | None:
    """delta log(cK') of the analyte over the strongest interferent still in solution, after masking.

    The analyte's term is the weakest member of an analyte group (all of it must titrate). Interferent
    concentrations are what is left dissolved and unmasked at the start of the titration (precipitated,
    reduced and assumption-masked parts removed); the conditional constants include the buffer's and masking
    agents' ligands. None when no interferent is left.
    """
    s = scenario.sample
    cond = Conditions(s.ionic_strength_M, s.temperature_C)
    ligands = c.ligand_totals()

    def log_cK(metal: str, conc: float) -> float:
        if conc <= 0:
            return -math.inf
        k = conditional_constant(metal, c.titrant, c.pH, ligands, cond).log_K_conditional
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


class Evaluator:
    """Evaluates candidates in batches, with a cache (the GA revisits the same discrete choices)."""

    def __init__(self, scenario: Scenario, n_points: int = SEARCH_POINTS):
        self.scenario = scenario
        self.n_points = n_points
        self.cache: dict[tuple, Evaluation] = {}
        self.n_evaluations = 0
        self.n_simulated = 0

    def evaluate(self, candidates: Sequence[Candidate]) -> list[Evaluation]:
        self.n_evaluations += len(candidates)
        todo = [c for c in dict.fromkeys(candidates) if c.key() not in self.cache]
        screened, to_sim = {}, []
        for c in todo:
            pre = self._prescreen(c)
            if pre:
                screened[c] = pre
            else:
                to_sim.append(c)
        errors: list = []
        methods = [c.method(self.scenario) for c in to_sim]
        try:
            sims = simulate_many(self.scenario.sample, methods, n_points=self.n_points, errors=errors) if to_sim else []
        except ConvergenceError:
            # rare: retry one by one so that only the offending candidate is lost
            sims, errors = [], []
            for k, m in enumerate(methods):
                local: list = []
                try:
                    sims.append(simulate_many(self.scenario.sample, [m], n_points=self.n_points, errors=local)[0])
                except ConvergenceError as exc:
                    sims.append(None)
                    local = [(0, exc)]
                errors += [(k, e) for _, e in local]
        self.n_simulated += len(to_sim)
        failed = {k: (_error_kind(e), str(e)) for k, e in errors}
        for k, (c, t) in enumerate(zip(to_sim, sims)):
            self.cache[c.key()] = self._score(c, t, [failed[k]] if k in failed else [])
        for c, v in screened.items():
            self.cache[c.key()] = self._score(c, None, v)
        return [self.cache[c.key()] for c in candidates]

    def _prescreen(self, c: Candidate) -> list[tuple[str, str]]:
        """Violations (kind, text) that need no equilibrium (skip the simulation)."""
        cat = catalogue()
        sc = self.scenario
        out = []
        ind = cat.indicator(c.indicator)
        if not (ind.usable_pH[0] <= c.pH <= ind.usable_pH[1]):
            out.append(("indicator_pH", f"{ind.name} shows no colour change at pH {c.pH:.2f}"))
        if c.buffer not in buffers_for(c.pH, sc.search.buffers):
            out.append(("buffer", f"no allowed buffer holds pH {c.pH:.2f}"))
        for a, _ in c.masking:
            agent = cat.masking_agent(a)
            if c.pH < agent.min_pH:
                out.append(("masking_pH", f"{agent.name} is not used below pH {agent.min_pH:g}"))
        if hazard_of(c) > sc.search.max_hazard:
            out.append(("hazard", f"hazard {HAZARD_NAMES[hazard_of(c)]} is above the scenario's limit"))
        return out

    def _score(self, c: Candidate, t: Titration | None, violations: list[tuple[str, str]]) -> Evaluation:
        sc = self.scenario
        v = list(violations)
        err = sharp = None
        if t is not None:
            err, sharp = t.error_percent, t.sharpness_mL
            if t.endpoint_mL is None:
                v.append(("no_end_point", "no end point: the indicator does not turn"))
            if t.blocked_by:
                v.append(("blocked", f"indicator blocked by {', '.join(t.blocked_by)}"))
            if not t.indicator_usable:
                v.append(("indicator_pH", "indicator shows no colour change at this pH"))
            if t.analyte_precipitates:
                v.append(("analyte_solid", f"the analyte precipitates ({', '.join(t.analyte_precipitates)})"))
            if c.mode == "direct" and t.slow_analytes:
                v.append(("slow", "the analyte reacts too slowly for a direct titration"))
            if err is not None and abs(err) > 10 * sc.targets.max_error_percent:
                v.append(("error_far", f"error {err:+.1f} % is more than ten times the target"))
            total_mL = max(t.excess_mL or 0.0, t.endpoint_mL or 0.0) if c.mode == "back" else (t.endpoint_mL or 0.0)
            if total_mL > sc.burette_mL:
                v.append(("burette", f"titre {total_mL:.1f} mL exceeds the {sc.burette_mL:g} mL burette"))
        margin = selectivity_margin(sc, c, t) if t is not None else None
        hz = hazard_of(c)
        full = {"error": min(abs(err), ERROR_CAP) if err is not None else ERROR_CAP,
                "selectivity": -min(margin, MARGIN_CAP) if margin is not None else (-MARGIN_CAP if t is not None else 0.0),
                "sharpness": min(sharp, SHARPNESS_CAP) if sharp is not None else SHARPNESS_CAP,
                "hazard": float(hz), "complexity": complexity_of(c)}
        groups = {VIOLATIONS[kind][0] for kind, _ in v}
        return Evaluation(candidate=c, error_percent=err, margin=margin, sharpness_mL=sharp, hazard=hz,
                          violations=tuple(dict.fromkeys(text for _, text in v)), titration=t,
                          F=tuple(full[k] for k in sc.objectives),
                          G=tuple(1.0 if g in groups else -1.0 for g in CONSTRAINTS),
                          kinds=tuple(dict.fromkeys(kind for kind, _ in v)))


def _error_kind(exc: Exception) -> str:
    if isinstance(exc, MissingConstantError):
        return "missing_constant"
    if isinstance(exc, InapplicableMethodError):
        return "inapplicable"
    return "not_converged"


class MethodProblem(Problem):
    """The pymoo problem: mixed variables, evaluated a whole population at a time."""

    def __init__(self, scenario: Scenario, evaluator: Evaluator):
        sp = scenario.search
        self.scenario, self.evaluator = scenario, evaluator
        self.masking_options = (NONE, *sp.masking) if sp.max_masking_agents else (NONE,)
        cat = catalogue()
        v = {"pH": Real(bounds=sp.pH_range), "buffer_pick": Choice(options=[0, 1]),
             "log_buffer": Real(bounds=BUFFER_LOG_RANGE), "titrant": Choice(options=list(sp.titrants)),
             "indicator": Choice(options=list(sp.indicators)), "mode": Choice(options=list(sp.modes)),
             "back_metal": Choice(options=list(sp.back_metals))}
        for i in range(1, sp.max_masking_agents + 1):
            v[f"mask{i}"] = Choice(options=list(self.masking_options))
            v[f"dose{i}"] = Real(bounds=(0.0, 1.0))  # position within the agent's own log dose range
        self._dose_range = {a: tuple(math.log10(x) for x in cat.masking_agent(a).dose_range_M) for a in sp.masking}
        super().__init__(vars=v, n_obj=len(scenario.objectives), n_ieq_constr=len(CONSTRAINTS))

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
        return Candidate(pH=round(pH, 4), buffer=buf, log_buffer=round(float(x["log_buffer"]), 3), titrant=str(x["titrant"]),
                         masking=tuple(sorted(masks)), indicator=str(x["indicator"]), mode=str(x["mode"]),
                         back_metal=str(x["back_metal"]))

    def _evaluate(self, X, out, *args, **kwargs):
        evals = self.evaluator.evaluate([self.decode(x) for x in X])
        out["F"] = np.array([e.F for e in evals], dtype=float)
        out["G"] = np.array([e.G for e in evals], dtype=float)


# kind of violation -> (constraint it counts against, short text for summaries)
VIOLATIONS = {
    "indicator_pH": ("readable", "the indicator shows no colour change at that pH"),
    "buffer": ("readable", "no allowed buffer holds the pH"),
    "masking_pH": ("readable", "a masking agent below its working pH"),
    "hazard": ("readable", "a reagent above the hazard limit"),
    "no_end_point": ("readable", "no end point (the indicator does not turn)"),
    "blocked": ("readable", "the indicator is blocked"),
    "missing_constant": ("readable", "a constant is missing"),
    "inapplicable": ("readable", "the method masks the analyte itself"),
    "not_converged": ("readable", "the equilibrium did not converge"),
    "analyte_solid": ("chemistry", "the analyte precipitates"),
    "slow": ("chemistry", "the analyte reacts too slowly"),
    "error_far": ("chemistry", "an error far beyond the target"),
    "burette": ("volume", "the titre exceeds the burette"),
}
CONSTRAINTS = ("readable", "chemistry", "volume")


def strategy_of(e: Evaluation) -> str:
    c = e.candidate
    if c.mode == "back":
        return "back-titration"
    if c.masking:
        return "masking"
    if c.titrant != "EDTA":
        return "another titrant"
    if e.titration is not None and e.titration.precipitates_start:
        return "pH control (precipitation)"
    return "pH control"


def _pareto(evals: Sequence[Evaluation]) -> list[Evaluation]:
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
    """Pick one method from the front by a stated rule."""
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


def robustness(scenario: Scenario, e: Evaluation, half_width: float = 1.0, step: float = 0.05):
    """Scan pH (and each masking dose) around a method; the window where |error| stays within the target."""
    c = e.candidate
    target = scenario.targets.max_error_percent
    lo, hi = catalogue().buffer(c.buffer).pH_range  # beyond its working range the buffer does not hold the pH
    grid = np.round(np.arange(c.pH - half_width, c.pH + half_width + 1e-9, step), 4)
    grid = grid[(grid >= max(0.0, lo)) & (grid <= min(14.0, hi))]
    grid = np.union1d(grid, [c.pH])
    methods = [replace(c.method(scenario), pH=float(p)) for p in grid]
    errs = _errors(scenario, methods)
    pH_window = _window(grid, errs, c.pH, target)
    doses = {}
    dose_scans = {}
    for a, d in c.masking:
        lo, hi = (math.log10(x) for x in catalogue().masking_agent(a).dose_range_M)
        lg = np.log10(d) + np.arange(-1.0, 1.0001, 0.1)
        lg = np.union1d(lg[(lg >= lo - 1e-9) & (lg <= hi + 1e-9)], [np.log10(d)])
        ms = []
        for x in lg:
            mask = tuple((b, 10 ** x if b == a else dd) for b, dd in c.masking)
            ms.append(replace(c.method(scenario), masking=mask))
        de = _errors(scenario, ms)
        dose_scans[a] = (10 ** lg, de)
        w = _window(lg, de, np.log10(d), target)
        if w is not None:
            doses[a] = (float(10 ** w[0]), float(10 ** w[1]))
    return pH_window, doses, (grid, errs), dose_scans


def _errors(scenario: Scenario, methods: Sequence[Method]) -> np.ndarray:
    errors: list = []
    sims = simulate_many(scenario.sample, methods, n_points=81, errors=errors)
    out = []
    for t in sims:
        if t is None or t.error_percent is None or t.blocked_by or not t.indicator_usable:
            out.append(np.nan)
        else:
            out.append(t.error_percent)
    return np.array(out)


def _window(x: np.ndarray, err: np.ndarray, x0: float, target: float) -> tuple[float, float] | None:
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


def conditional_curves(scenario: Scenario, c: Candidate | None, pH: np.ndarray) -> dict[str, np.ndarray]:
    """log K' of every metal with the recommended titrant across pH (with the method's buffer and masking ligands)."""
    s = scenario.sample
    cond = Conditions(s.ionic_strength_M, s.temperature_C)
    titrant = c.titrant if c else "EDTA"
    ligands = c.ligand_totals() if c is not None else {}
    out = {"pH": pH}
    for m in s.metals:
        for lig_set, suffix in ((ligands, ""), ({}, " (no ligands)")):
            try:
                out[m + suffix] = conditional_constant(m, titrant, pH, lig_set, cond).log_K_conditional
            except MissingConstantError:
                out[m + suffix] = np.full_like(pH, np.nan)
    return out


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
    front = _pareto(prune_masking(evaluator, _pareto(all_evals)))
    chosen, rule = recommend(front, scenario)
    rec_t = None
    notes = []
    pH_w, doses, scan_pH, scan_dose = None, {}, None, {}
    if chosen is not None:
        rec_t = simulate(scenario.sample, chosen.candidate.method(scenario), n_points=161, pH_drift=True)
        chosen = replace(chosen, titration=rec_t, error_percent=rec_t.error_percent, sharpness_mL=rec_t.sharpness_mL)
        if with_robustness:
            pH_w, doses, scan_pH, scan_dose = robustness(scenario, chosen)
        target = scenario.targets.max_error_percent
        if abs(rec_t.error_percent) > target:
            worst = max(rec_t.cotitrated.items(), key=lambda kv: kv[1], default=None)
            why = (f"; {worst[0]} is {100 * worst[1]:.0f} % co-titrated at the end point" if worst and worst[1] > 0.01 else "")
            notes.append(f"No method in the search space meets the error target of {target:g} %: the recommendation is "
                         f"the closest compromise found (predicted error {rec_t.error_percent:+.2f} %{why}). Widen the "
                         "search (pH range, titrants, masking agents) or separate the interferent before the titration.")
    else:
        counts: dict[str, int] = {}
        simulated = [e for e in all_evals if e.titration is not None] or all_evals  # past the quick checks first
        for e in simulated:
            for kind in dict.fromkeys(e.kinds):
                counts[VIOLATIONS[kind][1]] = counts.get(VIOLATIONS[kind][1], 0) + 1
        top = sorted(counts.items(), key=lambda kv: -kv[1])[:4]
        notes.append("No feasible method was found in the search space. Most common reasons among the "
                     f"{len(simulated)} candidates simulated: " + "; ".join(f"{k} ({n})" for k, n in top) + ".")
    alts = tuple(Alternative(e, strategy_of(e)) for e in front)
    curves = conditional_curves(scenario, chosen.candidate if chosen else None, np.round(np.arange(1.0, 13.51, 0.25), 2))
    return SearchResult(scenario=scenario, seed=seed, evaluations=evaluator.n_evaluations,
                        generations=res.algorithm.n_gen, wall_time_s=time.perf_counter() - t0,
                        objectives=scenario.objectives, front=alts, recommended=chosen, recommended_titration=rec_t,
                        rule=rule, robust_pH=pH_w, robust_dose=doses, robustness_pH_scan=scan_pH,
                        robustness_dose_scan=scan_dose, conditional=curves, notes=tuple(notes), history=tuple(history))


def hypervolume(F: np.ndarray, ref: np.ndarray) -> float:
    """Hypervolume (minimisation) of a set of objective vectors against a reference point."""
    F = np.asarray(F, dtype=float)
    F = F[np.all(F <= ref, axis=1)]
    return float(HV(ref_point=ref)(F)) if len(F) else 0.0


def grid_candidates(scenario: Scenario, pH_step: float = 0.05, buffer_levels: int = 3, dose_levels: int = 5) -> list[Candidate]:
    """Every point of a dense grid over the same space the search explores (for checks and benchmarks)."""
    import itertools

    sp = scenario.search
    cat = catalogue()
    pHs = np.round(np.arange(sp.pH_range[0], sp.pH_range[1] + 1e-9, pH_step), 4)
    buf_logs = np.linspace(*BUFFER_LOG_RANGE, buffer_levels)
    masks: list[tuple[tuple[str, float], ...]] = [()]
    singles = [((a, float(10 ** x)),) for a in sp.masking
               for x in np.linspace(*(math.log10(v) for v in cat.masking_agent(a).dose_range_M), dose_levels)]
    if sp.max_masking_agents >= 1:
        masks += singles
    if sp.max_masking_agents >= 2:
        masks += [tuple(sorted(a + b)) for a, b in itertools.combinations(singles, 2) if a[0][0] != b[0][0]]
    out = []
    for pH in pHs:
        bufs = buffers_for(float(pH), sp.buffers)
        if not bufs:
            continue
        for buf in bufs:
            logs = buf_logs if cat.buffer(buf).ligand else [BUFFER_LOG_RANGE[0]]
            for lb, t, m, ind, mode in itertools.product(logs, sp.titrants, masks, sp.indicators, sp.modes):
                for bm in (sp.back_metals if mode == "back" else sp.back_metals[:1]):
                    out.append(Candidate(float(pH), buf, round(float(lb), 3), t, m, ind, mode, bm))
    return out


def grid_search(scenario: Scenario, candidates: Sequence[Candidate] | None = None, batch: int = 400) -> tuple[list[Evaluation], float]:
    """Evaluate a dense grid exhaustively; returns the evaluations and the wall time [s]."""
    t0 = time.perf_counter()
    cands = list(candidates) if candidates is not None else grid_candidates(scenario)
    ev = Evaluator(scenario)
    out: list[Evaluation] = []
    for k in range(0, len(cands), batch):
        out += ev.evaluate(cands[k:k + batch])
    return out, time.perf_counter() - t0


def front_hypervolumes(a: Sequence[Evaluation], b: Sequence[Evaluation]) -> tuple[float, float]:
    """Hypervolumes of two sets' feasible fronts, objectives scaled to [0, 1] over both, reference point 1.1."""
    Fa = np.array([e.F for e in a if e.feasible])
    Fb = np.array([e.F for e in b if e.feasible])
    both = np.vstack([x for x in (Fa, Fb) if len(x)])
    lo, hi = both.min(axis=0), both.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    ref = np.full(both.shape[1], 1.1)

    def hv(F):
        return hypervolume((F - lo) / span, ref) if len(F) else 0.0
    return hv(Fa), hv(Fb)
