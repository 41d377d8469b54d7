"""Formation constants with their sources, and their correction to a sample's ionic strength and temperature.

Every constant is a :class:`FormationConstant` written as the formation of one species from components
(metal ions, fully deprotonated ligands, H+). Its ``log_K`` is kept at the conditions of its source;
:func:`log_K_at` moves it to the sample's ionic strength (Davies equation) and temperature (van 't Hoff
where the reaction enthalpy is known).

The activity scale: species concentrations are computed as
``c_s = K_c(I) * prod(c_i ** nu_i)``, where ``K_c(I) = K_0 * prod(gamma_i ** nu_i) / gamma_s`` (the
concentration constant at ionic strength I). H+ is a component like any other; when the pH is given it
enters as ``c_H = 10**-pH / gamma_H`` (pH as read on a glass electrode, -log a(H+)) or ``10**-pH`` on the
concentration scale used by handbook tables.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import data
from .errors import DataError, UnknownNameError

R_GAS = 8.314462618e-3  # kJ / (mol K), CODATA 2018
T_REF_K = 298.15
LN10 = np.log(10.0)
H = "H+"  # the proton as a component

# Where the model's corrections are trusted, checked wherever a sample's conditions are read (the scenario and
# :class:`optimiser.conditional.Conditions`). Davies is fit to about 0.5 M and is no guide beyond 1 M; van 't Hoff
# with a constant enthalpy is kept to liquid water at a bench.
IONIC_STRENGTH_MAX_M = 1.0
# Where the Davies equation itself is trusted: to about I = 0.5 M (the chemistry primer, /work/shared/DOMAIN.md; Davies,
# Ion Association, 1962, and Stumm and Morgan, Aquatic Chemistry, 3rd ed., 1996, Table 3.3, both from memory). A
# titration whose computed ionic strength passes it carries a warning (optimiser.medium, findings "davies_range").
DAVIES_LIMIT_M = 0.5
TEMPERATURE_RANGE_C = (0.0, 90.0)


@dataclass(frozen=True)
class FormationConstant:
    """log10 of a formation constant, with the conditions and the source it was published at.

    Attributes
    ----------
    species : str
        Name of the species formed, e.g. ``"Ca(EDTA)"``.
    stoichiometry : Mapping[str, int]
        Components consumed per species (H+ negative when released, as for MOHY or M(OH)n).
    charge : int
        Charge of the species formed.
    log_K : float
        log10 K at ``temperature_C`` and ``ionic_strength_M`` [log10 of (mol/L)^-sum(nu)].
    temperature_C : float
        Temperature of the source value [degC].
    ionic_strength_M : float
        Ionic strength of the source value [mol/L].
    ref : str
        Source key in ``data/references.csv``; ``"memory"`` for a value from memory.
    dH_kJ_mol : float or None
        Reaction enthalpy [kJ/mol], None where none is published.
    medium : str
        Background electrolyte of the source value, or ``"thermodynamic"`` for I = 0.
    note : str
        Free text from the table.
    uncertainty : float or None
        Uncertainty of ``log_K`` [log10 units]: the published figure where the source gives one, otherwise the
        default of the source's quality class (critically evaluated, single study, from memory; see
        ``data/README.md``).
    """

    species: str
    stoichiometry: Mapping[str, int]
    charge: int
    log_K: float
    temperature_C: float
    ionic_strength_M: float
    ref: str
    dH_kJ_mol: float | None = None
    medium: str = ""
    note: str = ""
    uncertainty: float | None = None
    charges: Mapping[str, int] = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self) -> None:
        if not self.ref:
            raise DataError(f"{self.species}: every constant needs a source key")
        if self.uncertainty is not None and not self.uncertainty > 0:
            raise DataError(f"{self.species}: uncertainty must be a positive number of log units, got {self.uncertainty}")
        z = sum(nu * self.charges[c] for c, nu in self.stoichiometry.items())
        if z != self.charge:
            raise DataError(f"{self.species}: charge {self.charge} does not balance the reaction ({z})")

    @property
    def delta_z2(self) -> int:
        """z_species**2 - sum(nu_i z_i**2), the charge term of the Davies correction."""
        return self.charge ** 2 - sum(nu * self.charges[c] ** 2 for c, nu in self.stoichiometry.items())

    @property
    def from_memory(self) -> bool:
        return self.ref == "memory"

    @property
    def quality(self) -> str:
        """Where the value comes from, in the report's words: ``"fitted to practice"`` (from memory, fitted to one
        practical transition pM; its note says so), ``"from memory"`` or ``"published"``."""
        if self.from_memory:
            return "fitted to practice" if "fitted" in self.note.lower() else "from memory"
        return "published"

    @property
    def reaction(self) -> str:
        """The reaction written out; each H+ released comes from a water molecule (hydroxo species, solids, Kw):
        ``Mg + 2 H2O = Mg(OH)2 + 2 H+``, ``H2O = OH- + H+``."""
        water = -self.stoichiometry.get("H+", 0)
        left = [(f"{nu} " if nu > 1 else "") + c for c, nu in self.stoichiometry.items() if nu > 0]
        if water > 0:
            left.append((f"{water} " if water > 1 else "") + "H2O")
        released = [(f"{-nu} " if nu < -1 else "") + c for c, nu in self.stoichiometry.items() if nu < 0]
        return " + ".join(left) + " = " + self.species + "".join(" + " + r for r in released)


def davies_A(temperature_C: ArrayLike) -> NDArray[np.float64]:
    r"""Debye-Hueckel A parameter of water [kg^0.5 mol^-0.5] at a temperature [degC].

    .. math:: A = 1.82483\times10^6 \sqrt{\rho_w} (\varepsilon_r T)^{-3/2}

    with the relative permittivity of water from Malmberg and Maryott, J. Res. NBS 56 (1956) 1, and its
    density [g/cm3] from the Thiesen-type formula rho = 1 - (t - 3.98)^2 (t + 283) / (503570 (t + 67.26)).
    At 25 degC this gives 0.5108 (the often quoted 0.509 uses eps = 78.54; PHREEQC computes 0.5100).

    Examples
    --------
    >>> round(float(davies_A(25.0)), 4)
    0.5108
    """
    if np.ndim(temperature_C) == 0:
        return _davies_A_scalar(float(temperature_C))
    t = np.asarray(temperature_C, dtype=float)
    if t.size and (t == t.flat[0]).all():  # one temperature for every point (a curve): computed once
        return np.full(t.shape, _davies_A_scalar(float(t.flat[0])))
    return _davies_A(t)


@lru_cache(maxsize=256)
def _davies_A_scalar(t: float) -> np.float64:
    return _davies_A(np.asarray(t, dtype=float))


def _davies_A(t: NDArray[np.float64]) -> NDArray[np.float64]:
    eps = 87.740 - 0.40008 * t + 9.398e-4 * t ** 2 - 1.410e-6 * t ** 3
    rho = 1.0 - (t - 3.98) ** 2 * (t + 283.0) / (503570.0 * (t + 67.26))
    return 1.82483e6 * np.sqrt(rho) * (eps * (t + 273.15)) ** -1.5


def davies_f(ionic_strength_M: ArrayLike) -> NDArray[np.float64]:
    """The Davies function f(I) = sqrt(I)/(1 + sqrt(I)) - 0.3 I, so that log10 gamma = -A z^2 f(I).

    Davies, Ion Association (Butterworths, 1962). Valid to about I = 0.5 M.

    >>> round(float(davies_f(0.1)), 4)
    0.2103
    """
    s = np.sqrt(np.asarray(ionic_strength_M, dtype=float))
    return s / (1.0 + s) - 0.3 * s ** 2


def log_K_at(
    log_K: ArrayLike,
    delta_z2: ArrayLike,
    I_ref: ArrayLike,
    T_ref_C: ArrayLike,
    dH_kJ_mol: ArrayLike,
    ionic_strength_M: ArrayLike,
    temperature_C: ArrayLike,
    A: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """Move log K from its reference conditions to a sample's ionic strength and temperature.

    The constant is taken to I = 0 at its own temperature (Davies), to the sample's temperature by
    van 't Hoff with a constant enthalpy (skipped where ``dH_kJ_mol`` is NaN), then to the sample's
    ionic strength (Davies)::

        log K(I, T) = log K_ref - A(T_ref) dz2 f(I_ref)
                      - dH / (R ln10) (1/T - 1/T_ref) + A(T) dz2 f(I)

    Parameters
    ----------
    log_K, delta_z2, I_ref, T_ref_C, dH_kJ_mol : array_like
        The constant, its charge term, reference ionic strength [M], reference temperature [degC]
        and enthalpy [kJ/mol] (NaN if unknown). Broadcast together.
    ionic_strength_M, temperature_C : array_like
        Sample conditions [M], [degC].
    A : array_like, optional
        Davies A at the sample's temperature; by default :func:`davies_A`. A reference program's own A
        can be passed to compare with it exactly.

    Returns
    -------
    ndarray
        log10 of the concentration constant at the sample's conditions.

    Examples
    --------
    log K(CaY) = 12.42 at I = 0 moves to about 10.71 at I = 0.1 M (A = 0.5091):

    >>> round(float(log_K_at(12.42, -16, 0.0, 25.0, np.nan, 0.1, 25.0, A=0.5091)), 2)
    10.71
    """
    dz2 = np.asarray(delta_z2, dtype=float)
    T_ref = np.asarray(T_ref_C, dtype=float)
    T = np.asarray(temperature_C, dtype=float)
    A_T = davies_A(T) if A is None else np.asarray(A, dtype=float)
    A_ref = np.where(np.isclose(T_ref, T), A_T, davies_A(T_ref)) if A is not None else davies_A(T_ref)
    log_K0 = np.asarray(log_K, dtype=float) - A_ref * dz2 * davies_f(I_ref)
    dH = np.asarray(dH_kJ_mol, dtype=float)
    vant_hoff = np.where(np.isnan(dH), 0.0, -np.nan_to_num(dH) / (R_GAS * LN10) * (1.0 / (T + 273.15) - 1.0 / (T_ref + 273.15)))
    return log_K0 + vant_hoff + A_T * dz2 * davies_f(ionic_strength_M)


@dataclass(frozen=True)
class Solid:
    """A sparingly soluble solid, written as its formation from dissolved components.

    ``constant.log_K`` is -log Ksp in the H+ form for hydroxides (M + n H2O - n H+ = M(OH)n(s)) and
    -log Ksp for salts of a ligand (m M + n L + h H+ = M_m H_h L_n(s); h = 1 for CaHPO4, -2 for the basic carbonate
    Cu2(OH)2CO3).
    """

    name: str
    metal: str
    constant: FormationConstant


@dataclass(frozen=True)
class Database:
    """Everything the model knows, read from ``optimiser/data``.

    Attributes
    ----------
    charges : dict
        Component -> charge (metals, ligands in their fully deprotonated form, and H+).
    protonation : dict
        Ligand -> tuple of FormationConstant for H_h L (h = 1, 2, ...).
    complexes : dict
        (metal, ligand) -> tuple of FormationConstant for M H_h L_n.
    hydrolysis : dict
        Metal -> tuple of FormationConstant for M(OH)_n written in the H+ form.
    solids : dict
        Metal -> tuple of Solid.
    water : FormationConstant
        H2O - H+ = OH- (log Kw).
    """

    charges: dict[str, int]
    protonation: dict[str, tuple[FormationConstant, ...]]
    complexes: dict[tuple[str, str], tuple[FormationConstant, ...]]
    hydrolysis: dict[str, tuple[FormationConstant, ...]]
    solids: dict[str, tuple[Solid, ...]]
    water: FormationConstant
    metals: dict[str, dict]
    references: dict[str, dict[str, str]]

    def metal(self, name: str) -> str:
        """The database id of a metal from any of its spellings ("Fe3+", "Fe(III)", "cu")."""
        return _resolve(name, self.metals, "metal")

    def constants_for(self, name: str) -> list[FormationConstant]:
        """Every constant that involves a metal or ligand (for ``optimiser constants NAME``)."""
        out: list[FormationConstant] = []
        if name in self.metals:
            out += list(self.hydrolysis.get(name, ()))
            for (m, _), ks in sorted(self.complexes.items()):
                if m == name:
                    out += list(ks)
            out += [s.constant for s in self.solids.get(name, ())]
        else:
            out += list(self.protonation.get(name, ()))
            for (_, lig), ks in sorted(self.complexes.items()):
                if lig == name:
                    out += list(ks)
            for solids in self.solids.values():
                out += [s.constant for s in solids if name in s.constant.stoichiometry]
        return out


def _resolve(name: str, table: Mapping[str, dict], kind: str) -> str:
    if name in table:
        return name
    key = name.strip().lower().replace(" ", "")
    for ident, row in table.items():
        spellings = [ident, *row.get("aliases", [])]
        if key in {s.lower().replace(" ", "") for s in spellings}:
            return ident
    raise UnknownNameError(kind, name, [k for k, v in table.items() if not v.get("internal")],
                           {a: k for k, v in table.items() if not v.get("internal") for a in v.get("aliases", [])})


def _float_or_none(text: str | None) -> float | None:
    return float(text) if text not in (None, "") else None


def _species_name(metal: str, ligand: str, n: int, h: int) -> str:
    lig = ligand if n == 1 else f"({ligand}){n}"
    if h > 0:
        return f"{metal}H{h if h > 1 else ''}{lig}"
    if h < 0:
        return f"{metal}{'OH' if h == -1 else f'(OH){-h}'}{lig}"
    return f"{metal}{lig}"


@lru_cache(maxsize=1)
def database() -> Database:
    """Read and check every table once (cached)."""
    metals = {row["id"]: row for row in data.entries("metals.yaml")}
    charges = _database_charges(metals)
    refs = data.references()

    def make(species, stoich, log_K, row, dH=None, charge=None) -> FormationConstant:
        return _database_constant(species, stoich, log_K, row, charges, refs, dH=dH, charge=charge)

    w = data.table("water.csv")[0]
    water = make("OH-", {H: -1}, w["log_K"], w, charge=-1)
    return Database(charges=charges, protonation=_database_protonation(make, charges),
                    complexes=_database_complexes(make, metals, charges), hydrolysis=_database_hydrolysis(make, w),
                    solids=_database_solids(make, w), water=water, metals=metals, references=refs)


def _database_charges(metals: Mapping[str, Mapping]) -> dict[str, int]:
    """The charge of every metal, ligand and H+ (a ligand id that is also a metal id raises DataError)."""
    charges: dict[str, int] = {m: row["charge"] for m, row in metals.items()}
    for lig in data.entries("reagents.yaml", "ligands"):
        if lig["id"] in charges:
            raise DataError(f"ligand id {lig['id']!r} is also a metal id", "reagents.yaml", f"ligands/{lig['id']}", "id")
        charges[lig["id"]] = lig["charge"]
    charges[H] = 1
    return charges


def _database_constant(species, stoich, log_K, row, charges, refs, dH=None, charge=None) -> FormationConstant:
    """The FormationConstant of a table row (its source must be in references.csv): the charge from the
    components' unless given, the enthalpy from the row unless given."""
    if row["source"] not in refs:
        raise DataError(f"{species}: source key {row['source']!r} is not in references.csv")
    z = sum(nu * charges[c] for c, nu in stoich.items()) if charge is None else charge
    return FormationConstant(
        species=species, stoichiometry=stoich, charge=z, log_K=float(log_K),
        temperature_C=float(row["temperature_C"]), ionic_strength_M=float(row["ionic_strength_M"]),
        ref=row["source"], dH_kJ_mol=_float_or_none(row.get("dH_kJ_mol")) if dH is None else dH,
        medium=row.get("medium", "") or "", note=row.get("note", "") or "",
        uncertainty=_float_or_none(row.get("uncertainty")), charges=charges)


