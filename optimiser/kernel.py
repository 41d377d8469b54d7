"""The compiled per-point kernel of the equilibrium solve (numba): damped Newton on a convex function.

The mass balances ``sum_s nu_si c_s = T_i`` with ``c_s = 10**(K_s + nu_s . x)`` are the stationarity
conditions of the strictly convex function

.. math:: f(x) = \\sum_s c_s(x) / \\ln 10 - T \\cdot x

whose gradient is the residual ``R = nu^T c - T`` and whose Hessian ``ln10 nu^T diag(c) nu`` is the Jacobian.
A solid is the linear constraint ``SI_p(x) = nu_p . x + Ks_p <= 0``; where it is active (present) its amount
is the constraint's multiplier. Each iteration solves the KKT system of the active set, limits the step by
the inactive solids (ratio test: a solid that becomes saturated joins the set), and backtracks on f
(Armijo, on a change of f computed without cancellation), which makes the method globally convergent. The
solid amounts come from the mass balances by least squares (Householder QR); once the balances have closed,
a solid with a negative amount leaves the set (it dissolves) and a supersaturated one joins it.

Starting points: along a batch given in order (a titration curve, a population), the solutions of the
previous points extrapolated to this one (continuation), kept where they close every mass balance within
GUESS_LIMIT; else a positive-continued-fraction iteration from the totals (Carrayrou, Mose and Behra,
AIChE J. 48 (2002) 894).

Ionic strength: the constants of each point are built here from their values at I = 0 (Davies term and a
fixed pH added); where the ionic strength is computed from the species, each converged solve is followed by
a chord step on I and a new solve from the same solution, until I changes by less than its tolerance.

The kernel is written for numba's ``njit`` on plain arrays, one point at a time; the point loop is
compiled too, so a whole curve is one call. With ``NUMBA_DISABLE_JIT=1`` the same code runs as Python.
"""
from __future__ import annotations

import numpy as np
from numba import njit

LN10 = float(np.log(10.0))
LOG_MIN = -330.0  # log10 of an absent component's free concentration
CAP = 4.0  # largest Newton step in any log10 concentration
PCF_FRESH, PCF_GUESS = 15, 3  # continued-fraction sweeps from the totals, and from a guess
GUESS_LIMIT = 1.0  # largest relative mass-balance error of a guess that is kept
MAX_PASSES = 60  # ionic-strength passes at one point, at most

# status codes returned per point
CONVERGED, NOT_CONVERGED = 0, 1


@njit(cache=True)
def _concentrations(nu_ptr, nu_col, nu_val, K, x, act, c):
    """c_s = 10**min(K_s + nu_s . x, 300); exactly 0 for a species made with an absent component."""
    for s in range(len(K)):
        e = K[s]
        live = True
        for k in range(nu_ptr[s], nu_ptr[s + 1]):
            j = nu_col[k]
            if not act[j]:
                live = False
                break
            e += nu_val[k] * x[j]
        c[s] = np.exp(LN10 * min(e, 300.0)) if live else 0.0


@njit(cache=True)
def _balances(nu_ptr, nu_col, nu_val, c, S_pos, S_neg):
    """Sums of the species over each component: with positive coefficients in S_pos, negative in S_neg."""
    S_pos[:] = 0.0
    S_neg[:] = 0.0
    for s in range(len(c)):
        if c[s] == 0.0:
            continue
        for k in range(nu_ptr[s], nu_ptr[s + 1]):
            v = nu_val[k]
            if v > 0:
                S_pos[nu_col[k]] += v * c[s]
            else:
                S_neg[nu_col[k]] -= v * c[s]


@njit(cache=True)
def _pcf(nu_ptr, nu_col, nu_val, nmax, K, T, x, act, sweeps, c, S_pos, S_neg):
    """Positive continued fractions: x_i += (log T_i - log S_i) / max nu_si (a robust way to a start)."""
    n = len(x)
    for _ in range(sweeps):
        _concentrations(nu_ptr, nu_col, nu_val, K, x, act, c)
        _balances(nu_ptr, nu_col, nu_val, c, S_pos, S_neg)
        for i in range(n):
            target = T[i] + S_neg[i]
            if act[i] and target > 0 and S_pos[i] > 0:
                step = (np.log10(target) - np.log10(S_pos[i])) / nmax[i]
                x[i] += min(max(step, -8.0), 8.0)


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


