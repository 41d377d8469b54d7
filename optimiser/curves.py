"""The batched solves of titration curves: one equilibrium call per chemical system for many titrations, the grids
of the end-point regions (solved finer until the step there is small against the titre), and the pH drift with the
pH left free. :mod:`optimiser.titration` sets the titrations up and reads them."""
from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from . import readout
from .constants import H
from .equilibrium import Equilibrium, solve
from .medium import background_M

if TYPE_CHECKING:  # pragma: no cover
    from .method import Method
    from .strategies.base import Plan

Array = NDArray[np.float64]
TITRANT_PROTONS = 2  # titrant added as the disodium salt Na2H2Y (common practice)
# The computed ionic strength's stopping rule on a curve: a relative change of 1e-5 keeps every species within
# 1.5e-5 relative (6e-6 log units) of the solver's default 1e-8 (measured on hardness curves at pH 5, 10 and 12.5),
# and the search then needs 5 % more Newton iterations than at a fixed ionic strength instead of 50 % more.
CURVE_I_TOL = 1e-5
# The end-point region is solved again, finer, while its step exceeds this share of the titre, for at most
# FINER_ROUNDS rounds (each about n_points / 4 times finer). Measured: with 0.2 % the end point of a 41-point curve is
# within 0.003 % of the titre of a 641-point one (sulfosalicylic acid with iron, xylenol orange with zinc, EBT with
# magnesium); with 1 % it was off by up to 0.3 %, and by 1 % on the cement digest example (iron beside much calcium).
FINER_STEP = 0.002
FINER_ROUNDS = 3


def solve_batch(plans: Sequence[Plan], grids: Sequence[Array | None], starts: Sequence[Equilibrium | None] | None = None
                 ) -> list[Equilibrium | None]:
    """Solve the grids of many titrations, one equilibrium call per chemical system.

    The ionic strength is computed at each point; a curve's first point starts its iteration from the medium's
    estimate, or, where ``starts`` gives a solved coarse curve, from that curve's ionic strength at the same volume."""
    out: list[Equilibrium | None] = [None] * len(plans)
    groups: dict[int, list[int]] = {}
    for k, (p, g) in enumerate(zip(plans, grids)):
        if g is not None and len(g):
            groups.setdefault(id(p.system), []).append(k)
    for ks in groups.values():
        system = plans[ks[0]].system
        blocks = [plans[k].totals(grids[k]) for k in ks]
        T = np.concatenate(blocks)
        pH = np.concatenate([np.full(len(grids[k]), plans[k].method.pH) for k in ks])
        bg = np.concatenate([background_M(plans[k], Tk) for k, Tk in zip(ks, blocks, strict=True)])
        I0 = np.concatenate([start_I(plans[k], grids[k], starts[k] if starts is not None else None) for k in ks])
        Tc = np.concatenate([np.full(len(grids[k]), plans[k].sample.temperature_C) for k in ks])
        labels = PointLabels([(plans[k].method, grids[k]) for k in ks])
        restart = np.concatenate([np.arange(len(grids[k])) == 0 for k in ks])  # continuation within each curve
        eq = solve(system, T, pH=pH, ionic_strength_M=None, background_ionic_strength_M=bg, temperature_C=Tc,
                   point_labels=labels, restart=restart, I_tol=CURVE_I_TOL, ionic_strength_start_M=I0)
        start = 0
        for k in ks:
            n = len(grids[k])
            out[k] = slice_of(eq, slice(start, start + n))
            start += n
    return out


