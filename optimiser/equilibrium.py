"""Full chemical equilibrium of metals, titrant, buffer, masking agents and indicator, for many points at once.

Unknowns are the log10 free concentrations of the components (metal ions, fully deprotonated ligands and,
when the pH is free, H+) and the amounts of the solids present. Every species concentration is

.. math:: \\log c_s = \\log K_s(I, T) + \\sum_i \\nu_{si} \\log c_i

and the equations are the mass balances ``sum_s nu_si c_s + sum_p nu_pi n_p = T_i`` and, for each solid
present, its solubility product (saturation index zero). Solids appear where their saturation index passes
zero and go again where their amount would turn negative (an active-set loop).

The solve for a batch of B points (a whole titration curve, or a whole population of candidate methods):
the constants are moved to each point's ionic strength and temperature here, in numpy, and the points are
solved one after the other by the compiled kernel of :mod:`optimiser.kernel` (damped Newton in log
concentrations with an active set for the solids and a backtracking line search, started by continuation
from the previous point or by positive continued fractions), to a relative mass-balance residual of 1e-10
(checked), or the solver raises :class:`~optimiser.errors.ConvergenceError` naming the point. It never
returns NaN.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property, lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import kernel
from .constants import H, FormationConstant, constant_table, corrected, database, davies_A, davies_f
from .errors import ConvergenceError, InputError

Array = NDArray[np.float64]
REL_TOL = 1e-10
I_TOL = 1e-8  # relative change of a computed ionic strength at which its iteration stops: log K then within 1e-8


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
        """log10 concentration constants of species (B, S) and solids (B, P) at the given conditions.

        log K(I, T) = log K(0, T) + A(T) dz2 f(I) (see :func:`~optimiser.constants.log_K_at`): the part at
        I = 0 is computed once per distinct temperature (and A) and remembered, the Davies term per point.
        """
        I = np.atleast_1d(np.asarray(ionic_strength_M, dtype=float))
        T = np.broadcast_to(np.asarray(temperature_C, dtype=float), I.shape).reshape(-1)
        A_ = np.full(T.shape, -1.0) if A is None else np.broadcast_to(np.asarray(A, dtype=float), I.shape).reshape(-1)
        keys = np.stack([T, A_], axis=-1)
        if len(keys) > 1 and (keys == keys[:1]).all():
            first, where = keys[:1], np.zeros(len(keys), dtype=np.int64)
        else:
            first, where = np.unique(keys, axis=0, return_inverse=True)
            where = where.reshape(-1)
        species_table, mask, solid_table = self._tables

        def at_zero(rows: Array) -> tuple[Array, Array, Array]:
            Tn, An = rows[:, 0], (None if A is None else rows[:, 1])
            lk0 = np.zeros((len(rows), len(self.species)))
            lk0[:, mask] = corrected(species_table, 0.0, Tn, An)
            return lk0, corrected(solid_table, 0.0, Tn, An), (davies_A(Tn) if A is None else An)

        if len(first) > 64:  # many conditions (an A per point, say): computed, not remembered
            lk0, ls0, A_T = at_zero(first)
        else:
            memo = self._log_K_memo
            rows = [tuple(r) for r in first.tolist()]
            new = [k for k, r in enumerate(rows) if r not in memo]
            if new:
                if len(memo) + len(new) > 4096:
                    memo.clear()
                    new = list(range(len(rows)))
                for k, lk_k, ls_k, A_k in zip(new, *at_zero(first[new])):
                    memo[rows[k]] = (lk_k, ls_k, float(A_k))
            lk0 = np.stack([memo[r][0] for r in rows])
            ls0 = np.stack([memo[r][1] for r in rows])
            A_T = np.array([memo[r][2] for r in rows])
        lk0, ls0 = lk0[where], ls0[where]
        Af = (A_T[where] * davies_f(I.reshape(-1)))[:, None]
        lk = lk0 + Af * self.charge_terms[0][None, :]
        ls = ls0 + Af * solid_table[1][None, :]
        return lk.reshape(I.shape + (-1,)), ls.reshape(I.shape + (-1,))

    @cached_property
    def charge_terms(self) -> tuple[Array, Array]:
        """Davies charge terms dz2 of the species (0 for the free components) and of the solids."""
        species_table, mask, solid_table = self._tables
        dz2 = np.zeros(len(self.species))
        dz2[mask] = species_table[1]
        return dz2, np.ascontiguousarray(solid_table[1], dtype=float)

    @cached_property
    def charge_squared(self) -> Array:
        return np.ascontiguousarray(self.charge.astype(float) ** 2)

    @cached_property
    def _log_K_memo(self) -> dict[tuple[float, float], tuple[Array, Array, float]]:
        """log K at I = 0 and Davies A already computed, by (T, A) (A is -1 for the default)."""
        return {}

    @cached_property
    def _tables(self) -> tuple[Array, NDArray[np.bool_], Array]:
        real = [k for k in self.constants if k is not None]
        mask = np.array([k is not None for k in self.constants])
        return constant_table(real), mask, constant_table(self.solid_constants)

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
    iterations : int
        Most Newton iterations any point took (summed over the ionic-strength passes).
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

    def mass_balance_error(self) -> float:
        """Largest relative mass-balance error over the points and the metals and ligands, recomputed from the
        species and solids returned (an independent check of the solver's own residual)."""
        nu = self.system.nu[:, :-1].astype(float)  # every component but H+ (last)
        held = self.c @ nu + (self.solid_amount @ self.system.nu_solid[:, :-1] if self.system.solids else 0.0)
        tot = self.totals[:, :-1]
        m = tot > 0
        return float(np.max(np.abs(held[m] - tot[m]) / tot[m], initial=0.0))


def solve(system: ChemicalSystem, totals: ArrayLike, pH: ArrayLike | None = None, ionic_strength_M: ArrayLike | None = 0.1,
          temperature_C: ArrayLike = 25.0, *, pH_scale: str = "activity", background_ionic_strength_M: ArrayLike = 0.0,
          A: ArrayLike | None = None, log_Kw_shift: ArrayLike = 0.0, include_solids: bool = True,
          point_labels: Sequence[str] | None = None, restart: ArrayLike | None = None, tol: float = REL_TOL) -> Equilibrium:
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
    log_Kw_shift : array_like, shape (B,) or scalar
        Added to log Kw (and so to every hydroxo species), e.g. log10 a(H2O) to match a reference code.
    include_solids : bool
        Allow solids to form.
    point_labels : sequence of str, optional
        Names of the points for error messages.
    restart : array_like of bool, shape (B,), optional
        Points that start afresh instead of from the previous point's solution (the first point of each
        curve in a batch of several curves). Default: the batch is one run, each point continues from the
        one before (continuation along a curve given in order).

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
    shift_w = np.broadcast_to(np.asarray(log_Kw_shift, dtype=float), (B,))[:, None]
    unknown = list(range(C)) if free_pH else mass_cols
    A_T = davies_A(temp) if A is None else np.broadcast_to(np.asarray(A, dtype=float), (B,))
    if restart is not None and np.shape(restart) not in ((), (B,)):
        raise InputError(f"restart needs one flag per point ({B}), got shape {np.shape(restart)}")
    chain = np.ones(B, dtype=bool) if restart is None else ~np.broadcast_to(np.asarray(restart, dtype=bool), (B,))
    # constants at I = 0 (with the water-activity shift: once per H+ released by a hydroxo species or solid);
    # the kernel moves them to each point's ionic strength and folds in a fixed pH
    K0, Ks0 = system.log_K(np.zeros(B), temp, A)
    K0 = K0 + np.maximum(-nu[:, iH], 0.0)[None, :] * shift_w
    Ks0 = Ks0 + np.maximum(-nu_s_all[:, iH], 0.0)[None, :] * shift_w
    dz2, dz2_s = system.charge_terms
    hco = np.zeros(len(nu)) if free_pH else nu[:, iH].copy()
    hco_s = np.zeros(len(nu_s_all)) if free_pH else nu_s_all[:, iH].copy()
    pH_term = np.zeros(B) if free_pH else -pH_arr
    activity = not free_pH and pH_scale == "activity"
    x, solids_amt, active, c, I, iterations, resid = _run_kernel(
        system, nu[:, unknown], nu_s_all[:P_used][:, unknown], K0, dz2, hco, Ks0[:, :P_used], dz2_s[:P_used],
        hco_s[:P_used], A_T, pH_term, activity, T_tot[:, unknown], I, bg, auto_I, chain,
        unknown.index(iH) if free_pH else None, tol, point_labels)
    # the constants at the ionic strength reached, for the saturation indices of every solid (those not allowed
    # too) and the pH when it is free
    Af = (A_T * davies_f(I))[:, None]
    log_cH = x[:, unknown.index(iH)] if free_pH else (pH_term + (Af[:, 0] if activity else 0.0))
    if free_pH:
        pH_arr = -log_cH if pH_scale == "concentration" else -(log_cH - Af[:, 0])
    si = x @ nu_s_all[:, unknown].T + Ks0 + Af * dz2_s[None, :] + hco_s[None, :] * log_cH[:, None]
    amounts = np.zeros((B, nu_s_all.shape[0]))
    amounts[:, :P_used] = solids_amt
    present = np.zeros_like(amounts, dtype=bool)
    present[:, :P_used] = active
    si = np.where(present, 0.0, si)
    return Equilibrium(system=system, c=c, solid_amount=amounts, saturation_index=si, ionic_strength_M=I,
                       pH=pH_arr, totals=T_tot, max_residual=resid, iterations=iterations)


