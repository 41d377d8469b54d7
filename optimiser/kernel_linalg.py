"""Small dense linear algebra of the kernel (numba): Gaussian elimination for the KKT system, Householder QR
for the least-squares solid amounts."""
from __future__ import annotations

import numpy as np
from numba import njit


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
