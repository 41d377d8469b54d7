"""One Newton solve of the kernel at one point (numba): the active set of solids, the KKT step, and its length
(cap, ratio test, Armijo backtracking on f); see :mod:`optimiser.kernel` for the method."""
from __future__ import annotations

import numpy as np
from numba import njit

from .kernel_linalg import _gauss, _solid_amounts
from .kernel_model import _concentrations, _delta_f, _jacobian, _residuals, _saturation_indices
from .kernel_types import CAP, LOG_MIN


# ---------------------------------------------------------------------------------------------------------
# the active set


@njit(cache=True, inline="always")
def _balance_error(nu_s, sol, bal, pt, opts):
    """Mass balances with the current solid amounts: (largest relative residual, all closed).

    The residual is relative to the total (the proton balance, an excess, and a zero total relative to the
    terms that enter the balance); the balances are closed when each is within ``tol`` of everything that
    enters it, the solid amounts included (a solid with a negative amount can hold a balance far above its
    total, where rounding alone exceeds the tolerance).
    """
    s, R, scale, T, act = sol.s, bal.R, bal.scale, pt.totals, pt.present
    free_col, tol = opts.free_col, opts.tol
    worst = 0.0
    closed = True
    for i in range(len(T)):
        if act[i]:
            rt = R[i]
            sc = scale[i]
            for p in range(len(s)):
                rt += s[p] * nu_s[p, i]
                sc += abs(s[p] * nu_s[p, i])
            worst = max(worst, abs(rt / (T[i] if T[i] > 0 and i != free_col else sc)))
            closed = closed and abs(rt) <= tol * sc
    return worst, closed


@njit(cache=True, inline="always")
def _solid_check(W, SI):
    """(The most supersaturated solid not in the set or -1, whether every solid is consistent with the set)."""
    over = -1
    consistent = True
    for p in range(len(W)):
        if (W[p] and abs(SI[p]) > 1e-9) or (not W[p] and SI[p] > 1e-9):
            consistent = False
        if not W[p] and SI[p] > 1e-9 and (over < 0 or SI[p] > SI[over]):
            over = p
    return over, consistent


@njit(cache=True, inline="always")
def _dissolve_negative(W, s):
    """The active solid with the most negative amount leaves the set (it dissolves); False if there is none."""
    jneg = -1
    for p in range(len(W)):
        if W[p] and s[p] < -1e-16 * max(1.0, abs(s[p])):
            if jneg < 0 or s[p] < s[jneg]:
                jneg = p
    if jneg < 0:
        return False
    W[jneg] = False
    s[jneg] = 0.0
    return True


# ---------------------------------------------------------------------------------------------------------
# the step


@njit(cache=True)
def _kkt(nu_s, act, sol, bal, kkt):
    """The KKT system of the components present and the active solids in kkt.M[:N, :N] and kkt.rhs[:N], mass-balance
    rows divided by bal.scale: the components present in their order, then the active solids in theirs (N, returned).

    An absent component and an inactive solid have no row or column: in the full system each would be an identity
    row and a zero column, which change nothing of the step (Gaussian elimination never pivots on them, and they
    add nothing to the other rows), so the step is the same to the last bit.
    """
    J, R, scale, M, rhs, W, SI = kkt.J, bal.R, bal.scale, kkt.M, kkt.rhs, sol.W, sol.SI
    n = len(R)
    P = nu_s.shape[0]
    N = 0
    for i in range(n):
        if act[i]:
            N += 1
    m = N
    for p in range(P):
        if W[p]:
            N += 1
    M[:N, :N] = 0.0
    ic = 0
    for i in range(n):
        if act[i]:
            jc = 0
            for j in range(n):
                if act[j]:
                    M[ic, jc] = J[i, j] / scale[i]
                    jc += 1
            rhs[ic] = -R[i] / scale[i]
            ic += 1
    q = m
    for p in range(P):
        if W[p]:
            ic = 0
            for i in range(n):
                if act[i]:
                    M[ic, q] = nu_s[p, i] / scale[i]
                    M[q, ic] = nu_s[p, i]
                    ic += 1
            rhs[q] = -SI[p]
            q += 1
    return N


@njit(cache=True, inline="always")
def _newton_direction(nu_s, act, sol, bal, kkt):
    """The Newton step kkt.dx from the KKT system of the active set (least squares where it is singular); zero for
    an absent component."""
    M, rhs, dx = kkt.M, kkt.rhs, kkt.dx
    N = _kkt(nu_s, act, sol, bal, kkt)
    if not _gauss(M, rhs, N):  # singular (a degenerate active set): least squares
        _kkt(nu_s, act, sol, bal, kkt)
        sol_ = np.linalg.lstsq(M[:N, :N], rhs[:N])[0]
        rhs[:N] = sol_
    ic = 0
    for i in range(len(dx)):
        if act[i]:
            dx[i] = rhs[ic]
            ic += 1
        else:
            dx[i] = 0.0


@njit(cache=True, inline="always")
def _step_cap(dx):
    """The largest step length along dx that moves no log10 concentration by more than CAP (at most 1)."""
    big = 0.0
    for i in range(len(dx)):
        big = max(big, abs(dx[i]))
    return CAP / big if big > CAP else 1.0


@njit(cache=True, inline="always")
def _ratio_test(nu_s, W, SI, dx, alpha):
    """The step length, at most alpha, at which the first inactive solid saturates: (alpha, that solid or -1)."""
    block = -1
    for p in range(len(W)):
        if not W[p]:
            rate = 0.0
            for i in range(len(dx)):
                rate += dx[i] * nu_s[p, i]
            if rate > 1e-14:
                lim = max(-SI[p], 0.0) / rate
                if lim < alpha:
                    alpha = lim
                    block = p
    return alpha, block