def warm_up() -> None:
    """Compile the solver's kernel, or load it from numba's cache, by solving one small point."""
    solve(build_system(("Ca",), ("EDTA",)), [0.001, 0.001, 0.0], pH=10.0)


def _run_kernel(system: ChemicalSystem, nu: Array, nu_s: Array, K0: Array, dz2: Array, hco: Array, Ks0: Array,
                dz2_s: Array, hco_s: Array, A: Array, pH_term: Array, activity: bool, T: Array, I: Array, bg: Array,
                auto_I: bool, chain: NDArray[np.bool_], free_pH_col: int | None, tol: float,
                labels: Sequence[str] | None, max_iter: int = 300):
    """Solve B points with the compiled kernel (:func:`optimiser.kernel.solve_points`, which documents the arrays).

    Shapes: nu (S, n), nu_s (P, n), K0 (B, S), Ks0 (B, P), T (B, n). Points where ``chain`` is False start
    from the totals (continued fractions), the others from the previous points' solutions.

    Returns
    -------
    x, solid amounts, solids present, species concentrations, ionic strength, most iterations of any point,
    largest residual

    Raises
    ------
    ConvergenceError
        At the first point that did not converge, named by ``labels``.
    """
    B, n = T.shape
    S, P = nu.shape[0], nu_s.shape[0]
    active_c = np.ascontiguousarray(T > 0)
    if free_pH_col is not None:
        active_c[:, free_pH_col] = True
    ptr, col, val = _csr(nu)
    nmax = np.maximum(np.where(nu > 0, nu, 0.0).max(axis=0, initial=0.0), 1.0)
    x, s, c = np.empty((B, n)), np.empty((B, P)), np.empty((B, S))
    W = np.empty((B, P), dtype=bool)
    I_out, its, res, status = np.empty(B), np.empty(B, dtype=np.int64), np.empty(B), np.empty(B, dtype=np.int64)
    def f64(a):  # float, C-contiguous and writable, so that numba compiles one specialisation only
        return np.require(a, dtype=float, requirements=("C", "W"))
    kernel.solve_points(ptr, col, val, nmax, f64(nu_s), system.charge_squared, f64(K0), f64(dz2), f64(hco),
                        f64(Ks0).reshape(B, P), f64(dz2_s), f64(hco_s), f64(A), f64(pH_term), bool(activity),
                        f64(T), f64(I), f64(bg), bool(auto_I), I_TOL, active_c,
                        -1 if free_pH_col is None else int(free_pH_col), chain, float(tol), int(max_iter),
                        x, s, W, c, I_out, its, res, status)
    bad = (status != kernel.CONVERGED) | ~np.isfinite(x).all(axis=1)
    if bad.any():
        b = int(np.nonzero(bad)[0][0])
        label = labels[b] if labels is not None else f"point {b}"
        raise ConvergenceError(f"equilibrium did not converge at {label} (of {B}) in {max_iter} iterations: largest relative "
                               f"mass-balance residual {res[b]:.2e}, totals {T[b].tolist()}")
    return x, s, W, c, I_out, int(its.max(initial=0)), float(res.max(initial=0.0))


def _csr(nu: Array) -> tuple[NDArray[np.int64], NDArray[np.int64], Array]:
    """Row-compressed stoichiometry: the nonzero coefficients of each species."""
    rows, cols = np.nonzero(nu)
    ptr = np.zeros(nu.shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=nu.shape[0]), out=ptr[1:])
    return ptr, cols.astype(np.int64), nu[rows, cols].astype(float)