def _database_protonation(make, charges: Mapping[str, int]) -> dict[str, tuple[FormationConstant, ...]]:
    """protonation.csv: the protonated forms of each ligand, fewest protons first."""
    protonation: dict[str, list[FormationConstant]] = {}
    for row in data.table("protonation.csv"):
        lig, h = row["ligand"], int(row["h"])
        if lig not in charges:
            raise DataError(f"protonation.csv: ligand {lig!r} has no charge in reagents.yaml")
        name = f"H{h if h > 1 else ''}{lig}"
        protonation.setdefault(lig, []).append(make(name, {lig: 1, H: h}, row["log_beta"], row))
    return {k: tuple(sorted(v, key=lambda c: c.stoichiometry[H])) for k, v in protonation.items()}


def _database_complexes(make, metals: Mapping[str, Mapping], charges: Mapping[str, int]
                        ) -> dict[tuple[str, str], tuple[FormationConstant, ...]]:
    """complexes.csv: the complexes of each metal with each ligand."""
    complexes: dict[tuple[str, str], list[FormationConstant]] = {}
    for row in data.table("complexes.csv"):
        m, lig, n, h = row["metal"], row["ligand"], int(row["n"]), int(row["h"])
        if m not in metals or lig not in charges:
            raise DataError(f"complexes.csv: unknown metal {m!r} or ligand {lig!r}")
        stoich = {m: 1, lig: n}
        if h:
            stoich[H] = h
        complexes.setdefault((m, lig), []).append(make(_species_name(m, lig, n, h), stoich, row["log_beta"], row))
    return {k: tuple(v) for k, v in complexes.items()}


