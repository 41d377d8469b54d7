"""Side-reaction coefficients and conditional formation constants (Ringbom's model), vectorised.

All functions take pH, ligand totals, ionic strength and temperature as scalars or arrays that
broadcast together, and return log10 values, which stay finite over pH 0-14 where the coefficients
themselves span 30 orders of magnitude.

.. math::

    \\log K'_{MY} = \\log K_{MY} - \\log\\alpha_Y - \\log\\alpha_M + \\log\\alpha_{MY}

References
----------
A. Ringbom, *Complexation in Analytical Chemistry*, Interscience, 1963.
"""
from __future__ import annotations

import sys
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .constants import H, FormationConstant, corrected, database, davies_A, davies_f, uncorrected_for_temperature
from .constants import IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C  # the model's limits, defined once
from .errors import InputError, MissingConstantError, UnknownNameError

Array = NDArray[np.float64]
PH_SCALES = ("activity", "concentration")


def log_sum_pow10(terms: Array, axis: int = -1) -> Array:
    """log10(sum(10**terms)) along an axis without overflow."""
    top = np.max(terms, axis=axis, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)
    return np.squeeze(top, axis=axis) + np.log10(np.sum(10.0 ** (terms - top), axis=axis))


def log_alpha_polynomial(log_x: ArrayLike, log_beta: ArrayLike, powers: ArrayLike) -> Array:
    """log10 of 1 + sum_n beta_n x**p_n, the generic side-reaction coefficient.

    Parameters
    ----------
    log_x : array_like
        log10 of the free concentration of the reacting species (H+ or a ligand) [log10 M].
    log_beta : array_like, shape (..., n)
        log10 of the cumulative constants.
    powers : array_like, shape (n,)
        Power of x in each term (h for protonation, n for ML_n, -n for hydroxo complexes in the H+ form).

    Examples
    --------
    alpha_Y(H) of EDTA at pH 10 with pKa 2.0, 2.67, 6.16, 10.26 (concentration scale):

    >>> lb = np.cumsum([10.26, 6.16, 2.67, 2.0])
    >>> round(float(10 ** -log_alpha_polynomial(-10.0, lb, [1, 2, 3, 4])), 4)
    0.3546
    """
    log_x = np.asarray(log_x, dtype=float)[..., None]
    terms = np.asarray(log_beta, dtype=float) + np.asarray(powers, dtype=float) * log_x
    terms = np.concatenate([np.zeros(terms.shape[:-1] + (1,)), terms], axis=-1)
    return log_sum_pow10(terms)


@dataclass(frozen=True)
class Conditions:
    """Sample conditions shared by every calculation.

    Attributes
    ----------
    ionic_strength_M : float or ndarray
        Ionic strength of the sample [mol/L] (constants are moved to it by the Davies equation).
    temperature_C : float or ndarray
        Temperature [degC] (van 't Hoff where the enthalpy is known).
    pH_scale : str
        ``"activity"``: pH = -log a(H+), as a glass electrode reads it (default);
        ``"concentration"``: pH = -log [H+], as handbook tables of alpha are computed.
    """

    ionic_strength_M: ArrayLike = 0.1
    temperature_C: ArrayLike = 25.0
    pH_scale: str = "activity"

    def __post_init__(self) -> None:
        if not _within(self.ionic_strength_M, 0.0, IONIC_STRENGTH_MAX_M):
            raise InputError(f"ionic strength must be between 0 and {IONIC_STRENGTH_MAX_M:g} M (Davies is fit to about 0.5 M); got {self.ionic_strength_M}")
        if not _within(self.temperature_C, *TEMPERATURE_RANGE_C):
            raise InputError(f"temperature must be between {TEMPERATURE_RANGE_C[0]:g} and {TEMPERATURE_RANGE_C[1]:g} degC; got {self.temperature_C}")
        if self.pH_scale not in PH_SCALES:
            raise InputError(f"pH scale must be one of {', '.join(PH_SCALES)}; got {self.pH_scale!r}")

    def log_h(self, pH: ArrayLike) -> Array:
        """log10 [H+] (concentration) for a pH on this scale."""
        pH = check_pH(pH)
        if self.pH_scale == "concentration":
            return -pH
        log_gamma_H = -davies_A(self.temperature_C) * davies_f(self.ionic_strength_M)
        return -pH - log_gamma_H

    def log_K(self, constants) -> Array:
        return corrected(constants, self.ionic_strength_M, self.temperature_C)


