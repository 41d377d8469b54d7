"""The exhaustive grid over a scenario's search space, and hypervolumes: the baseline the search is measured
against (in the benchmark and in the search tests)."""
from __future__ import annotations

import itertools
import math
import time
from collections.abc import Sequence

import numpy as np
from pymoo.indicators.hv import HV

from optimiser.candidate import Candidate, buffers_for
from optimiser.evaluation import Evaluation, Evaluator
from optimiser.reagents import catalogue
from optimiser.scenario import Scenario
from optimiser.search import BUFFER_LOG_RANGE
from optimiser.strategies import strategy


def hypervolume(F: np.ndarray, ref: np.ndarray) -> float:
    """Hypervolume (minimisation) of a set of objective vectors against a reference point."""
    F = np.asarray(F, dtype=float)
    F = F[np.all(F <= ref, axis=1)]
    return float(HV(ref_point=ref)(F)) if len(F) else 0.0


def grid_candidates(scenario: Scenario, pH_step: float = 0.05, buffer_levels: int = 3, dose_levels: int = 5) -> list[Candidate]:
    """Every point of a dense grid over the same space the search explores (for checks and benchmarks)."""
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
                for bm in (sp.back_metals if strategy(mode).uses_standard else sp.back_metals[:1]):
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


def random_candidate(scenario: Scenario, rng: np.random.Generator) -> Candidate:
    """One uniformly random point of the scenario's own space (every choice it allows, nothing it forbids)."""
    sp = scenario.search
    cat = catalogue()
    pH = float(rng.uniform(*sp.pH_range))
    buf = sp.buffers[int(rng.integers(len(sp.buffers)))]
    n_mask = int(rng.integers(sp.max_masking_agents + 1)) if sp.masking else 0
    agents = [sp.masking[i] for i in rng.permutation(len(sp.masking))[:n_mask]]
    masks = []
    for a in agents:
        lo, hi = (math.log10(v) for v in cat.masking_agent(a).dose_range_M)
        masks.append((a, float(10 ** rng.uniform(lo, hi))))
    mode = sp.modes[int(rng.integers(len(sp.modes)))]
    return Candidate(round(pH, 4), buf, round(float(rng.uniform(*BUFFER_LOG_RANGE)), 3),
                     sp.titrants[int(rng.integers(len(sp.titrants)))], tuple(sorted(masks)),
                     sp.indicators[int(rng.integers(len(sp.indicators)))], mode,
                     sp.back_metals[int(rng.integers(len(sp.back_metals)))])


def random_search(scenario: Scenario, budget: int, seed: int, batch: int = 200) -> tuple[list[Evaluation], Evaluator]:
    """Uniform random sampling until ``budget`` candidates were simulated (pre-screened ones do not count)."""
    rng = np.random.default_rng(seed)
    ev = Evaluator(scenario)
    out: list[Evaluation] = []
    tries = 0
    while ev.n_simulated < budget and tries < 200 * budget:
        n = min(batch, budget - ev.n_simulated)
        cands = []
        while len(cands) < n and tries < 200 * budget:  # fill the batch with candidates that pass the quick checks
            c = random_candidate(scenario, rng)
            tries += 1
            out.append(ev.evaluate([c])[0]) if not _passes(scenario, c) else cands.append(c)
        out += ev.evaluate(cands)
    return out, ev


def _passes(scenario: Scenario, c: Candidate) -> bool:
    from optimiser.objectives import prescreen
    return not prescreen(scenario, c, buffers_for)
