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
CONTINUATION_STRIDE = 8  # in a batch of at least 32 points, every 8th point is solved first (continuation)


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
        args = (nu[:, unknown], K_eff, T_tot[:, unknown], nu_s_all[:P_used][:, unknown], Ks_eff[:, :P_used])
        fcol = unknown.index(iH) if free_pH else None
        if x is None and B >= 4 * CONTINUATION_STRIDE:
            # continuation: solve every k-th point from scratch, then start each point from its nearest solved
            # neighbour (points of a curve or population given in order are close to their neighbours)
            sub = np.arange(0, B, CONTINUATION_STRIDE)
            nu_u, K_u, T_u, nu_s_u, Ks_u = args  # only the per-point arrays are subsampled
            xs, ss, acts, it0, _ = _solve_fixed_I(nu_u, K_u[sub], T_u[sub], nu_s_u, Ks_u[sub], None,
                                                  solids_amt[sub], active[sub], free_pH_col=fcol, tol=tol,
                                                  labels=None if point_labels is None else [point_labels[i] for i in sub])
            # linear interpolation (in log concentration, along the batch order) between the solved points
            pos = np.arange(B) / CONTINUATION_STRIDE
            lo = np.minimum(np.floor(pos).astype(int), len(sub) - 1)
            hi = np.minimum(lo + 1, len(sub) - 1)
            w = np.clip(pos - lo, 0.0, 1.0)[:, None]
            ok_lo, ok_hi = xs[lo] > LOG_MIN + 1, xs[hi] > LOG_MIN + 1
            x = np.where(ok_lo & ok_hi, (1 - w) * xs[lo] + w * xs[hi], np.where(ok_lo, xs[lo], xs[hi]))
            solids_amt, active = ss[lo], acts[lo]
            iterations += it0
        x, solids_amt, active, it, resid = _solve_fixed_I(*args, x, solids_amt, active, free_pH_col=fcol, tol=tol,
                                                          labels=point_labels)
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
        c = np.exp(LN10 * np.minimum(K + x @ nu.T, 300.0))
        S_pos = c @ pos
        S_neg = c @ neg
        target = T + S_neg
        ok = active & (target > 0) & (S_pos > 0)
        step = np.where(ok, (np.log10(np.where(ok, target, 1.0)) - np.log10(np.where(ok, S_pos, 1.0))) / nmax, 0.0)
        x = x + np.clip(step, -8.0, 8.0)
    return x