def _within(x: ArrayLike, lo: float, hi: float) -> bool:
    """True where every value of ``x`` lies in [lo, hi] (NaN never does; one comparison of each value, as a
    search checks thousands of single values)."""
    if isinstance(x, (float, int)):
        return lo <= x <= hi
    x = np.asarray(x, dtype=float)
    return bool(((x >= lo) & (x <= hi)).all())


def check_pH(pH: ArrayLike) -> Array:
    pH = np.asarray(pH, dtype=float)
    if not _within(pH, 0.0, 14.0):
        raise InputError(f"pH must be between 0 and 14; got {pH.tolist()}")
    return pH


def check_concentration(value: ArrayLike, what: str) -> Array:
    c = np.asarray(value, dtype=float)
    if not _within(c, 0.0, sys.float_info.max):
        raise InputError(f"{what} must be a concentration of 0 or more (mol/L); got {c.tolist()}")
    return c


def _ligand_terms(ligand: str) -> tuple[FormationConstant, ...]:
    db = database()
    if ligand not in db.charges or ligand in db.metals or ligand == H:
        raise UnknownNameError("ligand", ligand, [k for k in db.charges if k not in db.metals and k != H])
    return db.protonation.get(ligand, ())


def log_alpha_ligand_H(ligand: str, pH: ArrayLike, cond: Conditions = Conditions()) -> Array:
    """log10 alpha_L(H) = log10(1 + sum_h beta_h [H+]^h) of a titrant, buffer, masking agent or dye.

    Its inverse is the fraction of the ligand's unbound total that is fully deprotonated.
    """
    ks = _ligand_terms(ligand)
    log_h = cond.log_h(pH)
    if not ks:
        return np.zeros_like(log_h)
    return log_alpha_polynomial(log_h, cond.log_K(ks), [k.stoichiometry[H] for k in ks])


log_alpha_Y = log_alpha_ligand_H  # the titrant's own protonation: alpha_Y(H)


def ligand_fractions(ligand: str, pH: ArrayLike, cond: Conditions = Conditions()) -> Array:
    """Fractions of an unbound ligand as L, HL, H2L, ...; shape ``pH.shape + (n + 1,)``; they sum to 1."""
    ks = _ligand_terms(ligand)
    log_h = cond.log_h(pH)[..., None]
    terms = np.concatenate([np.zeros_like(log_h), cond.log_K(ks) + np.array([k.stoichiometry[H] for k in ks]) * log_h], axis=-1) \
        if ks else np.zeros_like(log_h)
    return 10.0 ** (terms - log_sum_pow10(terms)[..., None])


def log_alpha_M_OH(metal: str, pH: ArrayLike, cond: Conditions = Conditions()) -> Array:
    """log10 alpha_M(OH) = log10(1 + sum_n *beta_n / [H+]^n) from the hydrolysis constants."""
    db = database()
    metal = db.metal(metal)
    ks = db.hydrolysis.get(metal, ())
    log_h = cond.log_h(pH)
    if not ks:
        return np.zeros_like(log_h)
    return log_alpha_polynomial(log_h, cond.log_K(ks), [k.stoichiometry[H] for k in ks])


def ml_constants(metal: str, ligand: str) -> tuple[FormationConstant, ...]:
    return tuple(k for k in database().complexes.get((metal, ligand), ()) if H not in k.stoichiometry)


def log_alpha_M_L(metal: str, ligand: str, C_L: ArrayLike, pH: ArrayLike, cond: Conditions = Conditions()) -> Array:
    """log10 alpha_M(L) = log10(1 + sum_n beta_n [L]^n) for an auxiliary or masking ligand.

    The free ligand is its total (analytical) concentration reduced by its own protonation,
    ``[L] = C_L / alpha_L(H)``; binding to the metal is taken as too small to deplete it (the usual
    assumption, good while C_L is well above the metal's concentration; the full solver drops it).

    Parameters
    ----------
    C_L : array_like
        Total concentration of the ligand, all protonation states [mol/L].
    """
    db = database()
    metal = db.metal(metal)
    C_L = check_concentration(C_L, f"total {ligand}")
    log_L = np.log10(np.maximum(C_L, 1e-300)) - log_alpha_ligand_H(ligand, pH, cond)
    ks = ml_constants(metal, ligand)
    if not ks:
        return np.zeros_like(log_L)
    out = log_alpha_polynomial(log_L, cond.log_K(ks), [k.stoichiometry[ligand] for k in ks])
    return np.where(C_L > 0, out, 0.0)