@njit(cache=True)
def _gauss(M, r, N):
    """Solve M[:N, :N] y = r[:N] in place by Gaussian elimination with partial pivoting; False if singular."""
    for k in range(N):
        p = k
        big = abs(M[k, k])
        for i in range(k + 1, N):
            if abs(M[i, k]) > big:
                big = abs(M[i, k])
                p = i
        if not big > 0.0 or not np.isfinite(big):
            return False
        if p != k:
            for j in range(N):
                M[k, j], M[p, j] = M[p, j], M[k, j]
            r[k], r[p] = r[p], r[k]
        for i in range(k + 1, N):
            f = M[i, k] / M[k, k]
            if f != 0.0:
                for j in range(k + 1, N):
                    M[i, j] -= f * M[k, j]
                r[i] -= f * r[k]
    for k in range(N - 1, -1, -1):
        acc = r[k]
        for j in range(k + 1, N):
            acc -= M[k, j] * r[j]
        r[k] = acc / M[k, k]
    return True


@njit(cache=True)
def _kkt(J, R, scale, SI, nu_s, W, act, M, rhs):
    """The KKT system of the active set of solids, mass-balance rows divided by ``scale``."""
    n = len(R)
    P = nu_s.shape[0]
    M[:, :] = 0.0
    for i in range(n):
        if act[i]:
            for j in range(n):
                if act[j]:
                    M[i, j] = J[i, j] / scale[i]
            rhs[i] = -R[i] / scale[i]
        else:  # an absent component keeps its value: identity row and column
            M[i, i] = 1.0
            rhs[i] = 0.0
    for p in range(P):
        if W[p]:
            for i in range(n):
                if act[i]:
                    M[i, n + p] = nu_s[p, i] / scale[i]
                    M[n + p, i] = nu_s[p, i]
            rhs[n + p] = -SI[p]
        else:
            M[n + p, n + p] = 1.0
            rhs[n + p] = 0.0


@njit(cache=True)
def _solid_amounts(nu_s, W, R, scale, s, A, v, y):
    """Amounts of the active solids that best close the mass balances, in ``s``.

    Weighted least squares, min || (R + nu_s^T s) / scale ||, by Householder QR (the normal equations
    would square a condition number that reaches 1e8 when a trace metal and a major one both precipitate).
    ``A`` (n, P), ``v`` (n,) and ``y`` (n,) are work arrays.
    """
    P, n = nu_s.shape
    s[:] = 0.0
    m = 0
    for p in range(P):  # the columns of the active solids
        if W[p]:
            for i in range(n):
                A[i, m] = nu_s[p, i] / scale[i]
            m += 1
    if m == 0:
        return
    for i in range(n):
        y[i] = -R[i] / scale[i]
    for k in range(min(m, n)):
        norm = 0.0
        for i in range(k, n):
            norm += A[i, k] * A[i, k]
        norm = np.sqrt(norm)
        if norm == 0.0:
            continue
        alpha = -norm if A[k, k] >= 0 else norm
        for i in range(n):
            v[i] = A[i, k] if i >= k else 0.0
        v[k] -= alpha
        vv = 0.0
        for i in range(k, n):
            vv += v[i] * v[i]
        if vv == 0.0:
            continue
        for j in range(k, m):
            d = 0.0
            for i in range(k, n):
                d += v[i] * A[i, j]
            d = 2.0 * d / vv
            for i in range(k, n):
                A[i, j] -= d * v[i]
        d = 0.0
        for i in range(k, n):
            d += v[i] * y[i]
        d = 2.0 * d / vv
        for i in range(k, n):
            y[i] -= d * v[i]
    amounts = np.zeros(m)
    for k in range(min(m, n) - 1, -1, -1):
        acc = y[k]
        for j in range(k + 1, m):
            acc -= A[k, j] * amounts[j]
        amounts[k] = acc / A[k, k] if A[k, k] != 0.0 else 0.0
    m = 0
    for p in range(P):
        if W[p]:
            s[p] = amounts[m]
            m += 1


