"""NSGA-II's survival (optimiser.survival) against the reference library pymoo's RankAndCrowding(crowding_func="cd").

Source of the algorithm: K. Deb, A. Pratap, S. Agarwal, T. Meyarivan, "A fast and elitist multiobjective genetic
algorithm: NSGA-II", IEEE Trans. Evol. Comput. 6(2) (2002) 182-197. Reference library: pymoo (PyPI), whose
``RankAndCrowding`` with the "cd" crowding is the survival the polishing step used before; its module is imported
here only (it loads scipy.spatial, which the optimiser no longer does).
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from pymoo.core.population import Population
from pymoo.core.problem import Problem
from pymoo.operators.survival.rank_and_crowding import (
    RankAndCrowding as PymooRankAndCrowding,
)
from pymoo.operators.survival.rank_and_crowding.metrics import (
    calc_crowding_distance as pymoo_crowding,
)

from optimiser.survival import RankAndCrowdingSurvival, crowding_distance


@st.composite
def populations(draw):
    """Objective values, one inequality constraint and a number of survivors. Values on a coarse grid give ties and
    duplicates (in one objective or in all); some individuals are infeasible, some with equal violations."""
    n = draw(st.integers(1, 40))
    M = draw(st.integers(1, 4))
    coarse = draw(st.booleans())
    value = st.integers(0, 4).map(float) if coarse else st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False)
    F = np.array(draw(st.lists(st.lists(value, min_size=M, max_size=M), min_size=n, max_size=n)), dtype=float)
    constrained = draw(st.booleans())
    G = None
    if constrained:  # <= 0 feasible; positive violations on a grid of 0.5, so that some are equal
        G = np.array(draw(st.lists(st.sampled_from([-1.0, 0.0, 0.0, 0.5, 1.0, 1.5]), min_size=n, max_size=n)))
    n_survive = draw(st.integers(1, n))
    seed = draw(st.integers(0, 2**32 - 1))
    return F, G, n_survive, seed


def _run(survival, F, G, n_survive, seed):
    """Survivors (as indices into the population), and the rank and crowding each individual was given."""
    problem = Problem(n_var=1, n_obj=F.shape[1], n_ieq_constr=0 if G is None else 1)
    pop = Population.new("F", F) if G is None else Population.new("F", F, "G", G[:, None])
    index = {ind: i for i, ind in enumerate(pop)}
    survivors = survival.do(problem, pop, n_survive=n_survive, random_state=np.random.default_rng(seed))
    rank = [ind.get("rank") for ind in pop]
    crowding = [ind.get("crowding") for ind in pop]
    return [index[ind] for ind in survivors], rank, crowding


@settings(max_examples=400, deadline=None)
@given(populations())
def test_same_as_pymoo_with_the_same_random_state(case):
    """Reference library pymoo RankAndCrowding("cd"): given the same random state (which breaks ties in crowding
    within the front that is split), the same survivors in the same order, and the same rank and crowding on every
    individual (unset on the same ones); the crowding values agree to the last bit."""
    F, G, n_survive, seed = case
    ours = _run(RankAndCrowdingSurvival(), F, G, n_survive, seed)
    ref = _run(PymooRankAndCrowding(crowding_func="cd"), F, G, n_survive, seed)
    assert ours[0] == ref[0]
    assert ours[1] == ref[1]
    assert [c is None for c in ours[2]] == [c is None for c in ref[2]]
    a = np.array([np.nan if c is None else c for c in ours[2]], dtype=float)
    b = np.array([np.nan if c is None else c for c in ref[2]], dtype=float)
    np.testing.assert_array_equal(a, b)  # equal_nan: the unset ones; inf at the ends of the fronts


@settings(max_examples=200, deadline=None)
@given(populations(), st.integers(0, 2**32 - 1))
def test_ties_broken_differently_still_equivalent(case, other_seed):
    """Reference library pymoo RankAndCrowding("cd") under another random state: where the survivors differ they
    differ only among individuals of equal crowding in the front that was split, so the survivors' ranks and
    crowding values (as multisets) are pymoo's, and the individuals of the fronts that fit survive in both."""
    F, G, n_survive, seed = case
    ours, rank, crowding = _run(RankAndCrowdingSurvival(), F, G, n_survive, seed)
    ref, ref_rank, ref_crowding = _run(PymooRankAndCrowding(crowding_func="cd"), F, G, n_survive, other_seed)
    assert len(ours) == len(ref) == n_survive
    assert rank == ref_rank
    assert sorted((rank[i] is None, rank[i] or 0, crowding[i] or 0.0) for i in ours) == \
        sorted((ref_rank[i] is None, ref_rank[i] or 0, ref_crowding[i] or 0.0) for i in ref)
    differ = set(ours) ^ set(ref)
    if differ:
        last = {rank[i] for i in differ}
        assert len(last) == 1  # all in one front: the split one (or all infeasible, where rank is unset)
        if last != {None}:
            assert len({crowding[i] for i in differ}) == 1  # and all equally crowded


@pytest.mark.filterwarnings("ignore:invalid value encountered:RuntimeWarning")  # pymoo's, on inf - inf
@settings(max_examples=400, deadline=None)
@given(st.integers(3, 30), st.integers(1, 5), st.sampled_from(["coarse", "fine", "infinite"]), st.data())
def test_crowding_distance_as_pymoo(n, M, kind, data):
    """Reference library pymoo's calc_crowding_distance (the "cd" measure) on fronts with and without ties, and with
    infinite objective values: identical values, inf included."""
    value = {"coarse": st.integers(0, 3).map(float),
             "fine": st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False),
             "infinite": st.sampled_from([-np.inf, -1.0, 0.0, 2.0, np.inf])}[kind]
    F = np.array(data.draw(st.lists(st.lists(value, min_size=M, max_size=M), min_size=n, max_size=n)), dtype=float)
    np.testing.assert_array_equal(crowding_distance(F), pymoo_crowding(F))


@pytest.mark.parametrize("F, expected", [
    # computed by hand from Deb et al. (2002), section III-B, divided by M = 2 as pymoo does
    ([[0.0, 4.0], [1.0, 2.0], [3.0, 1.0], [4.0, 0.0]], [np.inf, (3 / 4 + 3 / 4) / 2, (3 / 4 + 2 / 4) / 2, np.inf]),
    ([[0.0, 1.0], [1.0, 0.0]], [np.inf, np.inf]),  # two points: both ends
    ([[1.0, 1.0], [1.0, 1.0], [1.0, 1.0]], [0.0, 0.0, 0.0]),  # all equal: no objective carries information
])
def test_crowding_distance_by_hand(F, expected):
    """Hand-worked crowding distances (Deb et al. 2002, crowding-distance-assignment)."""
    np.testing.assert_allclose(crowding_distance(np.array(F)), expected)


def test_constraint_handling_feasible_first():
    """pymoo's constraint handling, common practice in its survivals: all feasible individuals before any infeasible,
    and infeasible ones by increasing violation; the infeasible get no rank."""
    F = np.array([[0.0, 0.0], [1.0, 1.0], [2.0, 0.5], [0.5, 2.0], [3.0, 3.0]])
    G = np.array([2.0, 0.5, 0.0, -1.0, 1.0])  # individuals 2, 3 feasible; violations 0.5 (1) < 1.0 (4) < 2.0 (0)
    survivors, rank, _ = _run(RankAndCrowdingSurvival(), F, G, 4, 0)
    assert survivors == [2, 3, 1, 4]
    assert rank == [None, None, 0, 0, None]
