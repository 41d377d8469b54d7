"""Candidates evaluated in batches: the quick checks, one batched simulation, objectives and constraints, a cache."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from . import objectives as ob
from . import parallel
from .candidate import Candidate, buffers_for
from .errors import ConvergenceError, InapplicableMethodError, InputError, MissingConstantError
from .scenario import Scenario
from .titration import Titration, simulate_many

SEARCH_POINTS = 41  # coarse curve points per candidate during the search (the recommendation is re-run finer)
SIMULATION = {"standardise": True, "pH_drift": True}  # what every candidate's criteria need
PARALLEL_MIN = 8  # candidates per process at least before a batch is split over processes (:mod:`optimiser.parallel`;
#                   measured on the demo: a candidate costs 6-15 ms to simulate and score, a fork 8-15 ms)
SIMULATION_FAILURES = {"missing_constant", "inapplicable", "not_converged"}  # kinds of a simulation that failed


@dataclass(frozen=True)
class Evaluation:
    """Objectives, constraints and the simulation behind one candidate."""

    candidate: Candidate
    error_percent: float | None  # as simulated (before standardisation)
    margin: float | None
    sharpness_mL: float | None
    hazard: int
    violations: tuple[str, ...]
    titration: Titration | None
    kinds: tuple[str, ...]
    F: tuple[float, ...]
    G: tuple[float, ...]
    memory_share: float = 0.0

    @property
    def feasible(self) -> bool:
        return all(g <= 0 for g in self.G)

    @property
    def simulated(self) -> bool:
        """True where the candidate went to the simulation (those that hit a missing constant or did not
        converge included), False where the quick checks rejected it."""
        return self.titration is not None or bool(set(self.kinds) & SIMULATION_FAILURES)

    @property
    def violation(self) -> float:
        """How far from feasible: the sum of the graded constraint values (0 where feasible)."""
        return float(sum(max(g, 0.0) for g in self.G))

    @property
    def standardised_error_percent(self) -> float | None:
        """The error left after the titrant is standardised against the analyte by the same method [%]."""
        return self.titration.standardised_error_percent if self.titration is not None else self.error_percent


def _error_kind(exc: Exception) -> str:
    if isinstance(exc, MissingConstantError):
        return "missing_constant"
    if isinstance(exc, InapplicableMethodError):
        return "inapplicable"
    return "not_converged"


class Evaluator:
    """Evaluates candidates in batches, with a cache (the search revisits the same discrete choices).

    Attributes
    ----------
    n_evaluations : int
        Candidates asked for, cache hits included.
    n_simulated : int
        Candidates passed to the simulation (cache hits and pre-screened candidates excluded).
    n_prescreened : int
        Candidates rejected by the quick checks, without a simulation.
    """

    def __init__(self, scenario: Scenario, n_points: int = SEARCH_POINTS):
        self.scenario = scenario
        self.n_points = n_points
        self.cache: dict[tuple, Evaluation] = {}
        self.n_evaluations = 0
        self.n_simulated = 0
        self.n_prescreened = 0
        self._memory: dict[tuple, float] = {}

    def evaluate(self, candidates: Sequence[Candidate]) -> list[Evaluation]:
        self.n_evaluations += len(candidates)
        todo = [c for c in dict.fromkeys(candidates) if c.key() not in self.cache]
        screened, to_sim = {}, []
        for c in todo:
            pre = ob.prescreen(self.scenario, c, buffers_for)
            if pre:
                screened[c] = pre
            else:
                to_sim.append(c)
        for c, e in zip(to_sim, parallel.map_split(self._simulate_and_score, to_sim, PARALLEL_MIN), strict=True):
            self.cache[c.key()] = e
        self.n_simulated += len(to_sim)
        self.n_prescreened += len(screened)
        for c, v in screened.items():
            self.cache[c.key()] = self.score(c, None, v)
        return [self.cache[c.key()] for c in candidates]

    def _simulate_and_score(self, candidates: Sequence[Candidate]) -> list[Evaluation]:
        """Each candidate simulated (in one batch) and scored; none cached here."""
        sims, errors = self._simulate(candidates)
        failed = {k: (_error_kind(e), str(e)) for k, e in errors}
        return [self.score(c, t, [failed[k]] if k in failed else []) for k, (c, t) in enumerate(zip(candidates, sims))]

    def evaluate_all(self, candidates: Sequence[Candidate], n_points: int | None = None) -> list[Evaluation]:
        """Every candidate simulated, even one the quick checks reject (their violations are kept), on a curve of
        ``n_points`` (the evaluator's own by default); neither cached nor counted as the search's. For the methods a
        scenario lists, whose figures are shown whatever they are."""
        candidates = list(candidates)
        pre = [ob.prescreen(self.scenario, c, buffers_for) for c in candidates]
        sims, errors = self._simulate(candidates, n_points)
        failed = {k: (_error_kind(e), str(e)) for k, e in errors}
        return [self.score(c, t, pre[k] + ([failed[k]] if k in failed else []))
                for k, (c, t) in enumerate(zip(candidates, sims, strict=True))]

    def _simulate(self, to_sim: Sequence[Candidate], n_points: int | None = None) -> tuple[list[Titration | None], list]:
        n_points = n_points or self.n_points
        errors: list = []
        methods, bad = [], {}
        for k, c in enumerate(to_sim):
            try:
                methods.append(c.method(self.scenario))
            except InputError as exc:  # a strategy's own genes it refuses (a step that is not a single titration)
                bad[k] = exc
        if bad:
            good = [c for k, c in enumerate(to_sim) if k not in bad]
            sims, errs = self._simulate(good)
            idx = [k for k in range(len(to_sim)) if k not in bad]
            out: list = [None] * len(to_sim)
            for j, k in enumerate(idx):
                out[k] = sims[j]
            return out, [(idx[j], e) for j, e in errs] + [(k, InapplicableMethodError(str(e))) for k, e in bad.items()]
        if not methods:
            return [], errors
        try:
            return simulate_many(self.scenario.sample, methods, n_points=n_points, errors=errors, **SIMULATION), errors
        except ConvergenceError:
            # rare: retry one by one so that only the offending candidate is lost
            sims, errors = [], []
            for k, m in enumerate(methods):
                local: list = []
                try:
                    sims.append(simulate_many(self.scenario.sample, [m], n_points=n_points, errors=local, **SIMULATION)[0])
                except ConvergenceError as exc:
                    sims.append(None)
                    local = [(0, exc)]
                errors += [(k, e) for _, e in local]
            return sims, errors

    def score(self, c: Candidate, t: Titration | None, violations: list[tuple[str, str]]) -> Evaluation:
        """Objectives and constraints of a candidate from its simulation (None where it was not simulated) and the
        violations already found (kind, text)."""
        sc = self.scenario
        v = list(violations)
        err = sharp = None
        if t is not None:
            err, sharp = t.error_percent, t.sharpness_mL
            v += ob.titration_violations(sc, c, t)
        margin = ob.selectivity_margin(sc, c, t) if t is not None else None
        by_cause = t.error_by_cause_percent if t is not None else None
        mk = (c.titrant, c.indicator, tuple(a for a, _ in c.masking), c.mode, c.strategy.variant(c))
        if mk not in self._memory:
            self._memory[mk] = ob.memory_share(sc, c)
        facts = ob.Facts(candidate=c, titration=t, error_percent=by_cause, margin=margin, sharpness_mL=sharp,
                         hazard=ob.hazard_of(c, sc), memory_share=self._memory[mk])
        kinds = tuple(dict.fromkeys(kind for kind, _ in v))
        return Evaluation(candidate=c, error_percent=err, margin=margin, sharpness_mL=sharp, hazard=facts.hazard,
                          violations=tuple(dict.fromkeys(text for _, text in v)), titration=t,
                          F=tuple(ob.OBJECTIVES[k].value(facts) for k in sc.objectives),
                          G=ob.constraint_values(kinds, ob.violation_amounts(sc, c, t) if kinds else None), kinds=kinds,
                          memory_share=facts.memory_share)