@njit(cache=True)
def _delta_f(nu_ptr, nu_col, nu_val, c, T, dx, alpha, act, e):
    """f(x + alpha dx) - f(x) = sum_s c_s expm1(ln10 alpha nu_s . dx) / ln10 - alpha T . dx, without cancellation.

    The expm1 terms are left in ``e`` (so that c(x + alpha dx) = c + c e needs no further exponentials).
    """
    d = 0.0
    for s in range(len(c)):
        if c[s] == 0.0:
            e[s] = 0.0
            continue
        a = 0.0
        for k in range(nu_ptr[s], nu_ptr[s + 1]):
            a += nu_val[k] * dx[nu_col[k]]
        e[s] = np.expm1(LN10 * min(alpha * a, 300.0))
        d += c[s] * e[s]
    d /= LN10
    for i in range(len(T)):
        if act[i]:
            d -= alpha * T[i] * dx[i]
    return d


@njit(cache=True)
def _at_ionic_strength(K0, dz2, hco, Ks0, dz2_s, hco_s, A, pH_term, activity, I, K, Ks):
    """Constants at ionic strength I, in K and Ks: log K = log K(0) + A dz2 f(I) + h log [H+] (fixed pH).

    f is the Davies function sqrt(I)/(1 + sqrt(I)) - 0.3 I (Davies, Ion Association, 1962).
    """
    r = np.sqrt(I)
    Af = A * (r / (1.0 + r) - 0.3 * I)
    log_cH = pH_term + (Af if activity else 0.0)
    for sp in range(len(K)):
        K[sp] = K0[sp] + Af * dz2[sp] + hco[sp] * log_cH
    for p in range(len(Ks)):
        Ks[p] = Ks0[p] + Af * dz2_s[p] + hco_s[p] * log_cH