@dataclass
class Read:
    """One titration's curve as the rounds of batched solves leave it (:func:`read_rounds`).

    Attributes
    ----------
    plan : Plan
    coarse : Equilibrium
        The coarse curve, on ``plan.V``.
    ref : float
        The strategy's reference for the indicator's turned fraction, from the coarse curve.
    grid : array or None
        The refined end-point region (with the finer rounds merged in) [mL]; None where the coarse curve shows no
        end point.
    fine : Equilibrium or None
        Solved on ``grid``.
    V_ep : float or None
        The end point read on ``grid`` [mL]; None where there is none.
    probed : Equilibrium
        Point 0 the equivalence (``plan.V_eq_ref``), point 1 the end point where there is one.
    """

    plan: Plan
    coarse: Equilibrium | None = None
    ref: float = 0.0
    grid: Array | None = None
    fine: Equilibrium | None = None
    V_ep: float | None = None
    probed: Equilibrium | None = None
    rounds: int = 0  # finer rounds solved
    wants: Array | None = None  # the grid of its next solve (None: nothing more before its probes)

    def __post_init__(self) -> None:
        self.wants = self.plan.V

    def take(self, eq: Equilibrium | None) -> None:
        """The solve of ``wants`` done: keep it and set the next grid (the finer rounds, see :func:`finer_grid`)."""
        p = self.plan
        if self.coarse is None:
            self.coarse, self.ref = eq, p.method.strategy.reference(p, eq)
            self.grid = self.wants = fine_grid(p, eq, self.ref)
            return
        if self.fine is None:
            self.fine = eq
        else:  # a finer round, merged into the refined region
            both = np.concatenate([self.grid, self.wants])
            order = np.argsort(both, kind="stable")
            self.grid, self.fine = both[order], merge(self.fine, eq, order)
            self.rounds += 1
        self.V_ep = end_point(p, self.grid, self.fine, self.ref)
        finer = finer_grid(p, self.grid, self.V_ep) if self.rounds < FINER_ROUNDS else None
        self.wants = finer if finer is not None and len(finer) else None

    def probes(self) -> Array:
        return np.array([self.plan.V_eq_ref] + ([self.V_ep] if self.V_ep is not None else []))


def read_rounds(live: Sequence[Plan], then: Callable[[Plan], Plan] | None = None) -> tuple[list[Read], list[Read | None]]:
    """Every titration's curve read in rounds, each round one batched solve (:func:`solve_batch`): the coarse curve,
    the end-point region, finer rounds where it is still coarse against the titre (at most :data:`FINER_ROUNDS`), and
    at last, all in one solve, the probes at the equivalence and end points.

    ``then`` sets up a second titration for each one whose coarse curve shows an end point (its primary standard);
    it joins one round later and is read the same way. Those whose titration shows none get None: with no end point
    there is nothing to standardise, so their standard is neither set up nor solved.

    Returns
    -------
    reads, seconds
        One :class:`Read` per plan of ``live``, in order; its second's (or None) where ``then`` is given, else [].
    """
    reads = [Read(p) for p in live]
    seconds: list[Read | None] = []
    every = list(reads)
    while True:
        todo = [r for r in every if r.wants is not None]
        probing = not todo
        if probing:  # every curve read: the probes of all of them together
            todo = every
        solved = solve_batch([r.plan for r in todo], [r.probes() if probing else r.wants for r in todo],
                             [r.coarse for r in todo])
        if probing:
            for r, eq in zip(todo, solved, strict=True):
                r.probed = eq
            return reads, seconds
        for r, eq in zip(todo, solved, strict=True):
            r.take(eq)
        if then is not None and not seconds:
            seconds = [Read(then(r.plan)) if r.grid is not None else None for r in reads]
            every += [r for r in seconds if r is not None]


class PointLabels(Sequence):
    """The names of a batched solve's points for its error messages, worded only when one is asked for (a search
    solves hundreds of thousands of points and words none of them)."""

    def __init__(self, parts: list[tuple[Method, Array]]):
        self.parts = parts
        self.ends = np.cumsum([len(g) for _, g in parts])

    def __len__(self) -> int:
        return int(self.ends[-1]) if len(self.ends) else 0

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(len(self)))]
        i = int(i) + (len(self) if i < 0 else 0)
        k = int(np.searchsorted(self.ends, i, side="right"))
        m, grid = self.parts[k]
        v = grid[i - (int(self.ends[k - 1]) if k else 0)]
        return f"{m.strategy.volume_name} volume {v:.4f} mL (pH {m.pH:.2f}, {m.titrant}, {m.indicator})"


def start_I(p: Plan, grid: Array, coarse: Equilibrium | None) -> Array:
    """Where the computed ionic strength starts on a grid: the coarse curve's at the same volumes, else the
    medium's estimate for the aliquot as prepared [mol/L]."""
    if coarse is None:
        return np.full(len(grid), p.medium.ionic_strength_M)
    return np.interp(grid, p.V, coarse.ionic_strength_M)


def slice_of(eq: Equilibrium, sl: slice) -> Equilibrium:
    return Equilibrium(system=eq.system, c=eq.c[sl], solid_amount=eq.solid_amount[sl], saturation_index=eq.saturation_index[sl],
                       ionic_strength_M=eq.ionic_strength_M[sl], pH=eq.pH[sl], totals=eq.totals[sl],
                       max_residual=eq.max_residual, iterations=eq.iterations)


def end_point(p: Plan, grid: Array, eq: Equilibrium, ref: float) -> float | None:
    """The end point read on a solved grid: where the indicator has turned to the method's reading level [mL]
    (None where it never does)."""
    return readout.turned_crossing(p.method, grid, p.method.strategy.turned(p, eq, ref), readout.read_levels(p.method, ref)[0])


