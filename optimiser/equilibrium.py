"""Full chemical equilibrium of metals, titrant, buffer, masking agents and indicator, vectorised over points.

Unknowns are the log10 free concentrations of the components (metal ions, fully deprotonated ligands and,
when the pH is free, H+) and the amounts of the solids present. Every species concentration is

.. math:: \\log c_s = \\log K_s(I, T) + \\sum_i \\nu_{si} \\log c_i

and the equations are the mass balances ``sum_s nu_si c_s + sum_p nu_pi n_p = T_i`` and, for each solid
present, its solubility product (saturation index zero). Solids appear where their saturation index passes
zero and go again where their amount would turn negative (an active-set loop).

The solve for a batch of B points (a whole titration curve, or a whole population of candidate methods):
a positive-continued-fraction iteration (Carrayrou et al., AIChE J. 48 (2002) 894) gives a starting point
from which Newton's method in log concentrations, with a step limit and a backtracking line search,
converges to a relative mass-balance residual of 1e-10 (checked), or the solver raises
:class:`~optimiser.errors.ConvergenceError` naming the point. It never returns NaN.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .constants import LN10, H, FormationConstant, corrected, database, davies_A, davies_f
from .errors import ConvergenceError, InputError

Array = NDArray[np.float64]
LOG_MIN = -330.0  # log10 of an absent component's free concentration (underflows to 0)
REL_TOL = 1e-10


@dataclass(frozen=True)
class ChemicalSystem:
    """Components, species and solids of one set of metals and ligands.

    Attributes
    ----------
    components : tuple of str
        Metals, then ligands, then ``"H+"``.
    species : tuple of str
        Every dissolved species, the free components first.
    nu : ndarray, shape (S, C)
        Stoichiometry of each species in the components.
    charge : ndarray, shape (S,)
    constants : tuple
        FormationConstant of each species (None for a free component).
    solids, nu_solid, solid_constants
        The same for the solids that may form.
    """

    components: tuple[str, ...]
    species: tuple[str, ...]
    nu: NDArray[np.int64]
    charge: NDArray[np.int64]
    constants: tuple[FormationConstant | None, ...]
    solids: tuple[str, ...]
    solid_metals: tuple[str, ...]
    nu_solid: NDArray[np.int64]
    solid_constants: tuple[FormationConstant, ...]

    def index(self, component: str) -> int:
        return self.components.index(component)

    def log_K(self, ionic_strength_M: ArrayLike, temperature_C: ArrayLike, A: ArrayLike | None = None) -> tuple[Array, Array]:
        """log10 concentration constants of species (B, S) and solids (B, P) at the given conditions."""
        I = np.atleast_1d(np.asarray(ionic_strength_M, dtype=float))
        T = np.broadcast_to(np.asarray(temperature_C, dtype=float), I.shape)
        real = [k for k in self.constants if k is not None]
        lk = np.zeros(I.shape + (len(self.species),))
        mask = np.array([k is not None for k in self.constants])
        if real:
            lk[:, mask] = corrected(real, I, T, A)
        ls = corrected(list(self.solid_constants), I, T, A) if self.solids else np.zeros(I.shape + (0,))
        return lk, ls

    def uses(self) -> list[FormationConstant]:
        return [k for k in self.constants if k is not None] + list(self.solid_constants)


@lru_cache(maxsize=256)
def build_system(metals: tuple[str, ...], ligands: tuple[str, ...], solids: bool = True) -> ChemicalSystem:
    """The chemical system of some metals and ligands, with every complex in the database between them.

    Parameters
    ----------
    metals, ligands : tuple of str
        Database ids (``"Ca"``, ``"Fe(III)"``; ``"EDTA"``, ``"NH3"``, ``"EBT"``).
    solids : bool
        Include the hydroxides and ligand salts that may precipitate.
    """
    db = database()
    metals = tuple(db.metal(m) for m in metals)
    for lig in ligands:
        if lig not in db.charges or lig in db.metals or lig == H:
            raise InputError(f"unknown ligand {lig!r}")
    comps = (*metals, *ligands, H)
    cidx = {c: i for i, c in enumerate(comps)}
    names: list[str] = []
    rows: list[np.ndarray] = []
    consts: list[FormationConstant | None] = []
    charges: list[int] = []

    def add(name: str, stoich: Mapping[str, int], const: FormationConstant | None, z: int) -> None:
        row = np.zeros(len(comps), dtype=np.int64)
        for c, v in stoich.items():
            row[cidx[c]] = v
        names.append(name)
        rows.append(row)
        consts.append(const)
        charges.append(z)

    for c in comps:
        add(c, {c: 1}, None, db.charges[c])
    add("OH-", {H: -1}, db.water, -1)
    for lig in ligands:
        for k in db.protonation.get(lig, ()):
            add(k.species, k.stoichiometry, k, k.charge)
    for m in metals:
        for k in db.hydrolysis.get(m, ()):
            add(k.species, k.stoichiometry, k, k.charge)
        for lig in ligands:
            for k in db.complexes.get((m, lig), ()):
                add(k.species, k.stoichiometry, k, k.charge)
    s_names, s_metals, s_rows, s_consts = [], [], [], []
    if solids:
        for m in metals:
            for s in db.solids.get(m, ()):
                if all(c in cidx for c in s.constant.stoichiometry):
                    row = np.zeros(len(comps), dtype=np.int64)
                    for c, v in s.constant.stoichiometry.items():
                        row[cidx[c]] = v
                    s_names.append(s.name)
                    s_metals.append(m)
                    s_rows.append(row)
                    s_consts.append(s.constant)
    return ChemicalSystem(
        components=comps, species=tuple(names), nu=np.array(rows), charge=np.array(charges),
        constants=tuple(consts), solids=tuple(s_names), solid_metals=tuple(s_metals),
        nu_solid=np.array(s_rows, dtype=np.int64).reshape(len(s_rows), len(comps)), solid_constants=tuple(s_consts))


@dataclass(frozen=True)
class Equilibrium:
    """The solved equilibrium at B points.

    Attributes
    ----------
    c : ndarray, shape (B, S)
        Species concentrations [mol/L].
    solid_amount : ndarray, shape (B, P)
        Solids present [mol per litre of solution]; 0 where the solid is absent.
    saturation_index : ndarray, shape (B, P)
        log10(IAP/Ksp) of each solid (0 where present, negative where it would dissolve).
    ionic_strength_M, pH : ndarray, shape (B,)
    max_residual : float
        Largest relative mass-balance residual reached.
    """

    system: ChemicalSystem
    c: Array
    solid_amount: Array
    saturation_index: Array
    ionic_strength_M: Array
    pH: Array
    totals: Array
    max_residual: float
    iterations: int

    def free(self, component: str) -> Array:
        return self.c[:, self.system.index(component)]

    def bound(self, component: str, partner: str) -> Array:
        """Concentration of ``component`` held in species that also contain ``partner`` [mol/L]."""
        i, j = self.system.index(component), self.system.index(partner)
        nu = self.system.nu
        return self.c @ (nu[:, i] * (nu[:, j] > 0))

    def in_solids(self, component: str) -> Array:
        i = self.system.index(component)
        return self.solid_amount @ self.system.nu_solid[:, i] if self.system.solids else np.zeros(len(self.c))

    def solids_present(self, point: int, threshold: float = 1e-12) -> list[str]:
        return [s for s, n in zip(self.system.solids, self.solid_amount[point]) if n > threshold]


def _ionic_strength(system: ChemicalSystem, c: Array, background: Array) -> Array:
    return 0.5 * c @ (system.charge.astype(float) ** 2) + background


def solve(system: ChemicalSystem, totals: ArrayLike, pH: ArrayLike | None = None, ionic_strength_M: ArrayLike | None = 0.1,
          temperature_C: ArrayLike = 25.0, *, pH_scale: str = "activity", background_ionic_strength_M: ArrayLike = 0.0,
          A: ArrayLike | None = None, log_Kw_shift: float = 0.0, include_solids: bool = True,
          point_labels: Sequence[str] | None = None, tol: float = REL_TOL) -> Equilibrium:
    """Solve the equilibrium at B points at once.

    Parameters
    ----------
    system : ChemicalSystem
    totals : array_like, shape (B, C) or (C,)
        Total (analytical) concentration of each component [mol/L]. The H+ entry is the total proton
        excess over the fully deprotonated ligands and water; it is used only when ``pH`` is None.
    pH : array_like, shape (B,), optional
        The pH held by the buffer. None: the pH is free and follows from the proton balance.
    ionic_strength_M : array_like or None
        Fixed ionic strength [mol/L] (set by the buffer and background electrolyte), or None to compute
        it from the species plus ``background_ionic_strength_M``.
    temperature_C : array_like
        [degC].
    pH_scale : str
        ``"activity"`` (-log a(H+), default) or ``"concentration"``.
    A : array_like, optional
        Davies A to use instead of the one computed from the temperature.
    log_Kw_shift : float
        Added to log Kw (and so to every hydroxo species), e.g. log10 a(H2O) to match a reference code.
    include_solids : bool
        Allow solids to form.
    point_labels : sequence of str, optional
        Names of the points for error messages.

    Returns
    -------
    Equilibrium
    """
    T_tot = np.atleast_2d(np.asarray(totals, dtype=float))
    B, C = T_tot.shape
    if C != len(system.components):
        raise InputError(f"totals need {len(system.components)} columns ({', '.join(system.components)}), got {C}")
    iH = system.index(H)
    mass_cols = [i for i in range(C) if i != iH]
    if np.any(~np.isfinite(T_tot[:, mass_cols])) or np.any(T_tot[:, mass_cols] < 0):
        raise InputError("totals must be finite and not negative")
    free_pH = pH is None
    temp = np.broadcast_to(np.asarray(temperature_C, dtype=float), (B,)).copy()
    bg = np.broadcast_to(np.asarray(background_ionic_strength_M, dtype=float), (B,))
    auto_I = ionic_strength_M is None
    I = bg.copy() if auto_I else np.broadcast_to(np.asarray(ionic_strength_M, dtype=float), (B,)).copy()
    pH_arr = None if free_pH else np.broadcast_to(np.asarray(pH, dtype=float), (B,)).copy()
    if pH_arr is not None and (np.any(~np.isfinite(pH_arr)) or np.any(pH_arr < 0) or np.any(pH_arr > 14)):
        raise InputError("pH must be between 0 and 14")
    nu = system.nu.astype(float)
    nu_s_all = system.nu_solid.astype(float)
    P_used = nu_s_all.shape[0] if include_solids else 0
    # water activity enters once per H2O consumed, i.e. once per H+ released (hydroxo species and solids)
    shift_sp = np.maximum(-nu[:, iH], 0.0) * log_Kw_shift
    shift_s = np.maximum(-nu_s_all[:, iH], 0.0) * log_Kw_shift
    unknown = list(range(C)) if free_pH else mass_cols
    A_T = davies_A(temp) if A is None else np.broadcast_to(np.asarray(A, dtype=float), (B,))
    x = None
    solids_amt = np.zeros((B, P_used))
    active = np.zeros((B, P_used), dtype=bool)
    iterations = 0
    for _outer in range(60):
        logK, logKs = system.log_K(I, temp, A)
        logK, logKs = logK + shift_sp, logKs + shift_s
        if free_pH:
            K_eff, Ks_eff = logK, logKs
        else:
            log_cH = -pH_arr if pH_scale == "concentration" else -pH_arr + A_T * davies_f(I)
            K_eff = logK + nu[:, iH][None, :] * log_cH[:, None]
            Ks_eff = logKs + nu_s_all[:, iH][None, :] * log_cH[:, None]
        x, solids_amt, active, it, resid = _solve_fixed_I(
            nu[:, unknown], K_eff, T_tot[:, unknown], nu_s_all[:P_used][:, unknown], Ks_eff[:, :P_used], x,
            solids_amt, active, free_pH_col=(unknown.index(iH) if free_pH else None), tol=tol, labels=point_labels)
        iterations += it
        if not auto_I:
            break
        I_new = _ionic_strength(system, 10.0 ** np.minimum(K_eff + x @ nu[:, unknown].T, 300.0), bg)
        done = np.max(np.abs(I_new - I) / np.maximum(I_new, 1e-300)) < 1e-13
        I = I_new
        if done:
            break
    c = 10.0 ** np.minimum(K_eff + x @ nu[:, unknown].T, 300.0)
    log_free = np.zeros((B, C))
    log_free[:, unknown] = x
    if free_pH:
        log_cH = x[:, unknown.index(iH)]
        pH_arr = -log_cH if pH_scale == "concentration" else -(log_cH - A_T * davies_f(I))
    else:
        log_free[:, iH] = log_cH
    if free_pH:
        si = log_free @ nu_s_all.T + logKs
    else:
        si = log_free[:, mass_cols] @ nu_s_all[:, mass_cols].T + Ks_eff
    amounts = np.zeros((B, nu_s_all.shape[0]))
    amounts[:, :P_used] = solids_amt
    present = np.zeros_like(amounts, dtype=bool)
    present[:, :P_used] = active
    si = np.where(present, 0.0, si)
    return Equilibrium(system=system, c=c, solid_amount=amounts, saturation_index=si, ionic_strength_M=I,
                       pH=pH_arr, totals=T_tot, max_residual=resid, iterations=iterations)


def _pcf(nu: Array, K: Array, T: Array, x: Array, active: Array, n_iter: int) -> Array:
    """Positive continued fractions: x_i += (log T_i - log S_i) / max nu_si, a robust way to a starting point."""
    pos = np.where(nu > 0, nu, 0.0)
    neg = np.where(nu < 0, -nu, 0.0)
    nmax = np.maximum(pos.max(axis=0), 1.0)
    for _ in range(n_iter):
        c = 10.0 ** np.minimum(K + x @ nu.T, 300.0)
        S_pos = c @ pos
        S_neg = c @ neg
        target = T + S_neg
        ok = active & (target > 0) & (S_pos > 0)
        step = np.where(ok, (np.log10(np.where(ok, target, 1.0)) - np.log10(np.where(ok, S_pos, 1.0))) / nmax, 0.0)
        x = x + np.clip(step, -8.0, 8.0)
    return x


def _residual(nu, nu_s, K, Ks, T, x, s, active_c, active_s):
    c = 10.0 ** np.minimum(K + x @ nu.T, 300.0)
    R = c @ nu + s @ nu_s - T
    scale = c @ np.abs(nu) + s @ np.abs(nu_s) + np.abs(T) + 1e-300
    Rs = np.where(active_c, R / scale, 0.0)
    G = np.where(active_s, x @ nu_s.T + Ks, 0.0) if nu_s.shape[0] else np.zeros((len(x), 0))
    return c, R, scale, Rs, G


def _solve_fixed_I(nu, K, T, nu_s, Ks, x0, s0, active_s, free_pH_col, tol, labels):
    """Newton with an active set of solids, at fixed constants. Shapes: nu (S, n), K (B, S), T (B, n)."""
    B, n = T.shape
    P = nu_s.shape[0]
    active_c = T > 0
    if free_pH_col is not None:
        active_c[:, free_pH_col] = True
    if x0 is None:
        x = np.where(active_c, np.log10(np.where(T > 0, T, 1.0)), LOG_MIN)
        if free_pH_col is not None:
            x[:, free_pH_col] = -7.0
        x = _pcf(nu, K, T, x, active_c, 40)
        x = np.where(active_c, x, LOG_MIN)
    else:
        x = np.where(active_c, x0, LOG_MIN)
    s = s0.copy()
    act = active_s.copy()
    if P:
        si = x @ nu_s.T + Ks
        # start with the most supersaturated solid of each point present
        for b in np.nonzero((si > 0).any(axis=1) & ~act.any(axis=1))[0]:
            act[b, np.argmax(si[b])] = True
    total_it = 0
    for _round in range(4 * P + 3):
        x, s, it, ok, resid = _newton(nu, K, T, nu_s, Ks, x, s, active_c, act, tol)
        total_it += it
        if not P:
            break
        changed = False
        neg = act & (s < 0)
        if neg.any():
            for b in np.nonzero(neg.any(axis=1))[0]:
                j = np.argmin(np.where(act[b], s[b], np.inf))
                act[b, j] = False
                s[b, j] = 0.0
            changed = True
        si = x @ nu_s.T + Ks
        sup = ~act & (si > 1e-9)
        rows = np.nonzero(sup.any(axis=1) & ~neg.any(axis=1))[0]
        for b in rows:
            act[b, np.argmax(np.where(sup[b], si[b], -np.inf))] = True
            changed = True
        if not changed:
            break
    s = np.where(act, s, 0.0)
    _, _, _, Rs, G = _residual(nu, nu_s, K, Ks, T, x, s, active_c, act)
    bad = (np.abs(Rs) > tol).any(axis=1) | (np.abs(G) > 1e-8).any(axis=1) | ~np.isfinite(x).all(axis=1)
    if P:
        si = x @ nu_s.T + Ks
        bad |= (~act & (si > 1e-6)).any(axis=1) | (act & (s < -1e-14)).any(axis=1)
    if bad.any():
        b = int(np.nonzero(bad)[0][0])
        label = labels[b] if labels is not None else f"point {b}"
        raise ConvergenceError(f"equilibrium did not converge at {label} (of {B}): largest relative residual "
                               f"{float(np.max(np.abs(Rs[b]))):.2e}, totals {T[b].tolist()}")
    return x, s, act, total_it, float(np.max(np.abs(Rs))) if Rs.size else 0.0


def _newton(nu, K, T, nu_s, Ks, x, s, active_c, active_s, tol, max_iter=200):
    B, n = x.shape
    P = nu_s.shape[0]
    N = n + P
    eye = np.eye(N)
    todo = np.ones(B, dtype=bool)
    it = 0
    for it in range(1, max_iter + 1):
        c, R, scale, Rs, G = _residual(nu, nu_s, K, Ks, T, x, s, active_c, active_s)
        merit = np.sum(Rs ** 2, axis=1) + np.sum(G ** 2, axis=1)
        conv = (np.abs(Rs) <= tol * 0.1).all(axis=1) & (np.abs(G) <= 1e-10).all(axis=1)
        todo = ~conv
        if not todo.any():
            break
        idx = np.nonzero(todo)[0]
        cb = c[idx]
        J = np.zeros((len(idx), N, N))
        J[:, :n, :n] = LN10 * np.einsum("sj,bs,sk->bjk", nu, cb, nu, optimize=True)
        if P:
            J[:, :n, n:] = nu_s.T[None]
            J[:, n:, :n] = nu_s[None]
        rhs = np.concatenate([R[idx], G[idx]], axis=1) if P else R[idx].copy()
        # row scaling; inactive components and solids become identity rows
        sc = np.concatenate([scale[idx], np.ones((len(idx), P))], axis=1)
        J /= sc[:, :, None]
        rhs /= sc
        inactive = ~np.concatenate([active_c[idx], active_s[idx]], axis=1) if P else ~active_c[idx]
        J = np.where(inactive[:, :, None] | inactive[:, None, :], 0.0, J)
        J += inactive[:, :, None] * eye[None]
        rhs = np.where(inactive, 0.0, rhs)
        if P:
            # an inactive solid keeps amount 0: its equation is s = 0
            rhs[:, n:] = np.where(active_s[idx], rhs[:, n:], s[idx])
        try:
            d = -np.linalg.solve(J, rhs[..., None])[..., 0]
        except np.linalg.LinAlgError:
            d = -np.stack([np.linalg.lstsq(j, r, rcond=None)[0] for j, r in zip(J, rhs)])
        dx, ds = d[:, :n], d[:, n:]
        big = np.max(np.abs(dx), axis=1, initial=0.0)
        f = np.where(big > 2.0, 2.0 / np.maximum(big, 1e-300), 1.0)
        dx *= f[:, None]
        ds *= f[:, None]
        # backtracking line search on the scaled residual
        x_old, s_old, m_old = x[idx], s[idx], merit[idx]
        lam = np.ones(len(idx))
        pending = np.ones(len(idx), dtype=bool)
        x_new, s_new = x_old.copy(), s_old.copy()
        for _ in range(12):
            p = np.nonzero(pending)[0]
            xt = x_old[p] + lam[p, None] * dx[p]
            st = s_old[p] + lam[p, None] * ds[p] if P else s_old[p]
            _, _, _, Rt, Gt = _residual(nu, nu_s, K[idx[p]], Ks[idx[p]], T[idx[p]], xt, st, active_c[idx[p]], active_s[idx[p]])
            mt = np.sum(Rt ** 2, axis=1) + np.sum(Gt ** 2, axis=1)
            good = (mt < m_old[p]) & np.isfinite(mt)
            x_new[p[good]] = xt[good]
            s_new[p[good]] = st[good]
            pending[p[good]] = False
            lam[p[~good]] *= 0.5
            if not pending.any():
                break
        p = np.nonzero(pending)[0]  # accept a small step anyway so that no point stalls
        x_new[p] = x_old[p] + lam[p, None] * dx[p]
        if P:
            s_new[p] = s_old[p] + lam[p, None] * ds[p]
        x[idx] = np.where(active_c[idx], x_new, LOG_MIN)
        if P:
            s[idx] = np.where(active_s[idx], s_new, 0.0)
    c, R, scale, Rs, G = _residual(nu, nu_s, K, Ks, T, x, s, active_c, active_s)
    ok = (np.abs(Rs) <= tol).all(axis=1) & (np.abs(G) <= 1e-8).all(axis=1)
    return x, s, it, ok, float(np.max(np.abs(Rs), initial=0.0))