@njit(cache=True)
def _newton(nu_ptr, nu_col, nu_val, nu_s, Kb, Tb, Ksb, act, free_col, tol, max_iter, x, W, s, c, c_ready,
            e, R, scale, dx, J, M, rhs, SI, Aw, v, y):
    """Newton iterations at one point from x (active set W, amounts s), in place.

    ``c_ready`` says that c already holds the concentrations at x. Returns (converged, iterations,
    largest relative mass-balance residual).
    """
    n = len(x)
    S = len(c)
    P = nu_s.shape[0]
    N = n + P
    worst = np.inf
    it = 0
    while it < max_iter:
        it += 1
        if not c_ready:
            _concentrations(nu_ptr, nu_col, nu_val, Kb, x, act, c)
        c_ready = False
        R[:] = 0.0
        scale[:] = 0.0
        for sp in range(S):
            cs = c[sp]
            if cs != 0.0:
                for k in range(nu_ptr[sp], nu_ptr[sp + 1]):
                    R[nu_col[k]] += nu_val[k] * cs
                    scale[nu_col[k]] += abs(nu_val[k]) * cs
        for i in range(n):
            R[i] = R[i] - Tb[i] if act[i] else 0.0
            scale[i] += abs(Tb[i]) + 1e-300
        for p in range(P):
            si = Ksb[p]
            for i in range(n):
                si += nu_s[p, i] * x[i]
            SI[p] = si
        # solid amounts from the mass balances (weighted least squares over the active solids): more
        # accurate than the KKT multipliers, which carry the conditioning of the scaled system
        _solid_amounts(nu_s, W, R, scale, s, Aw, v, y)
        # convergence: mass balances with the current solid amounts relative to the totals (1e-10), and the
        # solids consistent; the active set is settled once the balances close relative to everything
        # that enters them, the solid amounts included (a solid with a negative amount can hold a
        # balance far above its total, where rounding alone exceeds the tolerance)
        worst = 0.0
        settled = True
        for i in range(n):
            if act[i]:
                rt = R[i]
                sc = scale[i]
                for p in range(P):
                    rt += s[p] * nu_s[p, i]
                    sc += abs(s[p] * nu_s[p, i])
                # the proton balance is an excess (a difference of terms): relative to its terms
                worst = max(worst, abs(rt / (Tb[i] if Tb[i] > 0 and i != free_col else sc)))
                settled = settled and abs(rt) <= tol * sc
        over = -1  # the most supersaturated solid not in the set
        for p in range(P):
            if (W[p] and abs(SI[p]) > 1e-9) or (not W[p] and SI[p] > 1e-9):
                settled = False
            if not W[p] and SI[p] > 1e-9 and (over < 0 or SI[p] > SI[over]):
                over = p
        if worst <= tol and over >= 0:  # balances closed with a solid supersaturated: it precipitates
            W[over] = True
        if settled:
            jneg = -1
            for p in range(P):
                if W[p] and s[p] < -1e-16 * max(1.0, abs(s[p])):
                    if jneg < 0 or s[p] < s[jneg]:
                        jneg = p
            if jneg >= 0:  # a negative solid amount: that solid dissolves
                W[jneg] = False
                s[jneg] = 0.0
            elif worst <= tol:
                return True, it, worst
        # Newton direction: the KKT system of the active set, mass-balance rows scaled by their totals
        J[:, :] = 0.0
        for sp in range(S):
            cs = LN10 * c[sp]
            if cs != 0.0:
                for k in range(nu_ptr[sp], nu_ptr[sp + 1]):
                    vi = nu_val[k] * cs
                    for k2 in range(nu_ptr[sp], nu_ptr[sp + 1]):
                        J[nu_col[k], nu_col[k2]] += vi * nu_val[k2]
        _kkt(J, R, scale, SI, nu_s, W, act, M, rhs)
        if not _gauss(M, rhs, N):  # singular (a degenerate active set): least squares
            _kkt(J, R, scale, SI, nu_s, W, act, M, rhs)
            sol = np.linalg.lstsq(M, rhs)[0]
            rhs[:] = sol
        for i in range(n):
            dx[i] = rhs[i] if act[i] else 0.0
        # step: cap, ratio test against the inactive solids, then Armijo backtracking on f
        big = 0.0
        for i in range(n):
            big = max(big, abs(dx[i]))
        cap = CAP / big if big > CAP else 1.0
        alpha = cap
        block = -1
        for p in range(P):
            if not W[p]:
                rate = 0.0
                for i in range(n):
                    rate += dx[i] * nu_s[p, i]
                if rate > 1e-14:
                    lim = max(-SI[p], 0.0) / rate
                    if lim < alpha:
                        alpha = lim
                        block = p
        slope = 0.0
        for i in range(n):
            if act[i]:
                slope += R[i] * dx[i]
        if worst >= 1e-5 and slope < 0:  # outside the Newton region (there f's rounding would fool Armijo)
            accepted = False
            for _ in range(40):
                if _delta_f(nu_ptr, nu_col, nu_val, c, Tb, dx, alpha, act, e) <= 1e-4 * alpha * slope:
                    accepted = True
                    break
                alpha *= 0.5
                block = -1
            if accepted:  # the concentrations at the new point follow from the line search's terms
                c_ready = True
                for sp in range(S):
                    cn = c[sp] + c[sp] * e[sp]
                    if not cn <= 1e300:  # past the cap (or not finite): computed afresh
                        c_ready = False
                    c[sp] = cn
            else:  # backtracking exhausted (rounding in f): take the capped Newton step
                alpha = cap
        for i in range(n):
            x[i] = x[i] + alpha * dx[i] if act[i] else LOG_MIN
        if block >= 0:
            W[block] = True
    return False, it, worst


