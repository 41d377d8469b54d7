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

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import kernel
from .constants import H, davies_A, davies_f
from .errors import ConvergenceError, InputError
from .system import ChemicalSystem, build_system  # noqa: F401 (build_system: part of this module's API)

Array = NDArray[np.float64]
REL_TOL = 1e-10
I_TOL = 1e-8  # relative change of a computed ionic strength at which its iteration stops: log K then within 1e-8


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
        key = ("bound", component, partner)
        weights = self.system.memo.get(key)
        if weights is None:
            i, j = self.system.index(component), self.system.index(partner)
            nu = self.system.nu
            weights = self.system.memo[key] = nu[:, i] * (nu[:, j] > 0)
        return self.c @ weights

    def in_solids(self, component: str) -> Array:
        i = self.system.index(component)
        return self.solid_amount @ self.system.nu_solid[:, i] if self.system.solids else np.zeros(len(self.c))

    def solids_present(self, point: int, threshold: float = 1e-12) -> list[str]:
        return [s for s, n in zip(self.system.solids, self.solid_amount[point]) if n > threshold]

    def outside_domain(self) -> np.ndarray:
        """Points where the result lies outside the model's documented domain: an ionic strength above
        :data:`optimiser.constants.IONIC_STRENGTH_MAX_M` (beyond Davies) or a pH outside 0-14 (shape (B,), bool)."""
        from .constants import IONIC_STRENGTH_MAX_M
        return (self.ionic_strength_M > IONIC_STRENGTH_MAX_M * (1 + 1e-9)) | (self.pH < 0.0) | (self.pH > 14.0)

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
          point_labels: Sequence[str] | None = None, restart: ArrayLike | None = None, tol: float = REL_TOL,
          I_tol: float = I_TOL, ionic_strength_start_M: ArrayLike | None = None) -> Equilibrium:
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
    background_ionic_strength_M : array_like
        The background electrolyte's share of a computed ionic strength [mol/L].
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
    tol : float
        Relative mass-balance tolerance.
    I_tol : float
        Relative change of a computed ionic strength at which its iteration stops (default :data:`I_TOL`, log K
        within 1e-8). A titration curve uses 1e-5, which keeps every concentration within about 1.5e-5 relative of
        the default's and saves most of the extra Newton passes (:data:`optimiser.curves.CURVE_I_TOL`).
    ionic_strength_start_M : array_like, optional
        Where a computed ionic strength starts at a point that does not continue from the one before (a restart)
        [mol/L]; default the background. A close estimate saves the passes of its iteration.

    Returns
    -------
    Equilibrium

    Raises
    ------
    InputError
        Totals of the wrong shape, negative or not finite; a pH outside 0-14; ``restart`` of the wrong shape.
    ConvergenceError
        At the first point that did not converge, named by ``point_labels``.
    """
    options = _SolveOptions(pH_scale=pH_scale, background_ionic_strength_M=background_ionic_strength_M, A=A,
                            log_Kw_shift=log_Kw_shift, include_solids=include_solids, restart=restart, tol=tol,
                            I_tol=I_tol, I_start=ionic_strength_start_M)
    cond = _conditions(system, totals, pH, ionic_strength_M, temperature_C, options)
    inputs = _kernel_inputs(system, cond)
    out = _run_kernel(inputs.stoichiometry, inputs.points, inputs.options, point_labels)
    return _equilibrium(system, cond, inputs, out)


def warm_up() -> None:
    """Compile the solver's kernel, or load it from numba's cache, by solving one small point."""
    solve(build_system(("Ca",), ("EDTA",)), [0.001, 0.001, 0.0], pH=10.0)


MAX_ITER = 300  # Newton iterations allowed per solve (per ionic-strength pass) at one point


@dataclass(frozen=True)
class _SolveOptions:
    """The keyword options of :func:`solve`, as given (see there)."""

    pH_scale: str = "activity"
    background_ionic_strength_M: ArrayLike = 0.0
    A: ArrayLike | None = None
    log_Kw_shift: ArrayLike = 0.0
    include_solids: bool = True
    restart: ArrayLike | None = None
    tol: float = REL_TOL
    I_tol: float = I_TOL
    I_start: ArrayLike | None = None


@dataclass(frozen=True)
class _Conditions:
    """The inputs of a solve, checked and broadcast to its B points.

    Attributes
    ----------
    totals : ndarray, shape (B, C)
        [mol/L].
    pH : ndarray, shape (B,), or None
        The fixed pH, None where it is free.
    ionic_strength_M : ndarray, shape (B,)
        The fixed ionic strength, or where it is computed (``auto_I``) the background's, its start [mol/L].
    auto_I : bool
        The ionic strength is computed from the species.
    background_M : ndarray, shape (B,)
        The background electrolyte's share of a computed ionic strength [mol/L].
    temperature_C : ndarray, shape (B,)
        [degC].
    davies_A : ndarray, shape (B,)
        Davies A at each point (given, or from the temperature).
    chain : ndarray of bool, shape (B,)
        Points that continue from the previous one (not restarts).
    options : _SolveOptions
        The keyword options as given.
    """

    totals: Array
    pH: Array | None
    ionic_strength_M: Array
    auto_I: bool
    background_M: Array
    temperature_C: Array
    davies_A: Array
    chain: NDArray[np.bool_]
    options: _SolveOptions


def _conditions(system: ChemicalSystem, totals: ArrayLike, pH: ArrayLike | None, ionic_strength_M: ArrayLike | None,
                temperature_C: ArrayLike, options: _SolveOptions) -> _Conditions:
    """Check the inputs of :func:`solve` and broadcast them to the B points (raises InputError)."""
    T_tot = _checked_totals(system, totals)
    B = len(T_tot)
    temp = _per_point(temperature_C, B)
    bg = np.broadcast_to(np.asarray(options.background_ionic_strength_M, dtype=float), (B,))
    auto_I = ionic_strength_M is None
    if auto_I:
        I = bg.copy() if options.I_start is None else np.maximum(_per_point(options.I_start, B), bg)
    else:
        I = _per_point(ionic_strength_M, B)
    pH_arr = _checked_pH(pH, B)
    A_T = davies_A(temp) if options.A is None else np.broadcast_to(np.asarray(options.A, dtype=float), (B,))
    return _Conditions(totals=T_tot, pH=pH_arr, ionic_strength_M=I, auto_I=auto_I, background_M=bg, temperature_C=temp,
                       davies_A=A_T, chain=_chain(options.restart, B), options=options)


def _per_point(value: ArrayLike, B: int) -> Array:
    """A scalar or one value per point, as a new float array of B values."""
    return np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()


def _checked_totals(system: ChemicalSystem, totals: ArrayLike) -> Array:
    """The totals as a (B, C) float array: one column per component, finite and not negative but for the proton
    excess (raises InputError)."""
    T_tot = np.atleast_2d(np.asarray(totals, dtype=float))
    C = T_tot.shape[1]
    if C != len(system.components):
        raise InputError(f"totals need {len(system.components)} columns ({', '.join(system.components)}), got {C}")
    mass_cols = [i for i in range(C) if i != system.index(H)]
    if np.any(~np.isfinite(T_tot[:, mass_cols])) or np.any(T_tot[:, mass_cols] < 0):
        raise InputError("totals must be finite and not negative")
    return T_tot


def _checked_pH(pH: ArrayLike | None, B: int) -> Array | None:
    """The fixed pH at the B points, None where it is free (raises InputError outside 0-14)."""
    if pH is None:
        return None
    pH_arr = _per_point(pH, B)
    if np.any(~np.isfinite(pH_arr)) or np.any(pH_arr < 0) or np.any(pH_arr > 14):
        raise InputError("pH must be between 0 and 14")
    return pH_arr


def _chain(restart: ArrayLike | None, B: int) -> NDArray[np.bool_]:
    """The points that continue from the previous one: all but the restarts (raises InputError on a wrong shape)."""
    if restart is not None and np.shape(restart) not in ((), (B,)):
        raise InputError(f"restart needs one flag per point ({B}), got shape {np.shape(restart)}")
    return np.ones(B, dtype=bool) if restart is None else ~np.broadcast_to(np.asarray(restart, dtype=bool), (B,))


@dataclass(frozen=True)
class _KernelInputs:
    """What :func:`solve` hands the kernel, and what it needs again for the saturation indices and the pH.

    Attributes
    ----------
    stoichiometry, points, options
        The kernel's inputs (:class:`optimiser.kernel.Stoichiometry`, :class:`~optimiser.kernel.Points`,
        :class:`~optimiser.kernel.Options`), over the unknown components and the solids allowed.
    unknown : list of int
        The components solved for: all where the pH is free, all but H+ where it is fixed.
    nu_solid : ndarray, shape (P_all, n)
        Stoichiometry of every solid of the system (allowed or not) in the unknown components.
    log_Ks0 : ndarray, shape (B, P_all)
        log10 constants of every solid at I = 0 (water-activity shift included).
    h_solid : ndarray, shape (P_all,)
        Their H+ coefficients where the pH is fixed, zeros where it is free.
    """

    stoichiometry: kernel.Stoichiometry
    points: kernel.Points
    options: kernel.Options
    unknown: list[int]
    nu_solid: Array
    log_Ks0: Array
    h_solid: Array


def _f64(a: ArrayLike) -> Array:
    """float64, C-contiguous and writable, so that numba compiles one specialisation of the kernel only."""
    return np.require(a, dtype=float, requirements=("C", "W"))


def _kernel_inputs(system: ChemicalSystem, cond: _Conditions) -> _KernelInputs:
    """The kernel's structures for a solve: constants at I = 0 per point, stoichiometry of the unknowns.

    The constants at I = 0 carry the water-activity shift (once per H+ released by a hydroxo species or
    solid); the kernel moves them to each point's ionic strength and folds in a fixed pH.
    """
    opts = cond.options
    B, C = cond.totals.shape
    iH = system.index(H)
    free_pH = cond.pH is None
    P = system.nu_solid.shape[0] if opts.include_solids else 0
    unknown, stoichiometry, nu_s, hco_s, w_species, w_solids = _stoichiometry(system, free_pH, P)
    # water activity enters once per H2O consumed, i.e. once per H+ released (hydroxo species and solids)
    shift_w = np.broadcast_to(np.asarray(opts.log_Kw_shift, dtype=float), (B,))[:, None]
    temp = cond.temperature_C
    if opts.A is None and B and (temp == temp[0]).all():  # one temperature (a curve): its row, remembered
        k0, ks0 = system.log_K_zero(float(temp[0]))
        K0, Ks0 = np.broadcast_to(k0, (B, len(k0))), np.broadcast_to(ks0, (B, len(ks0)))
    else:
        K0, Ks0 = system.log_K(np.zeros(B), temp, opts.A)
    K0 = K0 + w_species[None, :] * shift_w
    Ks0 = Ks0 + w_solids[None, :] * shift_w
    T = cond.totals[:, unknown]
    present = np.ascontiguousarray(T > 0)
    if free_pH:
        present[:, unknown.index(iH)] = True
    points = kernel.Points(
        log_K0=_f64(K0), log_Ks0=_f64(Ks0[:, :P]).reshape(B, P), davies_A=_f64(cond.davies_A),
        pH_term=_f64(np.zeros(B) if free_pH else -cond.pH), totals=_f64(T), ionic_strength=_f64(cond.ionic_strength_M),
        background_I=_f64(cond.background_M), present=present, chain=np.require(cond.chain, requirements=("C", "W")))
    options = kernel.Options(activity=bool(not free_pH and opts.pH_scale == "activity"), auto_I=bool(cond.auto_I),
                             I_tol=float(opts.I_tol), free_col=unknown.index(iH) if free_pH else -1, tol=float(opts.tol),
                             max_iter=int(MAX_ITER))
    return _KernelInputs(stoichiometry=stoichiometry, points=points, options=options, unknown=unknown, nu_solid=nu_s,
                         log_Ks0=Ks0, h_solid=hco_s)


def _stoichiometry(system: ChemicalSystem, free_pH: bool, P: int):
    """What the kernel takes of the system alone, remembered per system, pH fixed or free, and solids allowed:
    (the unknown components, :class:`kernel.Stoichiometry`, the solids' stoichiometry in the unknowns, their H+
    coefficients, and the water-activity weights of the species and of the solids). The kernel only reads them."""
    key = ("stoichiometry", free_pH, P)
    memo = system.memo
    if key not in memo:
        C = len(system.components)
        iH = system.index(H)
        unknown = list(range(C)) if free_pH else [i for i in range(C) if i != iH]
        nu = system.nu.astype(float)
        nu_s_all = system.nu_solid.astype(float)
        dz2, dz2_s = system.charge_terms
        hco = np.zeros(len(nu)) if free_pH else nu[:, iH].copy()
        hco_s = np.zeros(len(nu_s_all)) if free_pH else nu_s_all[:, iH].copy()
        nu_u, nu_s = nu[:, unknown], nu_s_all[:, unknown]
        ptr, col, val = _csr(nu_u)
        stoichiometry = kernel.Stoichiometry(
            nu_ptr=ptr, nu_col=col, nu_val=val, nmax=np.maximum(np.where(nu_u > 0, nu_u, 0.0).max(axis=0, initial=0.0), 1.0),
            nu_solid=_f64(nu_s[:P]), z2=system.charge_squared, dz2=_f64(dz2), dz2_solid=_f64(dz2_s[:P]), h=_f64(hco),
            h_solid=_f64(hco_s[:P]))
        memo[key] = (unknown, stoichiometry, nu_s, hco_s, np.maximum(-nu[:, iH], 0.0), np.maximum(-nu_s_all[:, iH], 0.0))
    return memo[key]


def _run_kernel(stoichiometry: kernel.Stoichiometry, points: kernel.Points, options: kernel.Options,
                labels: Sequence[str] | None) -> kernel.Outputs:
    """Solve the B points with the compiled kernel (:func:`optimiser.kernel.solve_points`).

    Parameters
    ----------
    stoichiometry, points, options
        The kernel's inputs (their classes in :mod:`optimiser.kernel` document the arrays and units).
    labels : sequence of str, optional
        Names of the points for the error message.

    Returns
    -------
    kernel.Outputs
        Per point: log10 free concentrations of the unknown components, solid amounts [mol/L], solids present,
        species concentrations [mol/L], ionic strength [mol/L], iterations, largest relative residual, status.

    Raises
    ------
    ConvergenceError
        At the first point that did not converge (or has a free concentration not finite), named by ``labels``.
    """
    B, n = points.totals.shape
    out = kernel.empty_outputs(B, n, points.log_K0.shape[1], points.log_Ks0.shape[1])
    kernel.solve_points(stoichiometry, points, options, out)
    bad = (out.status != kernel.CONVERGED) | ~np.isfinite(out.x).all(axis=1)
    if bad.any():
        b = int(np.nonzero(bad)[0][0])
        label = labels[b] if labels is not None else f"point {b}"
        I_b = float(out.ionic_strength[b])
        from .constants import IONIC_STRENGTH_MAX_M
        why = (f" (the ionic strength computed from the species reached {I_b:.3g} M, beyond the {IONIC_STRENGTH_MAX_M:g} M "
               "up to which the Davies equation holds: the point lies outside the model's domain)"
               if not np.isfinite(I_b) or I_b > IONIC_STRENGTH_MAX_M else "")
        raise ConvergenceError(f"equilibrium did not converge at {label} (of {B}) in {options.max_iter} iterations"
                               f"{why}: largest relative mass-balance residual {out.residual[b]:.2e}, totals "
                               f"{points.totals[b].tolist()}", outside_domain=bool(why))
    return out


def _equilibrium(system: ChemicalSystem, cond: _Conditions, inputs: _KernelInputs, out: kernel.Outputs) -> Equilibrium:
    """The :class:`Equilibrium` from the kernel's outputs: the pH where it is free, and the saturation index of
    every solid (those not allowed too) at the ionic strength reached."""
    x, I, opts = out.x, out.ionic_strength, inputs.options
    B = len(x)
    Af = (cond.davies_A * davies_f(I))[:, None]
    log_cH = x[:, opts.free_col] if cond.pH is None else (inputs.points.pH_term + (Af[:, 0] if opts.activity else 0.0))
    pH_arr = cond.pH
    if cond.pH is None:
        pH_arr = -log_cH if cond.options.pH_scale == "concentration" else -(log_cH - Af[:, 0])
    dz2_s = system.charge_terms[1]
    si = x @ inputs.nu_solid.T + inputs.log_Ks0 + Af * dz2_s[None, :] + inputs.h_solid[None, :] * log_cH[:, None]
    P_all, P = inputs.nu_solid.shape[0], out.solid_amount.shape[1]
    amounts = np.zeros((B, P_all))
    amounts[:, :P] = out.solid_amount
    present = np.zeros_like(amounts, dtype=bool)
    present[:, :P] = out.solid_present
    si = np.where(present, 0.0, si)
    return Equilibrium(system=system, c=out.c, solid_amount=amounts, saturation_index=si, ionic_strength_M=I,
                       pH=pH_arr, totals=cond.totals, max_residual=float(out.residual.max(initial=0.0)),
                       iterations=int(out.iterations.max(initial=0)))


def _csr(nu: Array) -> tuple[NDArray[np.int64], NDArray[np.int64], Array]:
    """Row-compressed stoichiometry: the nonzero coefficients of each species."""
    rows, cols = np.nonzero(nu)
    ptr = np.zeros(nu.shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=nu.shape[0]), out=ptr[1:])
    return ptr, cols.astype(np.int64), nu[rows, cols].astype(float)
