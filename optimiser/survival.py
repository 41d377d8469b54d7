"""NSGA-II's survival: non-dominated sorting, then the crowding distance within the last front that fits.

The polishing step (:func:`optimiser.search._polish`) needs only this one survival of pymoo's NSGA-II. pymoo's own
``RankAndCrowding`` is not imported because its module loads ``scipy.spatial`` (for crowding measures we do not use),
which cost 0.1-0.2 s of every run. This one gives the same survivors, ranks and crowding distances (checked against
pymoo's ``RankAndCrowding(crowding_func="cd")`` in ``tests/test_survival.py``).
"""
from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray
from pymoo.core.population import Population
from pymoo.core.survival import Survival
from pymoo.util.nds.non_dominated_sorting import NonDominatedSorting
from pymoo.util.randomized_argsort import randomized_argsort

__all__ = ["RankAndCrowdingSurvival", "crowding_distance"]


def crowding_distance(F: NDArray[np.float64]) -> NDArray[np.float64]:
    r"""The crowding distance of each point of one front (Deb et al. 2002, section III-B).

    For each objective :math:`m` the points are sorted by :math:`f_m`; the two ends get an infinite distance, and
    every other point :math:`i` adds the gap between its neighbours, scaled by the objective's range:

    .. math:: d_i = \frac{1}{M} \sum_{m=1}^{M} \frac{f_m^{(i+1)} - f_m^{(i-1)}}{f_m^{\max} - f_m^{\min}}

    Two conventions follow pymoo's ``calc_crowding_distance`` so that both give the same numbers: the sum is divided
    by the number of objectives :math:`M` (a common factor; the order is the paper's), and an objective whose values
    are all equal adds nothing to any point, its ends included. Ties are sorted stably (by position in ``F``), so of
    equal points at an end, the first is the end. A front of at most two points is all ends. The gap is added as
    its two halves, each scaled (as pymoo does), so that the values agree to the last bit.

    Parameters
    ----------
    F : ndarray, shape (n, M)
        The objective values of the front's points [the objectives' own units].

    Returns
    -------
    ndarray, shape (n,)
        The crowding distance of each point [dimensionless; ``inf`` at the ends].

    References
    ----------
    K. Deb, A. Pratap, S. Agarwal, T. Meyarivan, "A fast and elitist multiobjective genetic algorithm: NSGA-II",
    IEEE Trans. Evol. Comput. 6(2) (2002) 182-197, doi:10.1109/4235.996017 (crowding-distance-assignment).

    Examples
    --------
    >>> crowding_distance(np.array([[0.0, 4.0], [1.0, 2.0], [3.0, 1.0], [4.0, 0.0]]))
    array([  inf, 0.75 , 0.625,   inf])
    """
    F = np.asarray(F, dtype=float)
    n, M = F.shape
    if n <= 2:
        return np.full(n, np.inf)
    d = np.zeros(n)
    for m in range(M):
        order = np.argsort(F[:, m], kind="stable")
        f = F[order, m]
        with np.errstate(invalid="ignore"):  # inf - inf and inf / inf where values are infinite: NaN, see below
            span = f[-1] - f[0]
            if not span > 0:  # all equal (or NaN among them): no information on crowding in this objective
                continue
            below = np.concatenate(([np.inf], np.diff(f))) / span  # gap to the previous point (inf at the low end)
            above = np.concatenate((np.diff(f), [np.inf])) / span  # gap to the next point (inf at the high end)
        # a NaN gap (between infinite values) carries no information either, as in pymoo
        d[order] += np.where(np.isnan(below), 0.0, below) + np.where(np.isnan(above), 0.0, above)
    return d / M


class RankAndCrowdingSurvival(Survival):
    """NSGA-II's elitist survival (Deb et al. 2002, section III-C), with pymoo's handling of constraints.

    The feasible individuals are sorted into non-dominated fronts (pymoo's ``NonDominatedSorting``); whole fronts
    survive while they fit, and of the first front that does not fit, those with the largest crowding distance
    (:func:`crowding_distance`; equal distances in random order, pymoo's ``randomized_argsort``). Each feasible
    individual of the fronts looked at gets ``rank`` (its front, 0 the best) and ``crowding``, as pymoo's
    ``RankAndCrowding(crowding_func="cd")`` sets them. Places left are filled with infeasible individuals in order
    of their constraint violation (pymoo's :class:`~pymoo.core.survival.Survival` does this split).

    References
    ----------
    K. Deb, A. Pratap, S. Agarwal, T. Meyarivan, "A fast and elitist multiobjective genetic algorithm: NSGA-II",
    IEEE Trans. Evol. Comput. 6(2) (2002) 182-197, doi:10.1109/4235.996017.
    """

    def __init__(self) -> None:
        super().__init__(filter_infeasible=True)
        self.nds = NonDominatedSorting()

    def _do(self, problem: Any, pop: Population, *args: Any, random_state: Any = None, n_survive: int | None = None,
            **kwargs: Any) -> Population:
        F = pop.get("F").astype(float, copy=False)
        survivors: list[int] = []
        for k, front in enumerate(self.nds.do(F, n_stop_if_ranked=n_survive)):
            d = crowding_distance(F[front, :])
            if len(survivors) + len(front) > n_survive:  # the front that does not fit: its least crowded
                keep = randomized_argsort(d, order="descending", method="numpy",
                                          random_state=random_state)[:n_survive - len(survivors)]
            else:
                keep = np.arange(len(front))
            for j, i in enumerate(front):
                pop[i].set("rank", k)
                pop[i].set("crowding", d[j])
            survivors.extend(front[keep])
        return pop[survivors]