@njit(cache=True)
def solve_points(nu_ptr, nu_col, nu_val, nmax, nu_s, z2, K0, dz2, hco, Ks0, dz2_s, hco_s, A, pH_term, activity, T,
                 I_in, bg, auto_I, I_tol, active_c, free_col, chain, tol, max_iter,
                 x_out, s_out, W_out, c_out, I_out, it_out, res_out, status):
    """Solve B points, one after the other.

    The constants of each point are made here from their value at I = 0 (see :func:`_at_ionic_strength`),
    so that, with ``auto_I``, the ionic strength can follow the species: after each converged solve it is
    recomputed, the constants moved to it and the solve continued from the same solution, until it changes
    by less than ``I_tol`` (relative), the next value by a chord step. Along a batch each point starts
    from the previous point's value.

    Parameters
    ----------
    nu_ptr, nu_col, nu_val : ndarray
        Stoichiometry of the S species in the n unknown components, row-compressed (CSR).
    nmax : ndarray, shape (n,)
        Largest positive coefficient of each component (continued-fraction step divisor, at least 1).
    nu_s : ndarray, shape (P, n)
        Stoichiometry of the solids.
    z2 : ndarray, shape (S,)
        Squared charge of each species.
    K0, Ks0 : ndarray, shapes (B, S), (B, P)
        log10 constants of the species and the solids at I = 0 and the point's temperature.
    dz2, dz2_s : ndarray, shapes (S,), (P,)
        Their Davies charge terms (sum of z^2 of the products minus that of the reactants).
    hco, hco_s : ndarray, shapes (S,), (P,)
        Their H+ coefficients where the pH is fixed (folded into the constants), zeros where it is free.
    A, pH_term : ndarray, shape (B,)
        Davies A, and -pH where the pH is fixed.
    activity : bool
        The fixed pH is -log a(H+) (so log [H+] = -pH + A f(I)), not -log [H+].
    T : ndarray, shape (B, n)
        Totals [mol/L].
    I_in, bg : ndarray, shape (B,)
        The ionic strength [mol/L] (fixed, or the start without a previous point), and the background
        electrolyte's share of a computed one.
    auto_I : bool
        Compute the ionic strength from the species.
    I_tol : float
    active_c : ndarray of bool, shape (B, n)
        Components present (the others are held at LOG_MIN).
    free_col : int
        The H+ column when the pH is free (started at pH 7 without a guess), else -1.
    chain : ndarray of bool, shape (B,)
        Start the point, where it has no guess of its own, from the previous points' solutions (continuation):
        extrapolated quadratically or linearly from up to three previous points of the same run, or taken as it
        is; a guess that misses a mass balance by more than GUESS_LIMIT (relative) is dropped for the next.
    tol : float
        Relative mass-balance tolerance.
    max_iter : int
        Newton iterations allowed per solve (per ionic-strength pass).
    x_out, s_out, W_out, c_out, I_out, it_out, res_out, status : ndarray
        Outputs: log10 free concentrations, solid amounts [mol/L], solids present, species concentrations,
        ionic strength, iterations, largest relative residual, and CONVERGED or NOT_CONVERGED, per point.
    """
    B, n = T.shape
    S = K0.shape[1]
    P = nu_s.shape[0]
    N = n + P
    Kb = np.empty(S)
    Ksb = np.empty(P)
    c = np.empty(S)
    e = np.empty(S)
    R = np.empty(n)
    scale = np.empty(n)
    dx = np.empty(n)
    S_pos = np.empty(n)
    S_neg = np.empty(n)
    J = np.empty((n, n))
    M = np.empty((N, N))
    rhs = np.empty(N)
    W = np.zeros(P, dtype=np.bool_)
    s = np.zeros(P)
    SI = np.empty(P)
    Aw = np.empty((n, P))
    v = np.empty(n)
    y = np.empty(n)
    x = np.empty(n)
    slope_run = -1.0  # slope of g(I) - I carried along a run
    for b in range(B):
        act = active_c[b]
        Tb = T[b]
        I = I_in[b]
        if auto_I and chain[b] and b > 0 and status[b - 1] == CONVERGED:
            I = I_out[b - 1]  # continuation, extrapolated along the run like the concentrations
            if b > 1 and chain[b - 1] and status[b - 2] == CONVERGED:
                I_lin = 2.0 * I - I_out[b - 2]
                if b > 2 and chain[b - 2] and status[b - 3] == CONVERGED:
                    I_lin = 3.0 * I - 3.0 * I_out[b - 2] + I_out[b - 3]
                if I_lin > 0.0:
                    I = I_lin
        else:
            slope_run = -1.0
        _at_ionic_strength(K0[b], dz2, hco, Ks0[b], dz2_s, hco_s, A[b], pH_term[b], activity, I, Kb, Ksb)
        # starting point: the previous points extrapolated along the batch (continuation: quadratic, then
        # linear, then constant), each kept only if it closes every mass balance within a factor of about 2;
        # else the continued fractions from the totals
        if chain[b] and b > 0 and status[b - 1] == CONVERGED:
            tries = 1
            while tries < 3 and b > tries and chain[b - tries] and status[b - tries - 1] == CONVERGED:
                tries += 1
        else:
            tries = 0
        kept = False
        for t in range(tries):
            order = tries - 1 - t
            filled = False
            for i in range(n):
                if not act[i]:
                    x[i] = LOG_MIN
                    continue
                x1 = x_out[b - 1, i]
                if x1 <= LOG_MIN + 1.0:  # present here, absent in the previous point
                    x[i] = np.log10(Tb[i]) if Tb[i] > 0 and i != free_col else -7.0
                    filled = True
                    continue
                x[i] = x1
                if order >= 1 and x_out[b - 2, i] > LOG_MIN + 1.0:
                    if order == 2 and x_out[b - 3, i] > LOG_MIN + 1.0:
                        x[i] = 3.0 * x1 - 3.0 * x_out[b - 2, i] + x_out[b - 3, i]
                    else:
                        x[i] = 2.0 * x1 - x_out[b - 2, i]
            if filled:
                _pcf(nu_ptr, nu_col, nu_val, nmax, Kb, Tb, x, act, PCF_GUESS, c, S_pos, S_neg)
            _concentrations(nu_ptr, nu_col, nu_val, Kb, x, act, c)
            _balances(nu_ptr, nu_col, nu_val, c, S_pos, S_neg)
            kept = True
            for i in range(n):
                if act[i] and Tb[i] > 0 and abs(S_pos[i] - Tb[i]) > GUESS_LIMIT * Tb[i]:
                    kept = False
                    break
            if kept:
                break
        c_ready = kept  # c is that of the guess kept
        if not kept:
            for i in range(n):
                x[i] = (np.log10(Tb[i]) if Tb[i] > 0 and i != free_col else -7.0) if act[i] else LOG_MIN
            _pcf(nu_ptr, nu_col, nu_val, nmax, Kb, Tb, x, act, PCF_FRESH, c, S_pos, S_neg)
        for i in range(n):
            if not act[i]:
                x[i] = LOG_MIN
        status[b] = NOT_CONVERGED
        it = 0
        I_prev, h_prev, slope = I, 0.0, slope_run
        for _pass in range(MAX_PASSES):
            # the active set starts empty from a feasible point (solids join through the ratio test), so that a
            # guess from another point, or the constants of the previous ionic strength, impose no solid
            W[:] = False
            s[:] = 0.0
            if P and _feasible(x, nu_s, Ksb, act):
                c_ready = False
            ok, it_p, worst = _newton(nu_ptr, nu_col, nu_val, nu_s, Kb, Tb, Ksb, act, free_col, tol, max_iter, x, W, s,
                                      c, c_ready, e, R, scale, dx, J, M, rhs, SI, Aw, v, y)
            it += it_p
            if not ok:
                break
            if not auto_I:
                status[b] = CONVERGED
                break
            # the ionic strength from the species; its fixed-point iteration continues from this solution
            I_new = bg[b]
            for sp in range(S):
                I_new += 0.5 * z2[sp] * c[sp]
            h = I_new - I
            if abs(h) <= I_tol * I_new:
                I = I_new
                status[b] = CONVERGED
                slope_run = slope  # the next point of the run starts with this slope
                break
            # chord steps on h(I) = g(I) - I = 0 with the slope from the last two passes where h stood clear of
            # the solve's rounding (plain substitution, slope -1, oscillates where the ionic strength is large)
            if _pass > 0 and abs(h_prev) > 1e-8 * I_new and abs(h) > 1e-8 * I_new and I != I_prev:
                slope_new = (h - h_prev) / (I - I_prev)
                if slope_new < -1e-3:
                    slope = slope_new
            I_prev, h_prev = I, h
            I_next = I - h / slope
            I = I_next if 0.0 < I_next < 1e3 else I_new
            _at_ionic_strength(K0[b], dz2, hco, Ks0[b], dz2_s, hco_s, A[b], pH_term[b], activity, I, Kb, Ksb)
            c_ready = False
        I_out[b] = I
        for i in range(n):
            x_out[b, i] = x[i]
        for p in range(P):
            present = W[p] and status[b] == CONVERGED
            W_out[b, p] = present
            s_out[b, p] = max(s[p], 0.0) if present else 0.0
        for sp in range(S):
            c_out[b, sp] = c[sp]
        it_out[b] = it
        res_out[b] = worst
