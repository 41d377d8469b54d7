"""The model's functions inside the kernel (numba): species concentrations, mass balances and their residuals,
saturation indices, the Jacobian, the change of the convex function f along a step, and the constants at an
ionic strength (see :mod:`optimiser.kernel` for the method)."""
from __future__ import annotations

import numpy as np
from numba import njit

from .kernel_types import LN10


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
