"""The chemical system of a titration: its components (metal ions, fully deprotonated ligands, H+), every dissolved
species and possible solid with its stoichiometry, and their formation constants at given conditions.

:func:`build_system` assembles it once per set of metals and ligands (cached); :mod:`optimiser.equilibrium` solves it.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property, lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .constants import H, Database, FormationConstant, Solid, constant_table, corrected, database, davies_A, davies_f
from .errors import InputError

Array = NDArray[np.float64]


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

    def log_K_zero(self, temperature_C: float) -> tuple[Array, Array]:
        """log10 constants of the species (S,) and the solids (P,) at I = 0 and one temperature [degC] (the default
        Davies A): what :meth:`log_K` gives at I = 0 (its Davies term is then zero), remembered with it."""
        key = (float(temperature_C), -1.0)
        if key not in self._log_K_memo:
            self.log_K(np.zeros(1), np.array([float(temperature_C)]))
        lk0, ls0, _ = self._log_K_memo[key]
        return lk0, ls0

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
    def memo(self) -> dict:
        """What the solver (:mod:`optimiser.equilibrium`) and the read-out derive from the system alone, by their own
        keys (a tuple whose first item names what it is)."""
        return {}

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
    _check_ligands(db, ligands)
    comps = (*metals, *ligands, H)
    cidx = {c: i for i, c in enumerate(comps)}
    species = _dissolved_species(db, metals, ligands, comps)
    found = _possible_solids(db, metals, cidx) if solids else []
    return ChemicalSystem(
        components=comps, species=tuple(name for name, _, _, _ in species),
        nu=np.array([_stoichiometry_row(stoich, cidx) for _, stoich, _, _ in species]),
        charge=np.array([z for _, _, _, z in species]), constants=tuple(k for _, _, k, _ in species),
        solids=tuple(s.name for s, _ in found), solid_metals=tuple(m for _, m in found),
        nu_solid=np.array([_stoichiometry_row(s.constant.stoichiometry, cidx) for s, _ in found],
                          dtype=np.int64).reshape(len(found), len(comps)),
        solid_constants=tuple(s.constant for s, _ in found))


def _check_ligands(db: Database, ligands: Sequence[str]) -> None:
    """Raise InputError at the first ligand id the database does not know as a ligand."""
    for lig in ligands:
        if lig not in db.charges or lig in db.metals or lig == H:
            raise InputError(f"unknown ligand {lig!r}")


def _stoichiometry_row(stoich: Mapping[str, int], cidx: Mapping[str, int]) -> NDArray[np.int64]:
    """A species' or solid's coefficients in the components (indexed by ``cidx``)."""
    row = np.zeros(len(cidx), dtype=np.int64)
    for c, v in stoich.items():
        row[cidx[c]] = v
    return row


def _dissolved_species(db: Database, metals: tuple[str, ...], ligands: Sequence[str], comps: tuple[str, ...]
                       ) -> list[tuple[str, Mapping[str, int], FormationConstant | None, int]]:
    """(name, stoichiometry, constant, charge) of every dissolved species, in the system's order: the free
    components (no constant), OH-, the protonated ligands, then per metal its hydroxo complexes and its complexes
    with each ligand."""
    formed = [db.water, *(k for lig in ligands for k in db.protonation.get(lig, ()))]
    for m in metals:
        formed += db.hydrolysis.get(m, ())
        for lig in ligands:
            formed += db.complexes.get((m, lig), ())
    return [(c, {c: 1}, None, db.charges[c]) for c in comps] + [(k.species, k.stoichiometry, k, k.charge) for k in formed]


def _possible_solids(db: Database, metals: tuple[str, ...], cidx: Mapping[str, int]) -> list[tuple[Solid, str]]:
    """(solid, metal) of every solid of the metals made of the system's components only."""
    return [(s, m) for m in metals for s in db.solids.get(m, ()) if all(c in cidx for c in s.constant.stoichiometry)]