def _solve_fixed_I(nu, K, T, nu_s, Ks, x0, s0, active_s, free_pH_col, tol, labels, max_iter=300):
    """Damped Newton on a convex function with the solids as linear constraints, for B points at once.

    The mass balances are the stationarity conditions of the strictly convex function
    f(x) = sum_s c_s(x) / ln 10 - T . x, with c_s = 10**(K_s + nu_s . x): its gradient is the residual
    R = nu^T c - T and its Hessian ln10 nu^T diag(c) nu is the Jacobian. A solid is the linear constraint
    SI_p(x) = nu_p . x + Ks_p <= 0; where it is active its amount is the constraint's multiplier. So each
    iteration solves the KKT system of the active set, limits the step by the inactive solids (ratio test:
    a solid that becomes saturated joins the set), and backtracks on f (Armijo), which makes the method
    globally convergent; a solid whose amount turns negative leaves the set.
    Shapes: nu (S, n), K (B, S), T (B, n), nu_s (P, n), Ks (B, P).
    """
    B, n = T.shape
    P = nu_s.shape[0]
    N = n + P
    eye = np.eye(N)
    active_c = T > 0
    if free_pH_col is not None:
        active_c[:, free_pH_col] = True
    if x0 is None:
        x = np.where(active_c, np.log10(np.where(T > 0, T, 1.0)), LOG_MIN)
        if free_pH_col is not None:
            x[:, free_pH_col] = -7.0
        x = _pcf(nu, K, T, x, active_c, 15)
    else:
        # a guess from another point (continuation or the previous ionic strength): components absent there but
        # present here start from their totals, then a few sweeps fit the guess to this point's totals
        x = np.where(active_c & (x0 <= LOG_MIN + 1.0), np.log10(np.where(T > 0, T, 1.0)), x0)
        x = _pcf(nu, K, T, np.where(active_c, x, LOG_MIN), active_c, 3)
    x = np.where(active_c, x, LOG_MIN)
    # the active set starts empty from a feasible point (solids join through the ratio test), so that a guess
    # from another point cannot impose a solid that does not belong here
    W = np.zeros((B, P), dtype=bool)
    s = np.zeros((B, P))
    if P:
        x = _feasible(x, nu_s, Ks, active_c)
    abs_nu, abs_nu_s = np.abs(nu), np.abs(nu_s)
    nu_pairs = LN10 * (nu[:, :, None] * nu[:, None, :]).reshape(nu.shape[0], n * n)
    done = np.zeros(B, dtype=bool)
    it = 0
    Rs = np.zeros((B, n))
    for it in range(1, max_iter + 1):
        idx = np.nonzero(~done)[0]
        if not len(idx):
            break
        xb, Kb, Tb, acb = x[idx], K[idx], T[idx], active_c[idx]
        c = np.exp(LN10 * np.minimum(Kb + xb @ nu.T, 300.0))
        R = np.where(acb, c @ nu - Tb, 0.0)
        J = (c @ nu_pairs).reshape(len(idx), n, n)  # ln10 sum_s nu_sj nu_sk c_s, one matrix product
        inactive = ~acb
        if P:
            Wb = W[idx]
            Mx = np.zeros((len(idx), N, N))
            Mx[:, :n, :n] = J
            Mx[:, :n, n:] = np.where(Wb[:, None, :], nu_s.T[None], 0.0)
            Mx[:, n:, :n] = np.where(Wb[:, :, None], nu_s[None], 0.0)
            Mx[:, n:, n:] = np.where(Wb[:, :, None], 0.0, eye[n:, n:][None])
            rhs = np.concatenate([-R, np.where(Wb, -(xb @ nu_s.T + Ks[idx]), 0.0)], axis=1)
        else:
            Mx, rhs = J, -R
        if inactive.any():  # an absent component keeps its value: identity row and column
            Mx[:, :n, :] = np.where(inactive[:, :, None], 0.0, Mx[:, :n, :])
            Mx[:, :, :n] = np.where(inactive[:, None, :], 0.0, Mx[:, :, :n])
            Mx[:, :n, :n] += inactive[:, :, None] * np.eye(n)[None]
        # row scaling by the component totals keeps the KKT matrix well conditioned
        scale = c @ abs_nu + np.abs(Tb) + 1e-300
        Dr = np.concatenate([1.0 / scale, np.ones((len(idx), P))], axis=1) if P else 1.0 / scale
        Mx_s = Mx * Dr[:, :, None]
        try:
            sol = np.linalg.solve(Mx_s, (rhs * Dr)[..., None])[..., 0]
        except np.linalg.LinAlgError:
            sol = np.stack([np.linalg.lstsq(m, r, rcond=None)[0] for m, r in zip(Mx_s, rhs * Dr)])
        dx = sol[:, :n]  # the solid amounts come from the least-squares fit above, not from the multipliers
        dx = np.where(acb, dx, 0.0)
        # solid amounts from the mass balances (weighted least squares over the active solids): more accurate
        # than the KKT multipliers, which carry the conditioning of the scaled system
        if P:
            Aw = np.where(Wb[:, :, None], nu_s[None], 0.0) / scale[:, None, :]
            norm = np.maximum(np.max(np.abs(Aw), axis=(1, 2)), 1e-300)[:, None, None]
            Aw = Aw / norm  # s is unchanged by a common scale; this keeps G from underflowing
            G_ = Aw @ np.swapaxes(Aw, 1, 2) + (~Wb)[:, :, None] * np.eye(P)[None]
            s[idx] = np.where(Wb, np.linalg.solve(G_, -(Aw @ (R / scale / norm[:, :, 0])[..., None]))[..., 0], 0.0)
        # convergence: mass balances with the current solid amounts, and solids consistent
        s_cur = s[idx]
        Rtot = R + s_cur @ nu_s if P else R
        scale_s = scale + (s_cur @ abs_nu_s if P else 0.0)
        Rs_b = np.where(acb, Rtot / np.where(Tb > 0, Tb, scale_s), 0.0)  # relative to the total (1e-10)
        Rs[idx] = Rs_b
        conv = (np.abs(Rs_b) <= tol).all(axis=1)
        if P:
            SI = xb @ nu_s.T + Ks[idx]
            conv &= (np.where(Wb, np.abs(SI), 0.0) <= 1e-9).all(axis=1)
            conv &= (np.where(~Wb, SI, -1.0) <= 1e-9).all(axis=1)
            neg = Wb & (s_cur < -1e-16 * np.maximum(1.0, np.abs(s_cur)))
            drop = conv & neg.any(axis=1)
            if drop.any():  # converged with a negative solid amount: that solid dissolves
                for k in np.nonzero(drop)[0]:
                    j = int(np.argmin(np.where(Wb[k], s_cur[k], np.inf)))
                    W[idx[k], j] = False
                    s[idx[k], j] = 0.0
                conv &= ~drop
        done[idx[conv]] = True
        go = ~conv
        if not go.any():
            continue
        g = idx[go]
        dxg = dx[go]
        # step: cap, ratio test against the inactive solids, then Armijo backtracking on f
        big = np.max(np.abs(dxg), axis=1, initial=0.0)
        alpha = np.where(big > 4.0, 4.0 / np.maximum(big, 1e-300), 1.0)
        block = np.full(len(g), -1)
        if P:
            SIg = x[g] @ nu_s.T + Ks[g]
            rate = dxg @ nu_s.T
            with np.errstate(divide="ignore", invalid="ignore"):
                lim = np.where(~W[g] & (rate > 1e-14), np.maximum(-SIg, 0.0) / rate, np.inf)
            jmin = np.argmin(lim, axis=1)
            amin = lim[np.arange(len(g)), jmin]
            hit = amin < alpha
            alpha = np.where(hit, amin, alpha)
            block = np.where(hit, jmin, -1)
        c_g = c[go]
        slope = np.sum(np.where(active_c[g], R[go], 0.0) * dxg, axis=1)
        near = np.max(np.abs(Rs_b[go]), axis=1) < 1e-5  # Newton region: f's rounding would fool Armijo
        pending = ~near & (slope < 0)
        for _ in range(40):
            if not pending.any():
                break
            q = np.nonzero(pending)[0]
            df = _delta_f(nu, c_g[q], T[g[q]], alpha[q, None] * dxg[q], active_c[g[q]])
            ok = df <= 1e-4 * alpha[q] * slope[q]
            pending[q[ok]] = False
            alpha[q[~ok]] *= 0.5
            block[q[~ok]] = -1
        if pending.any():  # backtracking exhausted (rounding in f): take the capped Newton step
            alpha[pending] = np.where(big[pending] > 4.0, 4.0 / np.maximum(big[pending], 1e-300), 1.0)
        x[g] = np.where(active_c[g], x[g] + alpha[:, None] * dxg, LOG_MIN)
        if P:
            for k in np.nonzero(block >= 0)[0]:
                W[g[k], block[k]] = True
    bad = ~done | ~np.isfinite(x).all(axis=1)
    if bad.any():
        b = int(np.nonzero(bad)[0][0])
        label = labels[b] if labels is not None else f"point {b}"
        raise ConvergenceError(f"equilibrium did not converge at {label} (of {B}) in {max_iter} iterations: largest relative "
                               f"mass-balance residual {float(np.max(np.abs(Rs[b]))):.2e}, totals {T[b].tolist()}")
    s = np.where(W, np.maximum(s, 0.0), 0.0) if P else s
    return x, s, W, it, float(np.max(np.abs(Rs), initial=0.0))


def _delta_f(nu, c, T, dx, active):
    """Change of the convex function f (see _solve_fixed_I) along a step, computed without cancellation.

    f(x) = sum_s c_s / ln 10 - T . x, so f(x + dx) - f(x) = sum_s c_s expm1(ln10 nu_s . dx) / ln 10 - T . dx.
    """
    dlog = np.minimum(dx @ nu.T, 300.0)
    return np.sum(c * np.expm1(LN10 * dlog), axis=1) / LN10 - np.sum(np.where(active, T * dx, 0.0), axis=1)


def _feasible(x, nu_s, Ks, active_c):
    """Lower metal free concentrations until no solid is supersaturated (a feasible start for the active set)."""
    x = x.copy()
    for _ in range(10):
        SI = x @ nu_s.T + Ks
        if not (SI > 0).any():
            break
        for p in range(nu_s.shape[0]):
            over = SI[:, p] > 0
            if not over.any():
                continue
            metals = np.nonzero(nu_s[p] > 0)[0]
            if not len(metals):
                continue
            j = metals[0]
            x[over, j] -= (SI[over, p] + 1e-6) / nu_s[p, j]
    return np.where(active_c, x, LOG_MIN)