def log_alpha_M(metal: str, pH: ArrayLike, ligands: Mapping[str, ArrayLike] | None = None,
                cond: Conditions = Conditions()) -> Array:
    """Combined side-reaction coefficient of the metal: alpha_M = sum_i alpha_M(L_i) + alpha_M(OH) - n."""
    parts = [log_alpha_M_OH(metal, pH, cond)]
    for lig, C in (ligands or {}).items():
        parts.append(log_alpha_M_L(metal, lig, C, pH, cond))
    parts = np.broadcast_arrays(*parts)
    total = np.sum([10.0 ** p for p in parts], axis=0) - (len(parts) - 1)
    return np.log10(np.maximum(total, 1.0))


def _my_constants(metal: str, titrant: str) -> tuple[FormationConstant, tuple[FormationConstant, ...]]:
    db = database()
    metal = db.metal(metal)
    if titrant not in db.protonation or not any(k[1] == titrant for k in db.complexes):
        from .reagents import catalogue  # the titrant list is data (reagents.yaml)
        raise UnknownNameError("titrant", titrant, catalogue().titrants)
    ks = db.complexes.get((metal, titrant), ())
    main = [k for k in ks if H not in k.stoichiometry and k.stoichiometry[titrant] == 1]
    if not main:
        raise MissingConstantError(f"no log K for {metal}-{titrant} in the database; {titrant} cannot be evaluated with {metal} present "
                                   f"(metals with a {titrant} constant: {', '.join(sorted(m for (m, t) in db.complexes if t == titrant))})")
    return main[0], tuple(k for k in ks if H in k.stoichiometry)


def log_alpha_MY(metal: str, titrant: str, pH: ArrayLike, cond: Conditions = Conditions()) -> Array:
    """log10 alpha_MY = log10(1 + K_MHY [H+] + K_MOHY / [H+] + ...): protonated and hydroxo MY raise K'."""
    main, side = _my_constants(metal, titrant)
    log_h = cond.log_h(pH)
    if not side:
        return np.zeros_like(log_h)
    rel = cond.log_K(side) - cond.log_K([main])
    return log_alpha_polynomial(log_h, rel, [k.stoichiometry[H] for k in side])


@dataclass(frozen=True)
class ConditionalConstant:
    """log K' of one metal with one titrant, and the parts it is made of (arrays over pH)."""

    metal: str
    titrant: str
    pH: Array
    log_K: Array
    log_alpha_Y: Array
    log_alpha_M: Array
    log_alpha_MY: Array
    constant: FormationConstant
    uncorrected_temperature: tuple[FormationConstant, ...] = field(default=())

    @property
    def log_K_conditional(self) -> Array:
        return self.log_K - self.log_alpha_Y - self.log_alpha_M + self.log_alpha_MY


def log_alpha_Y_with_alkali(titrant: str, pH: ArrayLike, alkali: Mapping[str, ArrayLike], cond: Conditions = Conditions()
                            ) -> Array:
    """log10 alpha_Y = log10(alpha_Y(H) + sum_N K_NY [N+]) with the alkali ions' pairs of the titrant (NaY3-, KY3-;
    the ions of ``alkali``, id -> free concentration [mol/L]); alpha_Y(H) alone where none has a constant."""
    db = database()
    terms = 10.0 ** log_alpha_Y(titrant, pH, cond)
    for ion, c in alkali.items():
        for k in db.complexes.get((db.metal(ion), titrant), ()):
            if H not in k.stoichiometry:
                terms = terms + 10.0 ** cond.log_K([k])[..., 0] * np.asarray(c, dtype=float)
    return np.log10(terms)


def conditional_constant(metal: str, titrant: str, pH: ArrayLike, ligands: Mapping[str, ArrayLike] | None = None,
                         cond: Conditions = Conditions(), alkali: Mapping[str, ArrayLike] | None = None
                         ) -> ConditionalConstant:
    """Conditional formation constant log K'_MY across pH and ligand totals.

    Parameters
    ----------
    metal : str
        Metal id or spelling (``"Zn"``, ``"Fe3+"``).
    titrant : str
        ``"EDTA"``, ``"EGTA"``, ``"CDTA"`` or ``"DTPA"``.
    pH : array_like
        pH values (scale from ``cond``).
    ligands : mapping, optional
        Ligand -> total concentration [mol/L] (e.g. ``{"NH3": 0.1}`` for NH3 + NH4+ = 0.1 M).
    cond : Conditions
        Ionic strength, temperature and pH scale.
    alkali : mapping, optional
        Alkali ion id -> concentration [mol/L] (the medium's Na+ and K+, :mod:`optimiser.medium`): their pairs
        with the titrant enter alpha_Y. None: a medium that does not bind the titrant.

    Examples
    --------
    Zinc at pH 10 in 0.1 M free ammonia is a textbook case (log K'' about 11.1 at I = 0.1).
    """
    db = database()
    metal = db.metal(metal)
    main, side = _my_constants(metal, titrant)
    pH = check_pH(pH)
    used = [main, *side, *db.protonation[titrant], *db.hydrolysis.get(metal, ())]
    for lig in ligands or {}:
        used += list(ml_constants(metal, lig)) + list(db.protonation.get(lig, ()))
    for ion in alkali or {}:
        used += list(db.complexes.get((db.metal(ion), titrant), ()))
    T = float(np.max(np.asarray(cond.temperature_C)))
    out = ConditionalConstant(
        metal=metal, titrant=titrant, pH=pH,
        log_K=np.broadcast_to(cond.log_K([main])[..., 0], np.broadcast(pH, np.asarray(cond.ionic_strength_M)).shape).astype(float),
        log_alpha_Y=log_alpha_Y_with_alkali(titrant, pH, alkali, cond) if alkali else log_alpha_Y(titrant, pH, cond),
        log_alpha_M=log_alpha_M(metal, pH, ligands, cond),
        log_alpha_MY=log_alpha_MY(metal, titrant, pH, cond),
        constant=main,
        uncorrected_temperature=tuple(uncorrected_for_temperature(used, T)))
    return out