def _database_hydrolysis(make, w: Mapping) -> dict[str, tuple[FormationConstant, ...]]:
    """hydrolysis.csv: the hydroxo complexes of each metal, moved to the H+ form with water's row ``w``."""
    log_Kw0 = float(w["log_K"])  # I = 0, 25 degC: used to move OH- forms to the H+ form
    dH_w = float(w["dH_kJ_mol"])
    hydrolysis: dict[str, list[FormationConstant]] = {}
    for row in data.table("hydrolysis.csv"):
        m, n = row["metal"], int(row["n"])
        if float(row["ionic_strength_M"]) != 0.0 or float(row["temperature_C"]) != 25.0:
            raise DataError("hydrolysis.csv: rows must be thermodynamic (I = 0, 25 degC) to be moved to the H+ form")
        dH = _float_or_none(row.get("dH_kJ_mol"))
        name = f"{m}OH" if n == 1 else f"{m}(OH){n}"
        hydrolysis.setdefault(m, []).append(
            make(name, {m: 1, H: -n}, float(row["log_beta"]) + n * log_Kw0, row,
                 dH=None if dH is None else dH + n * dH_w))
    return {k: tuple(v) for k, v in hydrolysis.items()}


def _database_solids(make, w: Mapping) -> dict[str, tuple[Solid, ...]]:
    """solids.csv: the solids of each metal, as the formation of the solid from its components (hydroxides in the
    H+ form, with water's row ``w``)."""
    log_Kw0 = float(w["log_K"])
    solids: dict[str, list[Solid]] = {}
    for row in data.table("solids.csv"):
        m, lig, n = row["metal"], row["ligand"], int(row["n"])
        log_Ksp = float(row["log_Ksp"])
        if lig == "OH":
            if float(row["ionic_strength_M"]) != 0.0:
                raise DataError("solids.csv: hydroxide rows must be at I = 0")
            stoich, log_K = {m: 1, H: -n}, -(log_Ksp - n * log_Kw0)
        else:  # solid = m M + n L + h H+ (a salt of a ligand; h for acid and basic salts)
            stoich, log_K = {m: int(row.get("m") or 1), lig: n}, -log_Ksp
            h = int(row.get("h") or 0)
            if h:
                stoich[H] = h
        dH = _float_or_none(row.get("dH_kJ_mol"))
        const = make(row["solid"] + "(s)", stoich, log_K, row, dH=None if dH is None else -dH, charge=0)
        solids.setdefault(m, []).append(Solid(row["solid"], m, const))
    return {k: tuple(v) for k, v in solids.items()}


