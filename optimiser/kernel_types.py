"""Constants and the internal named tuples of the equilibrium kernel (see :mod:`optimiser.kernel`).

The kernel regroups its input and output arrays once per call into these small tuples and gives each helper
only the groups it uses: numba increfs every array of a tuple bound to a variable, so passing the whole
workspace to each small step would cost more than the step.
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np

LN10 = float(np.log(10.0))
LOG_MIN = -330.0  # log10 of an absent component's free concentration
CAP = 4.0  # largest Newton step in any log10 concentration
PCF_FRESH, PCF_GUESS = 15, 3  # continued-fraction sweeps from the totals, and from a guess
GUESS_LIMIT = 1.0  # largest relative mass-balance error of a guess that is kept
MAX_PASSES = 60  # ionic-strength passes at one point, at most

# status codes returned per point
CONVERGED, NOT_CONVERGED = 0, 1


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