def free_metal_in_complex(log_K_cond: ArrayLike, C: ArrayLike) -> Array:
    """Total unbound metal [M'] in a solution of the complex MY at total concentration C, solved exactly.

    From K' = (C - x) / x**2, i.e. K' x**2 + x - C = 0, taking the positive root in the cancellation-free
    form x = 2C / (1 + sqrt(1 + 4 K' C)). The small-x shortcut sqrt(C/K') fails where K'C is not large.

    Parameters
    ----------
    log_K_cond : array_like
        log10 K' [log10 L/mol].
    C : array_like
        Total concentration of the complex [mol/L].

    Returns
    -------
    ndarray
        [M'] [mol/L] (divide by alpha_M for the free aquo ion).

    Examples
    --------
    0.0267 M CaY at pH 10 with K' = 1.336e10 leaves 1.41e-6 M Ca (Harris, Quantitative Chemical Analysis):

    >>> float(free_metal_in_complex(np.log10(1.336e10), 0.02667))  # doctest: +ELLIPSIS
    1.41...e-06
    """
    K = 10.0 ** np.asarray(log_K_cond, dtype=float)
    C = check_concentration(C, "complex concentration")
    return 2.0 * C / (1.0 + np.sqrt(1.0 + 4.0 * K * C))


def pM_equivalence(log_K_cond: ArrayLike, c_M0: ArrayLike, V0_mL: ArrayLike, c_Y: ArrayLike, log_alpha_M: ArrayLike = 0.0) -> Array:
    """pM (free aquo ion) at the equivalence point of a direct titration of c_M0 in V0 with titrant c_Y."""
    V_eq = np.asarray(c_M0) * np.asarray(V0_mL) / np.asarray(c_Y)
    C = np.asarray(c_M0) * np.asarray(V0_mL) / (np.asarray(V0_mL) + V_eq)
    return -np.log10(free_metal_in_complex(log_K_cond, C)) + np.asarray(log_alpha_M)


def feasibility(log_K_cond: ArrayLike, c_ep: ArrayLike) -> Array:
    """log(c K'), Ringbom's feasibility index; >= 6 for about 0.1 % error at dpM = +/-0.2."""
    return np.asarray(log_K_cond, dtype=float) + np.log10(check_concentration(c_ep, "c_ep"))


def ringbom_error_percent(dpM: ArrayLike, log_K_cond: ArrayLike, c_ep: ArrayLike) -> Array:
    """Ringbom's titration error Et = (10**dpM - 10**-dpM) / sqrt(c_ep K') * 100 [%].

    dpM = pM'_ep - pM'_eq (positive after the equivalence point).

    >>> round(float(ringbom_error_percent(0.2, 8.0, 0.01)), 3)
    0.095
    """
    dpM = np.asarray(dpM, dtype=float)
    return (10.0 ** dpM - 10.0 ** -dpM) / np.sqrt(10.0 ** feasibility(log_K_cond, c_ep)) * 100.0


def selectivity_margin(log_K_cond_M: ArrayLike, c_M: ArrayLike, log_K_cond_N: ArrayLike, c_N: ArrayLike) -> Array:
    """delta log(cK') = log(c_M K'_M) - log(c_N K'_N) of an analyte M over an interferent N.

    About 6 for 0.1 %, 5 for 0.3 % and 4 for 1 % error (common practice, textbook thresholds).
    """
    return feasibility(log_K_cond_M, c_M) - feasibility(log_K_cond_N, c_N)