def constant_table(constants: list[FormationConstant] | tuple[FormationConstant, ...]) -> NDArray[np.float64]:
    """The columns log K, dz2, I_ref, T_ref and dH (NaN if unknown) of several constants, shape (5, n)."""
    return np.array([[c.log_K, c.delta_z2, c.ionic_strength_M, c.temperature_C,
                      np.nan if c.dH_kJ_mol is None else c.dH_kJ_mol] for c in constants], dtype=float).reshape(-1, 5).T


_CORRECTED: dict[tuple, tuple] = {}  # memo of corrected(): (constant ids, I, T) -> (constants, log K)


def corrected(constants: list[FormationConstant] | tuple[FormationConstant, ...] | NDArray[np.float64],
              ionic_strength_M: ArrayLike, temperature_C: ArrayLike, A: ArrayLike | None = None) -> NDArray[np.float64]:
    """log K of several constants (or their :func:`constant_table`) at the sample's conditions.

    Shape ``broadcast(I, T).shape + (len,)``.
    """
    memo = None
    if A is None and not isinstance(constants, np.ndarray) and np.ndim(ionic_strength_M) == 0 and np.ndim(temperature_C) == 0:
        # at a fixed ionic strength and temperature the corrections repeat for every candidate of a search: kept
        # (the constants themselves are held with the value, so that their ids stay theirs while it is kept)
        memo = (tuple(map(id, constants)), float(ionic_strength_M), float(temperature_C))
        hit = _CORRECTED.get(memo)
        if hit is not None:
            return hit[1]
    cols = constants if isinstance(constants, np.ndarray) else constant_table(constants)
    if memo is not None:
        if len(_CORRECTED) > 50_000:
            _CORRECTED.clear()
        out = corrected(cols, ionic_strength_M, temperature_C)
        out.flags.writeable = False
        _CORRECTED[memo] = (tuple(constants), out)
        return out
    if not cols.shape[1]:
        return np.zeros(np.broadcast(np.asarray(ionic_strength_M), np.asarray(temperature_C)).shape + (0,))
    I = np.asarray(ionic_strength_M, dtype=float)[..., None]
    T = np.asarray(temperature_C, dtype=float)[..., None]
    A_ = None if A is None else np.asarray(A, dtype=float)[..., None]
    return log_K_at(*cols, I, T, A_)


def uncorrected_for_temperature(constants, temperature_C: float) -> list[FormationConstant]:
    """Constants that keep their own temperature's value because no enthalpy is known."""
    return [c for c in constants if c.dH_kJ_mol is None and abs(c.temperature_C - temperature_C) > 1e-9]