@njit(cache=True, inline="always")
def _slope(R, dx, act):
    """The directional derivative of f along dx, R . dx over the components present."""
    slope = 0.0
    for i in range(len(dx)):
        if act[i]:
            slope += R[i] * dx[i]
    return slope


@njit(cache=True, inline="always")
def _armijo(nu, pt, c, e, dx, alpha, slope):
    """Backtracking from alpha (halving, at most 40 times) until f decreases enough (Armijo, 1e-4).

    Returns (accepted, alpha, whether it was halved).
    """
    for t in range(40):
        if _delta_f(nu, pt, c, e, dx, alpha) <= 1e-4 * alpha * slope:
            return True, alpha, t > 0
        alpha *= 0.5
    return False, alpha, True


@njit(cache=True, inline="always")
def _advance_concentrations(c, e):
    """c at the accepted point from the line search's terms, c + c e; False where one must be computed afresh."""
    ready = True
    for sp in range(len(c)):
        cn = c[sp] + c[sp] * e[sp]
        if not cn <= 1e300:  # past the cap (or not finite): computed afresh
            ready = False
        c[sp] = cn
    return ready


# ---------------------------------------------------------------------------------------------------------
# the iterations


@njit(cache=True, inline="always")
def _evaluate(nu, pt, opts, state, work, c_ready):
    """The state at state.x and the active set's update: (converged, largest relative mass-balance residual).

    The concentrations (unless ``c_ready``), residuals and saturation indices, the solid amounts (least
    squares), then the convergence checks: a supersaturated solid joins the set once the balances close, and
    where everything else is consistent the solid with the most negative amount leaves it (it dissolves).
    """
    nu_s, x, c, act = nu.solid, state.x, state.c, pt.present
    sol, bal = work.sol, work.bal
    W, SI = sol.W, sol.SI
    if not c_ready:
        _concentrations(nu, state.K, x, act, c)
    _residuals(nu, c, pt.totals, act, bal.R, bal.scale)
    _saturation_indices(nu_s, state.Ks, x, SI)
    # solid amounts from the mass balances (weighted least squares over the active solids): more
    # accurate than the KKT multipliers, which carry the conditioning of the scaled system
    _solid_amounts(nu_s, sol, bal, work.scratch)
    worst, closed = _balance_error(nu_s, sol, bal, pt, opts)
    over, consistent = _solid_check(W, SI)
    if worst <= opts.tol and over >= 0:  # balances closed with a solid supersaturated: it precipitates
        W[over] = True
    return closed and consistent and not _dissolve_negative(W, sol.s) and worst <= opts.tol, worst


@njit(cache=True, inline="always")
def _step_length(nu, pt, c, work, worst):
    """The length of the step along work.kkt.dx: (alpha, the solid that saturates there or -1, whether c holds
    the concentrations at the new point).

    Capped (:func:`_step_cap`), limited by the inactive solids (:func:`_ratio_test`), and outside the Newton
    region (relative residual ``worst`` above 1e-5, where f's rounding would fool Armijo) backtracked on f, or
    the capped Newton step where backtracking is exhausted.
    """
    dx, e = work.kkt.dx, work.scratch.e
    cap = _step_cap(dx)
    alpha, block = _ratio_test(nu.solid, work.sol.W, work.sol.SI, dx, cap)
    slope = _slope(work.bal.R, dx, pt.present)
    c_ready = False
    if worst >= 1e-5 and slope < 0:
        accepted, alpha, halved = _armijo(nu, pt, c, e, dx, alpha, slope)
        if halved:
            block = -1
        if accepted:  # the concentrations at the new point follow from the line search's terms
            c_ready = _advance_concentrations(c, e)
        else:  # backtracking exhausted (rounding in f): take the capped Newton step
            alpha = cap
    return alpha, block, c_ready


@njit(cache=True, inline="always")
def _move(x, dx, alpha, act):
    """x + alpha dx over the components present (LOG_MIN for the others), in place."""
    for i in range(len(x)):
        x[i] = x[i] + alpha * dx[i] if act[i] else LOG_MIN


@njit(cache=True)
def _newton(nu, opts, pt, state, work, c_ready):
    """Newton iterations at one point from state.x (active set work.sol.W, amounts work.sol.s), in place.

    Each iteration: the state and the convergence checks, with a solid joining or leaving the set
    (:func:`_evaluate`), the KKT step of the active set (:func:`_newton_direction`), then its length
    (:func:`_step_length`); a solid that saturates within the step joins the set. ``c_ready`` says that
    state.c already holds the concentrations at state.x. Returns (converged, iterations, largest relative
    mass-balance residual).
    """
    x, act, W, kkt = state.x, pt.present, work.sol.W, work.kkt
    worst = np.inf
    it = 0
    while it < opts.max_iter:
        it += 1
        converged, worst = _evaluate(nu, pt, opts, state, work, c_ready)
        if converged:
            return True, it, worst
        _jacobian(nu, state.c, kkt.J)
        _newton_direction(nu.solid, act, work.sol, work.bal, kkt)
        alpha, block, c_ready = _step_length(nu, pt, state.c, work, worst)
        _move(x, kkt.dx, alpha, act)
        if block >= 0:
            W[block] = True
    return False, it, worst
