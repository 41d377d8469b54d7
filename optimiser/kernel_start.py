"""Starting points of the kernel (numba): continuation along the batch, positive continued fractions, a
feasible point for the solids, and the ionic strength's start and chord iteration (see :mod:`optimiser.kernel`).
"""
from __future__ import annotations

import numpy as np
from numba import njit

from .kernel_model import _balances, _concentrations
from .kernel_types import CONVERGED, GUESS_LIMIT, LOG_MIN, PCF_FRESH, PCF_GUESS, Chord


# ---------------------------------------------------------------------------------------------------------
# the concentrations


@njit(cache=True, inline="always")
def _log_total(T, i, free_col):
    """The start of component i from its total alone: log10 T_i, or -7 (pH 7, or nothing to go by)."""
    return np.log10(T[i]) if T[i] > 0 and i != free_col else -7.0


@njit(cache=True)
def _pcf(nu, pt, state, work, sweeps):
    """Positive continued fractions on state.x: x_i += (log T_i - log S_i) / max nu_si (a robust way to a start)."""
    x, c, S_pos, S_neg, T, act, nmax = state.x, state.c, work.S_pos, work.S_neg, pt.totals, pt.present, nu.nmax
    for _ in range(sweeps):
        _concentrations(nu, state.K, x, act, c)
        _balances(nu, c, S_pos, S_neg)
        for i in range(len(x)):
            target = T[i] + S_neg[i]
            if act[i] and target > 0 and S_pos[i] > 0:
                step = (np.log10(target) - np.log10(S_pos[i])) / nmax[i]
                x[i] += min(max(step, -8.0), 8.0)


@njit(cache=True, inline="always")
def _continuation_depth(chain, status, b):
    """How many previous solutions point b may be extrapolated from (0: it starts from its totals)."""
    if not (chain[b] and b > 0 and status[b - 1] == CONVERGED):
        return 0
    tries = 1
    while tries < 3 and b > tries and chain[b - tries] and status[b - tries - 1] == CONVERGED:
        tries += 1
    return tries


@njit(cache=True, inline="always")
def _extrapolate(pt, free_col, x_prev, order, x):
    """x from the solutions x_prev of the previous points: constant (order 0), linear (1) or quadratic (2).

    A component absent from the previous point starts from its total. Returns whether any did.
    """
    b, act = pt.index, pt.present
    filled = False
    for i in range(len(x)):
        if not act[i]:
            x[i] = LOG_MIN
            continue
        x1 = x_prev[b - 1, i]
        if x1 <= LOG_MIN + 1.0:  # present here, absent in the previous point
            x[i] = _log_total(pt.totals, i, free_col)
            filled = True
            continue
        x[i] = x1
        if order >= 1 and x_prev[b - 2, i] > LOG_MIN + 1.0:
            if order == 2 and x_prev[b - 3, i] > LOG_MIN + 1.0:
                x[i] = 3.0 * x1 - 3.0 * x_prev[b - 2, i] + x_prev[b - 3, i]
            else:
                x[i] = 2.0 * x1 - x_prev[b - 2, i]
    return filled


@njit(cache=True, inline="always")
def _guess_closes(T, act, S_pos):
    """Whether a guess whose balance sums are S_pos closes every mass balance within GUESS_LIMIT (relative)."""
    for i in range(len(T)):
        if act[i] and T[i] > 0 and abs(S_pos[i] - T[i]) > GUESS_LIMIT * T[i]:
            return False
    return True


@njit(cache=True, inline="always")
def _start_point(nu, free_col, pt, state, work, hist):
    """The starting point of the solve, in state.x.

    The previous points' solutions extrapolated along the batch (continuation: quadratic, then linear,
    then constant, as far as the run goes back), each kept only if it closes every mass balance within a
    factor of about 2; else the continued fractions from the totals. Returns whether state.c holds the
    concentrations at state.x (a guess kept).
    """
    x, c, act, T, S_pos = state.x, state.c, pt.present, pt.totals, work.S_pos
    tries = _continuation_depth(hist.chain, hist.status, pt.index)
    kept = False
    for t in range(tries):
        if _extrapolate(pt, free_col, hist.x, tries - 1 - t, x):
            _pcf(nu, pt, state, work, PCF_GUESS)
        _concentrations(nu, state.K, x, act, c)
        _balances(nu, c, S_pos, work.S_neg)
        kept = _guess_closes(T, act, S_pos)
        if kept:
            break
    if not kept:
        for i in range(len(x)):
            x[i] = _log_total(T, i, free_col) if act[i] else LOG_MIN
        _pcf(nu, pt, state, work, PCF_FRESH)
    for i in range(len(x)):
        if not act[i]:
            x[i] = LOG_MIN
    return kept


@njit(cache=True)
def _feasible(x, nu_s, Ks, act):
    """Lower metal free concentrations until no solid is supersaturated (a feasible start for the active set).

    Returns whether x changed.
    """
    P, n = nu_s.shape
    changed = False
    for _ in range(10):
        over_any = False
        for p in range(P):
            si = Ks[p]
            for i in range(n):
                si += nu_s[p, i] * x[i]
            if si > 0:
                over_any = True
                changed = True
                for j in range(n):  # the solid's first metal (the first component with a positive coefficient)
                    if nu_s[p, j] > 0:
                        x[j] -= (si + 1e-6) / nu_s[p, j]
                        break
        if not over_any:
            break
    for i in range(n):
        if not act[i]:
            x[i] = LOG_MIN
    return changed


# ---------------------------------------------------------------------------------------------------------
# the ionic strength


@njit(cache=True, inline="always")
def _start_ionic_strength(hist, auto_I, b):
    """The ionic strength point b starts from [mol/L], and whether it continues a run.

    With the ionic strength computed, a point that continues a run starts from the previous points' values
    extrapolated like the concentrations (linear or quadratic, where positive); else from its input value.
    """
    I_out, chain, status = hist.I, hist.chain, hist.status
    I = hist.I_in[b]
    if not (auto_I and chain[b] and b > 0 and status[b - 1] == CONVERGED):
        return I, False
    I = I_out[b - 1]
    if b > 1 and chain[b - 1] and status[b - 2] == CONVERGED:
        I_lin = 2.0 * I - I_out[b - 2]
        if b > 2 and chain[b - 2] and status[b - 3] == CONVERGED:
            I_lin = 3.0 * I - 3.0 * I_out[b - 2] + I_out[b - 3]
        if I_lin > 0.0:
            I = I_lin
    return I, True


@njit(cache=True, inline="always")
def _ionic_strength_of(z2, background_I, c):
    """Ionic strength of the species c [mol/L] plus the background's."""
    I = background_I
    for sp in range(len(c)):
        I += 0.5 * z2[sp] * c[sp]
    return I


@njit(cache=True, inline="always")
def _chord_step(ch, h, I_new, first):
    """The next ionic strength after a pass that reached g(I) = I_new, h = I_new - I: a chord step on
    h(I) = g(I) - I = 0, with the slope from the last two passes where h stood clear of the solve's rounding
    (plain substitution, slope -1, oscillates where the ionic strength is large); returns the new Chord."""
    I, slope = ch.I, ch.slope
    if not first and abs(ch.h_prev) > 1e-8 * I_new and abs(h) > 1e-8 * I_new and I != ch.I_prev:
        slope_new = (h - ch.h_prev) / (I - ch.I_prev)
        if slope_new < -1e-3:
            slope = slope_new
    I_next = I - h / slope
    return Chord(I_next if 0.0 < I_next < 1e3 else I_new, I, h, slope)