def fine_grid(p: Plan, eq: Equilibrium, ref: float) -> Array | None:
    """Points around the coarse end point, for the refined solve (None where the indicator never turns)."""
    if readout.shows_no_change(p.method, ref):
        return None
    x = end_point(p, p.V, eq, ref)
    if x is None:
        return None
    step = p.V[1] - p.V[0]
    lo, hi = max(0.0, x - 4 * step), min(p.V_hi * 1.2, x + 4 * step)
    # n points over four coarse steps each side, and n more over the coarse step each side, where the end point lies
    # (points are cheap beside a second solve: one solve call costs about as much as a hundred points)
    g = np.union1d(np.linspace(lo, hi, p.n_points), np.linspace(max(lo, x - step), min(hi, x + step), p.n_points))
    return g[np.r_[True, np.diff(g) > 1e-9 * (hi - lo)]]  # the two grids share some points (to rounding)


def finer_grid(p: Plan, grid: Array | None, x: float | None) -> Array | None:
    """Points within two steps of ``x``, the end point read on the refined grid, where that grid's step there is more
    than :data:`FINER_STEP` of the titre (None where it is not, or where no end point is read).

    The coarse curve spans every metal that binds the titrant; where the analyte is a small part of them (iron
    beside much calcium) the first refined region is still too coarse to read an end point or its colour change."""
    if grid is None or x is None or x <= 0:
        return None
    i = int(np.clip(np.searchsorted(grid, x), 1, len(grid) - 1))
    h = grid[i] - grid[i - 1]
    if h <= FINER_STEP * x:
        return None
    g = np.linspace(max(grid[0], x - 2 * h), min(grid[-1], x + 2 * h), p.n_points)
    return g[np.min(np.abs(g[:, None] - grid[None, :]), axis=1) > 1e-9 * max(x, 1.0)]


def merge(a: Equilibrium, b: Equilibrium, order: Array) -> Equilibrium:
    def cat(x, y):
        return np.concatenate([x, y])[order]
    return Equilibrium(system=a.system, c=cat(a.c, b.c), solid_amount=cat(a.solid_amount, b.solid_amount),
                       saturation_index=cat(a.saturation_index, b.saturation_index),
                       ionic_strength_M=cat(a.ionic_strength_M, b.ionic_strength_M), pH=cat(a.pH, b.pH),
                       totals=cat(a.totals, b.totals), max_residual=max(a.max_residual, b.max_residual),
                       iterations=a.iterations + b.iterations)


def pH_drifts(live: Sequence[Plan], coarse: Sequence[Equilibrium], V_eps: Sequence[float | None]) -> list[float | None]:
    """pH change from the start to the end point with the pH free (the buffer's capacity against the titrant's
    protons), for every titration whose strategy reads the analyte's release; one solve per chemical system.

    The proton total that gives the set pH at the start is read from the coarse curve's first point (V = 0)."""
    out: list[float | None] = [None] * len(live)
    groups: dict[int, list[int]] = {}
    for k, (p, v) in enumerate(zip(live, V_eps)):
        if v is not None and p.method.strategy.reads_release:
            groups.setdefault(id(p.system), []).append(k)
    for ks in groups.values():
        system = live[ks[0]].system
        iH = system.index(H)
        blocks = []
        for k in ks:
            p = live[k]
            V = np.array([0.0, V_eps[k]])
            T = p.totals(V)
            T_H0 = float(coarse[k].c[0] @ system.nu[:, iH])
            V0 = p.V_start
            T[:, iH] = T_H0 * V0 / (V0 + V) + TITRANT_PROTONS * p.method.titrant_conc_M * V / (V0 + V)
            blocks.append(T)
        bg = np.concatenate([background_M(live[k], T) for k, T in zip(ks, blocks, strict=True)])
        Tc = np.concatenate([np.full(2, live[k].sample.temperature_C) for k in ks])
        restart = np.tile([True, False], len(ks))
        I0 = np.concatenate([start_I(live[k], np.array([0.0, V_eps[k]]), coarse[k]) for k in ks])
        free = solve(system, np.concatenate(blocks), pH=None, ionic_strength_M=None, background_ionic_strength_M=bg,
                     temperature_C=Tc, restart=restart, I_tol=CURVE_I_TOL, ionic_strength_start_M=I0)
        for n, k in enumerate(ks):
            out[k] = float(free.pH[2 * n + 1] - free.pH[2 * n])
    return out
