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
arrays are regrouped once per call into the small tuples of :mod:`optimiser.kernel_types` (``Nu``,
``ChargeTerms``, ``History``, ``State``, ``Work``) and each helper is given only the groups it uses. With
``NUMBA_DISABLE_JIT=1`` the same code runs as Python.

Layout: this module holds the named inputs and outputs and :func:`solve_points`, the loop over the points;
for each, :func:`~optimiser.kernel_start._start_ionic_strength` and :func:`~optimiser.kernel_start._start_point`
(continuation or continued fractions, :mod:`optimiser.kernel_start`) give the start, then each
ionic-strength pass runs :func:`~optimiser.kernel_newton._newton` (:mod:`optimiser.kernel_newton`: the
active set, the KKT step and its length) from a feasible point and, with the ionic strength computed,
:func:`~optimiser.kernel_start._chord_step` gives the next one. The functions of the model (concentrations,
balances, Jacobian, f, constants at an ionic strength) are in :mod:`optimiser.kernel_model`, the small
linear algebra (Gaussian elimination, Householder QR) in :mod:`optimiser.kernel_linalg`, the constants and
internal tuples in :mod:`optimiser.kernel_types`. Every function is compiled with ``cache=True``; numba
checks a cached function against its own source file only (a cached :func:`solve_points` would keep the
code of an edited :mod:`optimiser.kernel_newton`), so :func:`_drop_stale_cache` drops the kernel's cache
when any of these modules changed.
"""
from __future__ import annotations

import hashlib
from pathlib import Path
from typing import NamedTuple

import numpy as np
from numba import njit

from .kernel_model import _at_ionic_strength
from .kernel_newton import _newton
from .kernel_start import _chord_step, _feasible, _ionic_strength_of, _start_ionic_strength, _start_point
from .kernel_types import (CONVERGED, LOG_MIN, MAX_PASSES, NOT_CONVERGED, Balances, ChargeTerms, Chord, History, Kkt, Nu,
                           Point, Scratch, Solids, State, Work)

__all__ = ["CONVERGED", "LOG_MIN", "NOT_CONVERGED", "Options", "Outputs", "Points", "Stoichiometry", "empty_outputs",
           "solve_points"]


def _drop_stale_cache(folder: Path = Path(__file__).parent) -> bool:
    """Delete numba's cache of the kernel when any kernel module changed since it was written; True if it did.

    numba checks a cached function against its own source file only, and a cached function holds the code of
    the functions it calls in the other kernel modules: the cache is kept with a digest of all of them
    (``__pycache__/kernel-sources.sha256``). A folder that cannot be written (numba then caches elsewhere) is
    left alone.
    """
    digest = hashlib.sha256(b"".join(p.read_bytes() for p in sorted(folder.glob("kernel*.py")))).hexdigest()
    cache = folder / "__pycache__"
    stamp = cache / "kernel-sources.sha256"
    try:
        if stamp.read_text() == digest:
            return False
    except OSError:
        pass
    try:
        cache.mkdir(exist_ok=True)
        for f in cache.glob("kernel*.nb[ci]"):
            f.unlink(missing_ok=True)
        stamp.write_text(digest)
    except OSError:
        return False
    return True


_drop_stale_cache()


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
