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
compiled too, so a whole curve is one call. Its inputs and outputs travel in four named tuples of arrays
(numba passes them as structures): :class:`Stoichiometry` (the system), :class:`Points` (the conditions of
each point), :class:`Options` (flags and tolerances) and :class:`Outputs` (filled in place). Inside, the
arrays are regrouped once per call into small tuples (:class:`Nu`, :class:`ChargeTerms`, :class:`History`,
:class:`State`, :class:`Work`) and each helper is given only the groups it uses: numba increfs every array
of a tuple bound to a variable, so passing the whole workspace to each small step would cost more than the
step. With ``NUMBA_DISABLE_JIT=1`` the same code runs as Python.

Layout: :func:`solve_points` loops over the points; for each, :func:`_start_ionic_strength` and
:func:`_start_point` (continuation or continued fractions) give the start, then each ionic-strength pass
runs :func:`_newton` from a feasible point and, with the ionic strength computed, :func:`_chord_step`
gives the next one. One Newton iteration is :func:`_residuals`, :func:`_solid_amounts`,
:func:`_balance_error` and :func:`_solid_check`, a solid joining or leaving (:func:`_dissolve_negative`),
:func:`_newton_direction` (the KKT system of the active set), then the step length (:func:`_step_cap`,
:func:`_ratio_test`, :func:`_armijo`).
"""
from __future__ import annotations

from typing import NamedTuple

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


class Stoichiometry(NamedTuple):
    """The chemical system in its n unknown components: S species, P solids (one per batch).

    Every array float64 unless said, C-contiguous and writable (one numba specialisation).

    Attributes
    ----------
    nu_ptr : ndarray of int64, shape (S + 1,)
        Row pointers of the species' stoichiometry, row-compressed (CSR): species s has the coefficients
        ``nu_val[nu_ptr[s]:nu_ptr[s + 1]]`` in the components ``nu_col[nu_ptr[s]:nu_ptr[s + 1]]``.
    nu_col : ndarray of int64, shape (nnz,)
        Component (column) of each nonzero coefficient.
    nu_val : ndarray, shape (nnz,)
        The nonzero coefficients.
    nmax : ndarray, shape (n,)
        Largest positive coefficient of each component (continued-fraction step divisor, at least 1).
    nu_solid : ndarray, shape (P, n)
        Stoichiometry of the solids (dense).
    z2 : ndarray, shape (S,)
        Squared charge of each species (ionic strength = sum z2 c / 2).
    dz2, dz2_solid : ndarray, shapes (S,), (P,)
        Davies charge terms of the species' and the solids' constants (sum of z^2 of the products minus
        that of the reactants).
    h, h_solid : ndarray, shapes (S,), (P,)
        H+ coefficients of the species and the solids where the pH is fixed (folded into the constants);
        zeros where it is free.
    """

    nu_ptr: np.ndarray
    nu_col: np.ndarray
    nu_val: np.ndarray
    nmax: np.ndarray
    nu_solid: np.ndarray
    z2: np.ndarray
    dz2: np.ndarray
    dz2_solid: np.ndarray
    h: np.ndarray
    h_solid: np.ndarray


class Points(NamedTuple):
    """The conditions of the B points of a batch (float64 unless said, C-contiguous and writable).

    Attributes
    ----------
    log_K0 : ndarray, shape (B, S)
        log10 concentration constants of the species at I = 0 and the point's temperature.
    log_Ks0 : ndarray, shape (B, P)
        The same for the solids.
    davies_A : ndarray, shape (B,)
        Davies A at the point's temperature [(mol/L)^-1/2].
    pH_term : ndarray, shape (B,)
        -pH where the pH is fixed, 0 where it is free.
    totals : ndarray, shape (B, n)
        Totals of the unknown components [mol/L] (the proton excess where the pH is free).
    ionic_strength : ndarray, shape (B,)
        The ionic strength [mol/L]: fixed, or the start of a computed one at a point without a previous one.
    background_I : ndarray, shape (B,)
        The background electrolyte's share of a computed ionic strength [mol/L].
    present : ndarray of bool, shape (B, n)
        Components present (the others are held at LOG_MIN).
    chain : ndarray of bool, shape (B,)
        Start the point from the previous points' solutions (continuation): extrapolated quadratically or
        linearly from up to three previous points of the same run, or taken as it is; a guess that misses a
        mass balance by more than GUESS_LIMIT (relative) is dropped for the next. False: start from the
        totals (the first point of a curve).
    """

    log_K0: np.ndarray
    log_Ks0: np.ndarray
    davies_A: np.ndarray
    pH_term: np.ndarray
    totals: np.ndarray
    ionic_strength: np.ndarray
    background_I: np.ndarray
    present: np.ndarray
    chain: np.ndarray


class Options(NamedTuple):
    """Flags and tolerances of a solve (Python bool, int and float: one numba specialisation).

    Attributes
    ----------
    activity : bool
        The fixed pH is -log a(H+) (so log [H+] = -pH + A f(I)), not -log [H+].
    auto_I : bool
        Compute the ionic strength from the species.
    I_tol : float
        Relative change of a computed ionic strength at which its iteration stops.
    free_col : int
        The H+ column when the pH is free (started at pH 7 without a guess), else -1.
    tol : float
        Relative mass-balance tolerance.
    max_iter : int
        Newton iterations allowed per solve (per ionic-strength pass).
    """

    activity: bool
    auto_I: bool
    I_tol: float
    free_col: int
    tol: float
    max_iter: int


class Outputs(NamedTuple):
    """The results per point, filled in place by :func:`solve_points` (see :func:`empty_outputs`).

    Attributes
    ----------
    x : ndarray, shape (B, n)
        log10 free concentrations of the unknown components [log10 mol/L].
    solid_amount : ndarray, shape (B, P)
        Solid amounts [mol per litre of solution], 0 where absent.
    solid_present : ndarray of bool, shape (B, P)
        Solids present.
    c : ndarray, shape (B, S)
        Species concentrations [mol/L].
    ionic_strength : ndarray, shape (B,)
        Ionic strength reached [mol/L].
    iterations : ndarray of int64, shape (B,)
        Newton iterations, summed over the ionic-strength passes.
    residual : ndarray, shape (B,)
        Largest relative mass-balance residual.
    status : ndarray of int64, shape (B,)
        CONVERGED or NOT_CONVERGED.
    """

    x: np.ndarray
    solid_amount: np.ndarray
    solid_present: np.ndarray
    c: np.ndarray
    ionic_strength: np.ndarray
    iterations: np.ndarray
    residual: np.ndarray
    status: np.ndarray


def empty_outputs(B: int, n: int, S: int, P: int) -> Outputs:
    """Output arrays for B points of n unknown components, S species and P solids."""
    return Outputs(x=np.empty((B, n)), solid_amount=np.empty((B, P)), solid_present=np.empty((B, P), dtype=np.bool_),
                   c=np.empty((B, S)), ionic_strength=np.empty(B), iterations=np.empty(B, dtype=np.int64),
                   residual=np.empty(B), status=np.empty(B, dtype=np.int64))


class Nu(NamedTuple):
    """The stoichiometry the iterations use (the arrays of :class:`Stoichiometry`, grouped once per call).

    Attributes
    ----------
    ptr, col, val : ndarray
        The species' stoichiometry, row-compressed (see :class:`Stoichiometry`).
    nmax : ndarray, shape (n,)
        Continued-fraction step divisors.
    solid : ndarray, shape (P, n)
        Stoichiometry of the solids.
    """

    ptr: np.ndarray
    col: np.ndarray
    val: np.ndarray
    nmax: np.ndarray
    solid: np.ndarray


class ChargeTerms(NamedTuple):
    """What moves the constants with the ionic strength and a fixed pH (see :func:`_at_ionic_strength`).

    Attributes
    ----------
    dz2, dz2_solid, h, h_solid : ndarray
        As in :class:`Stoichiometry`.
    """

    dz2: np.ndarray
    dz2_solid: np.ndarray
    h: np.ndarray
    h_solid: np.ndarray


class History(NamedTuple):
    """The batch solved so far, for the starts by continuation (the arrays of :class:`Points` and :class:`Outputs`).

    Attributes
    ----------
    x : ndarray, shape (B, n)
        log10 free concentrations of the points solved.
    I : ndarray, shape (B,)
        Their ionic strength [mol/L].
    status : ndarray of int64, shape (B,)
        Their status.
    chain : ndarray of bool, shape (B,)
        Points that may continue from the previous ones.
    I_in : ndarray, shape (B,)
        The ionic strength given for each point [mol/L].
    """

    x: np.ndarray
    I: np.ndarray
    status: np.ndarray
    chain: np.ndarray
    I_in: np.ndarray


class Point(NamedTuple):
    """The conditions of the point being solved (rows of :class:`Points`).

    Attributes
    ----------
    index : int
        The point's row in the batch.
    log_K0, log_Ks0 : ndarray, shapes (S,), (P,)
        Its constants at I = 0.
    davies_A, pH_term : float
        Its Davies A and -pH (0 where the pH is free).
    totals : ndarray, shape (n,)
        [mol/L].
    present : ndarray of bool, shape (n,)
    background_I : float
        [mol/L].
    """

    index: int
    log_K0: np.ndarray
    log_Ks0: np.ndarray
    davies_A: float
    pH_term: float
    totals: np.ndarray
    present: np.ndarray
    background_I: float


class State(NamedTuple):
    """The state of the point being solved.

    Attributes
    ----------
    K, Ks : ndarray, shapes (S,), (P,)
        log10 constants of the species and solids at the current ionic strength (a fixed pH folded in).
    x : ndarray, shape (n,)
        log10 free concentrations.
    c : ndarray, shape (S,)
        Species concentrations [mol/L] (at x, where the caller says so).
    """

    K: np.ndarray
    Ks: np.ndarray
    x: np.ndarray
    c: np.ndarray


class Solids(NamedTuple):
    """The active set: W (bool, shape (P,)) the solids present, s their amounts [mol/L], SI the saturation indices."""

    W: np.ndarray
    s: np.ndarray
    SI: np.ndarray


class Balances(NamedTuple):
    """Mass-balance residuals R = nu^T c - T [mol/L] and the sum of the magnitudes of their terms, shape (n,)."""

    R: np.ndarray
    scale: np.ndarray


class Kkt(NamedTuple):
    """The Newton system: Jacobian J (n, n), KKT matrix M and right-hand side rhs (n + P), the step dx (n,)."""

    J: np.ndarray
    M: np.ndarray
    rhs: np.ndarray
    dx: np.ndarray


class Scratch(NamedTuple):
    """Work arrays: e (S,) the line search's expm1 terms; S_pos, S_neg (n,) the balance sums of the continued
    fractions; Aw (n, P), v, y (n,) the least-squares solid amounts."""

    e: np.ndarray
    S_pos: np.ndarray
    S_neg: np.ndarray
    Aw: np.ndarray
    v: np.ndarray
    y: np.ndarray


class Work(NamedTuple):
    """The work arrays of the solve at one point, allocated once per batch (see :func:`_workspace`)."""

    sol: Solids
    bal: Balances
    kkt: Kkt
    scratch: Scratch


class Chord(NamedTuple):
    """The chord iteration on the ionic strength: I and h = g(I) - I at the last two passes, and its slope."""

    I: float
    I_prev: float
    h_prev: float
    slope: float


# ---------------------------------------------------------------------------------------------------------
# concentrations, balances, constants


@njit(cache=True)
def _concentrations(nu, K, x, act, c):
    """c_s = 10**min(K_s + nu_s . x, 300) [mol/L]; exactly 0 for a species made with an absent component."""
    nu_ptr, nu_col, nu_val = nu.ptr, nu.col, nu.val
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
def _balances(nu, c, S_pos, S_neg):
    """Sums of the species over each component: with positive coefficients in S_pos, negative in S_neg."""
    nu_ptr, nu_col, nu_val = nu.ptr, nu.col, nu.val
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
def _at_ionic_strength(terms, pt, activity, I, state):
    """Constants at ionic strength I [mol/L], in state.K and state.Ks: log K = log K(0) + A dz2 f(I) + h log [H+].

    f is the Davies function sqrt(I)/(1 + sqrt(I)) - 0.3 I (Davies, Ion Association, 1962); the last term
    folds in a fixed pH (h is zero where the pH is free), as activity if ``activity``.
    """
    r = np.sqrt(I)
    Af = pt.davies_A * (r / (1.0 + r) - 0.3 * I)
    log_cH = pt.pH_term + (Af if activity else 0.0)
    K, K0, dz2, h = state.K, pt.log_K0, terms.dz2, terms.h
    for sp in range(len(K)):
        K[sp] = K0[sp] + Af * dz2[sp] + h[sp] * log_cH
    Ks, Ks0, dz2_s, h_s = state.Ks, pt.log_Ks0, terms.dz2_solid, terms.h_solid
    for p in range(len(Ks)):
        Ks[p] = Ks0[p] + Af * dz2_s[p] + h_s[p] * log_cH


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


# ---------------------------------------------------------------------------------------------------------
# starting points


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
# linear algebra


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


@njit(cache=True, inline="always")
def _householder_step(A, y, v, k, m):
    """Apply the k-th Householder reflection of the QR factorisation of A[:, :m] to A and y, in place."""
    n = A.shape[0]
    norm = 0.0
    for i in range(k, n):
        norm += A[i, k] * A[i, k]
    norm = np.sqrt(norm)
    if norm == 0.0:
        return
    alpha = -norm if A[k, k] >= 0 else norm
    for i in range(n):
        v[i] = A[i, k] if i >= k else 0.0
    v[k] -= alpha
    vv = 0.0
    for i in range(k, n):
        vv += v[i] * v[i]
    if vv == 0.0:
        return
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


@njit(cache=True, inline="always")
def _back_substitute(A, y, m):
    """The least-squares solution of A[:, :m] a = y once A is triangular (a zero pivot gives a zero)."""
    amounts = np.zeros(m)
    for k in range(min(m, A.shape[0]) - 1, -1, -1):
        acc = y[k]
        for j in range(k + 1, m):
            acc -= A[k, j] * amounts[j]
        amounts[k] = acc / A[k, k] if A[k, k] != 0.0 else 0.0
    return amounts


@njit(cache=True)
def _solid_amounts(nu_s, sol, bal, work):
    """Amounts of the active solids that best close the mass balances, in sol.s [mol/L].

    Weighted least squares, min || (R + nu_s^T s) / scale ||, by Householder QR (the normal equations
    would square a condition number that reaches 1e8 when a trace metal and a major one both precipitate).
    """
    W, s, R, scale, A, y = sol.W, sol.s, bal.R, bal.scale, work.Aw, work.y
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
        _householder_step(A, y, work.v, k, m)
    amounts = _back_substitute(A, y, m)
    m = 0
    for p in range(P):
        if W[p]:
            s[p] = amounts[m]
            m += 1


# ---------------------------------------------------------------------------------------------------------
# one Newton iteration


@njit(cache=True, inline="always")
def _residuals(nu, c, T, act, R, scale):
    """Mass-balance residuals R = nu^T c - T [mol/L] (0 for an absent component) and the sum of the
    magnitudes of their terms, scale."""
    nu_ptr, nu_col, nu_val = nu.ptr, nu.col, nu.val
    R[:] = 0.0
    scale[:] = 0.0
    for sp in range(len(c)):
        cs = c[sp]
        if cs != 0.0:
            for k in range(nu_ptr[sp], nu_ptr[sp + 1]):
                R[nu_col[k]] += nu_val[k] * cs
                scale[nu_col[k]] += abs(nu_val[k]) * cs
    for i in range(len(R)):
        R[i] = R[i] - T[i] if act[i] else 0.0
        scale[i] += abs(T[i]) + 1e-300


@njit(cache=True, inline="always")
def _saturation_indices(nu_s, Ks, x, SI):
    """SI_p = Ks_p + nu_p . x, the log10 saturation index of each solid."""
    P, n = nu_s.shape
    for p in range(P):
        si = Ks[p]
        for i in range(n):
            si += nu_s[p, i] * x[i]
        SI[p] = si


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


@njit(cache=True, inline="always")
def _jacobian(nu, c, J):
    """J = ln10 nu^T diag(c) nu, the Jacobian of the mass balances in the log10 concentrations."""
    nu_ptr, nu_col, nu_val = nu.ptr, nu.col, nu.val
    J[:, :] = 0.0
    for sp in range(len(c)):
        cs = LN10 * c[sp]
        if cs != 0.0:
            for k in range(nu_ptr[sp], nu_ptr[sp + 1]):
                vi = nu_val[k] * cs
                for k2 in range(nu_ptr[sp], nu_ptr[sp + 1]):
                    J[nu_col[k], nu_col[k2]] += vi * nu_val[k2]


@njit(cache=True)
def _kkt(nu_s, act, sol, bal, kkt):
    """The KKT system of the active set of solids in kkt.M, kkt.rhs, mass-balance rows divided by bal.scale."""
    J, R, scale, M, rhs, W, SI = kkt.J, bal.R, bal.scale, kkt.M, kkt.rhs, sol.W, sol.SI
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


@njit(cache=True, inline="always")
def _newton_direction(nu_s, act, sol, bal, kkt):
    """The Newton step kkt.dx from the KKT system of the active set (least squares where it is singular)."""
    M, rhs, dx = kkt.M, kkt.rhs, kkt.dx
    _kkt(nu_s, act, sol, bal, kkt)
    if not _gauss(M, rhs, len(rhs)):  # singular (a degenerate active set): least squares
        _kkt(nu_s, act, sol, bal, kkt)
        sol_ = np.linalg.lstsq(M, rhs)[0]
        rhs[:] = sol_
    for i in range(len(dx)):
        dx[i] = rhs[i] if act[i] else 0.0


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


@njit(cache=True)
def _delta_f(nu, pt, c, e, dx, alpha):
    """f(x + alpha dx) - f(x) = sum_s c_s expm1(ln10 alpha nu_s . dx) / ln10 - alpha T . dx, without cancellation.

    The expm1 terms are left in e (so that c(x + alpha dx) = c + c e needs no further exponentials).
    """
    nu_ptr, nu_col, nu_val, T, act = nu.ptr, nu.col, nu.val, pt.totals, pt.present
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


@njit(cache=True)
def _newton(nu, opts, pt, state, work, c_ready):
    """Newton iterations at one point from state.x (active set work.sol.W, amounts work.sol.s), in place.

    Each iteration: the residuals and saturation indices, the solid amounts (least squares), the convergence
    checks, a solid joining (supersaturated once the balances close) or leaving (negative amount), the KKT
    step of the active set, then the step length: capped, limited by the inactive solids (ratio test), and
    outside the Newton region (relative residual 1e-5, where f's rounding would fool Armijo) backtracked on
    f, or the capped Newton step where backtracking is exhausted. ``c_ready`` says that state.c already
    holds the concentrations at state.x. Returns (converged, iterations, largest relative mass-balance residual).
    """
    nu_s, x, c, act, T = nu.solid, state.x, state.c, pt.present, pt.totals
    sol, bal, kkt, e = work.sol, work.bal, work.kkt, work.scratch.e
    W, SI, dx, R = sol.W, sol.SI, kkt.dx, bal.R
    worst = np.inf
    it = 0
    while it < opts.max_iter:
        it += 1
        if not c_ready:
            _concentrations(nu, state.K, x, act, c)
        _residuals(nu, c, T, act, R, bal.scale)
        _saturation_indices(nu_s, state.Ks, x, SI)
        # solid amounts from the mass balances (weighted least squares over the active solids): more
        # accurate than the KKT multipliers, which carry the conditioning of the scaled system
        _solid_amounts(nu_s, sol, bal, work.scratch)
        worst, closed = _balance_error(nu_s, sol, bal, pt, opts)
        over, consistent = _solid_check(W, SI)
        if worst <= opts.tol and over >= 0:  # balances closed with a solid supersaturated: it precipitates
            W[over] = True
        if closed and consistent and not _dissolve_negative(W, sol.s) and worst <= opts.tol:
            return True, it, worst
        _jacobian(nu, c, kkt.J)
        _newton_direction(nu_s, act, sol, bal, kkt)
        cap = _step_cap(dx)
        alpha, block = _ratio_test(nu_s, W, SI, dx, cap)
        slope = _slope(R, dx, act)
        c_ready = False
        if worst >= 1e-5 and slope < 0:
            accepted, alpha, halved = _armijo(nu, pt, c, e, dx, alpha, slope)
            if halved:
                block = -1
            if accepted:  # the concentrations at the new point follow from the line search's terms
                c_ready = _advance_concentrations(c, e)
            else:  # backtracking exhausted (rounding in f): take the capped Newton step
                alpha = cap
        for i in range(len(x)):
            x[i] = x[i] + alpha * dx[i] if act[i] else LOG_MIN
        if block >= 0:
            W[block] = True
    return False, it, worst


# ---------------------------------------------------------------------------------------------------------
# the batch


@njit(cache=True, inline="always")
def _workspace(n, S, P):
    """The per-point state and work arrays for points of n unknown components, S species and P solids."""
    state = State(np.empty(S), np.empty(P), np.empty(n), np.empty(S))
    work = Work(Solids(np.zeros(P, dtype=np.bool_), np.zeros(P), np.empty(P)), Balances(np.empty(n), np.empty(n)),
                Kkt(np.empty((n, n)), np.empty((n + P, n + P)), np.empty(n + P), np.empty(n)),
                Scratch(np.empty(S), np.empty(n), np.empty(n), np.empty((n, P)), np.empty(n), np.empty(n)))
    return state, work


@njit(cache=True, inline="always")
def _store(out, b, state, sol, converged):
    """Write the solution of point b (free concentrations, solids, species) to the outputs."""
    x, c, W, s = state.x, state.c, sol.W, sol.s
    for i in range(len(x)):
        out.x[b, i] = x[i]
    for p in range(len(W)):
        present = W[p] and converged
        out.solid_present[b, p] = present
        out.solid_amount[b, p] = max(s[p], 0.0) if present else 0.0
    for sp in range(len(c)):
        out.c[b, sp] = c[sp]


@njit(cache=True)
def solve_points(st, points, opts, out):
    """Solve the B points of a batch, one after the other, into ``out``.

    For each point: its starting ionic strength (:func:`_start_ionic_strength`), the constants there
    (:func:`_at_ionic_strength`, from their values at I = 0), a starting point (:func:`_start_point`:
    continuation along the batch where ``points.chain`` allows, else continued fractions), then the
    ionic-strength passes: a Newton solve (:func:`_newton`) from a feasible point with no solid in the
    set, and, with ``opts.auto_I``, the ionic strength recomputed from the species and, until it changes by
    less than ``opts.I_tol`` (relative), moved by a chord step (:func:`_chord_step`) and the solve continued
    from the same solution.

    Parameters
    ----------
    st : Stoichiometry
        The system: S species and P solids in n unknown components.
    points : Points
        The conditions of the B points.
    opts : Options
        Flags and tolerances.
    out : Outputs
        Arrays of B rows, filled in place: log10 free concentrations, solid amounts [mol/L], solids present,
        species concentrations [mol/L], ionic strength [mol/L], iterations, largest relative residual, and
        CONVERGED or NOT_CONVERGED, per point.
    """
    B, n = points.totals.shape
    nu = Nu(st.nu_ptr, st.nu_col, st.nu_val, st.nmax, st.nu_solid)
    terms = ChargeTerms(st.dz2, st.dz2_solid, st.h, st.h_solid)
    hist = History(out.x, out.ionic_strength, out.status, points.chain, points.ionic_strength)
    state, work = _workspace(n, points.log_K0.shape[1], st.nu_solid.shape[0])
    W, s = work.sol.W, work.sol.s
    slope_run = -1.0  # slope of g(I) - I carried along a run
    for b in range(B):
        I, continued = _start_ionic_strength(hist, opts.auto_I, b)
        if not continued:
            slope_run = -1.0
        pt = Point(b, points.log_K0[b], points.log_Ks0[b], points.davies_A[b], points.pH_term[b], points.totals[b],
                   points.present[b], points.background_I[b])
        _at_ionic_strength(terms, pt, opts.activity, I, state)
        c_ready = _start_point(nu, opts.free_col, pt, state, work.scratch, hist)
        status = NOT_CONVERGED
        it = 0
        worst = np.inf
        ch = Chord(I, I, 0.0, slope_run)
        for _pass in range(MAX_PASSES):
            # the active set starts empty from a feasible point (solids join through the ratio test), so that a
            # guess from another point, or the constants of the previous ionic strength, impose no solid
            W[:] = False
            s[:] = 0.0
            if len(W) and _feasible(state.x, nu.solid, state.Ks, pt.present):
                c_ready = False
            ok, it_p, worst = _newton(nu, opts, pt, state, work, c_ready)
            it += it_p
            if not ok:
                break
            if not opts.auto_I:
                status = CONVERGED
                break
            # the ionic strength from the species; its fixed-point iteration continues from this solution
            I_new = _ionic_strength_of(st.z2, pt.background_I, state.c)
            h = I_new - ch.I
            if abs(h) <= opts.I_tol * I_new:
                ch = Chord(I_new, ch.I_prev, ch.h_prev, ch.slope)
                status = CONVERGED
                slope_run = ch.slope  # the next point of the run starts with this slope
                break
            ch = _chord_step(ch, h, I_new, _pass == 0)
            _at_ionic_strength(terms, pt, opts.activity, ch.I, state)
            c_ready = False
        _store(out, b, state, work.sol, status == CONVERGED)
        out.ionic_strength[b] = ch.I
        out.iterations[b] = it
        out.residual[b] = worst
        out.status[b] = status
