"""The medium of a titration: the alkali counter-ions and spectator anions the whole recipe brings, and the ionic
strength they give at each point of the curve.

Every ion the aliquot holds comes from something weighed or measured into it, and every one of those is neutral:

- the sample: its metals, taken as salts of a monovalent anion (nitrate or chloride, common practice); its acid,
  neutralised with the catalogue's strong base (the procedure's step); its matrix's alkali ions
  (``Sample.alkali_M``, with a monovalent anion); and ``Sample.ionic_strength_M``, the ionic strength of the
  matrix's own electrolyte that the model does not otherwise know (its background, diluted like the aliquot);
- the buffer: its ligand's forms at the pH carry a charge that the weighed salt's Na+ or K+ (sodium acetate), a
  monovalent anion (the Cl- of NH4Cl, the HCl that protonates hexamine, the HNO3 that sets an acid pH) or the strong
  base that adjusts the pH (NaOH) balance; a strong-base buffer is the free hydroxide at the pH with its cation;
- the masking agents: their salts' Na+ and K+ (NaF, KCN, Na2S2O3); their anion is the masking ligand itself;
- the titrant: its salt's Na+ (Na2H2Y) and any the data add for a free acid dissolved with NaOH.

Na+ and K+ (the metals marked ``counter_ion`` in ``metals.yaml``) become components of the equilibrium, so that
their ion pairs with the titrant (NaY3-, KY3-) are solved and their share of the ionic strength is counted with
the other species. The spectator anions bind nothing and enter the solve as its background
(:func:`background_M`). The solver then computes the ionic strength of each point from its species
(``ionic_strength_M=None``). At a fixed pH the protons the titrant releases are taken up by the buffer without
being followed (the buffer's forms keep the pH's ratio): the ionic strength is then off by at most the
concentration of the complex formed, in either direction. Likewise the OH- that hydroxo complexes and hydroxide
solids take from a strong base is not added to its cation (at most twice the metals precipitated).

No reagent is named here: what an ion is and which reagent brings it is read from the data (formulas, recipe kinds,
``counter_ions``).
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np
import periodictable
from numpy.typing import NDArray

from .conditional import Conditions, ligand_fractions
from .constants import (
    DAVIES_LIMIT_M,
    IONIC_STRENGTH_MAX_M,
    database,
    davies_A,
    davies_f,
    log_K_at,
)

if TYPE_CHECKING:  # pragma: no cover
    from .method import Method, Sample
    from .reagents import Buffer
    from .strategies.base import Plan

Array = NDArray[np.float64]
ESTIMATE_PASSES = 4  # fixed-point passes for the ionic strength the buffer's forms and the free hydroxide are read at


@lru_cache(maxsize=1)
def counter_ions() -> tuple[str, ...]:
    """Ids of the metals marked ``counter_ion`` in ``metals.yaml`` (Na, K)."""
    return tuple(m for m, row in database().metals.items() if row.get("counter_ion"))


@lru_cache(maxsize=256)
def formula_ions(formula: str | None) -> tuple[tuple[str, float], ...]:
    """Counter-ions in one formula unit of a salt, as (metal id, count): ``"C10H14N2Na2O8(H2O)2"`` holds 2 Na.

    >>> formula_ions("C4H4KNaO6(H2O)4")
    (('Na', 1.0), ('K', 1.0))
    """
    if not formula:
        return ()
    atoms = periodictable.formula(formula).atoms
    db = database()
    out = []
    for m in counter_ions():
        n = sum(v for el, v in atoms.items() if el.symbol == db.metals[m]["element"])
        if n:
            out.append((m, float(n)))
    return tuple(out)


def titrant_ions(method: Method) -> dict[str, float]:
    """Counter-ions the titrant brings per mole of titrant [mol/mol]: its formula's and its data's ``counter_ions``."""
    out = dict(formula_ions(method.titrant_info.formula))
    for m, n in method.titrant_info.counter_ions:
        out[m] = out.get(m, 0.0) + n
    return out


def adjusting_base_ions() -> dict[str, float]:
    """Counter-ions per mole of OH- of the strong base a bench adjusts the pH with: the catalogue's first
    ``strong_base`` buffer's formula (sodium hydroxide)."""
    from .reagents import catalogue

    for b in catalogue().buffers.values():
        if b.recipe.kind == "strong_base":
            return dict(formula_ions(b.recipe.base_formula))
    return {}


def buffer_forms(buffer: Buffer, total_M: float, pH: float, ionic_strength_M: float, temperature_C: float) -> Array:
    """Concentration of each form of the buffer's ligand at the pH [mol/L]: L, HL, H2L, ... (its unbound
    protonation fractions at the ionic strength and temperature, times its total); empty without a ligand."""
    if not buffer.ligand or total_M <= 0:
        return np.zeros(0)
    return total_M * np.array(_fractions(buffer.ligand, float(pH), min(float(ionic_strength_M), IONIC_STRENGTH_MAX_M),
                                         float(temperature_C)))


@lru_cache(maxsize=65536)
def _fractions(ligand: str, pH: float, ionic_strength_M: float, temperature_C: float) -> tuple[float, ...]:
    """A ligand's unbound protonation fractions (remembered: a search asks for the same few thousand many times)."""
    return tuple(float(x) for x in np.asarray(ligand_fractions(ligand, pH, Conditions(ionic_strength_M, temperature_C)),
                                              dtype=float).reshape(-1))


def free_hydroxide_M(pH: float, ionic_strength_M: float, temperature_C: float) -> float:
    """[OH-] [mol/L] at a glass-electrode pH (-log a(H+)): Kw(T) / (a(H+) gamma(OH-)), Davies gamma.

    >>> round(free_hydroxide_M(12.0, 0.1, 25.0) * 1000, 1)
    12.9
    """
    w = database().water
    dH = np.nan if w.dH_kJ_mol is None else w.dH_kJ_mol
    log_Kw = float(log_K_at(w.log_K, w.delta_z2, w.ionic_strength_M, w.temperature_C, dH, 0.0, temperature_C))
    return float(10.0 ** (pH + log_Kw + davies_A(temperature_C) * davies_f(ionic_strength_M)))


def free_hydrogen_M(pH: float, ionic_strength_M: float, temperature_C: float) -> float:
    """[H+] [mol/L] at a glass-electrode pH: a(H+) / gamma(H+), Davies gamma.

    >>> round(free_hydrogen_M(2.0, 0.1, 25.0) * 1000, 2)
    12.8
    """
    return float(10.0 ** (-pH + davies_A(temperature_C) * davies_f(ionic_strength_M)))


@dataclass(frozen=True)
class Medium:
    """The ions the recipe brings besides the metals, ligands and indicator, in the aliquot as prepared (before the
    titrant).

    Attributes
    ----------
    cations : Mapping[str, float]
        Counter-ion id (Na, K) -> concentration [mol/L].
    titrant_cations : Mapping[str, float]
        Counter-ion id -> mol per mol of titrant added.
    anions_M : float
        Monovalent spectator anions [mol/L], besides those of the sample's metal salts (counted from the metals'
        totals at each point).
    background_M : float
        The sample matrix's own background ionic strength, diluted into the aliquot as prepared [mol/L].
    parts : tuple of (str, str, float)
        (what brings it, ion id or ``"anion"``, mol/L) for each contribution, for the report.
    ionic_strength_M : float
        Estimated ionic strength of the aliquot as prepared, before the titrant [mol/L] (the buffer's forms and the
        free hydroxide are read at it; the solve computes the exact one).
    """

    cations: Mapping[str, float]
    titrant_cations: Mapping[str, float]
    anions_M: float
    background_M: float
    parts: tuple[tuple[str, str, float], ...]
    ionic_strength_M: float

    def present(self) -> tuple[str, ...]:
        """Counter-ions present in the aliquot or brought by the titrant, in the data's order."""
        return tuple(m for m in counter_ions() if self.cations.get(m, 0.0) > 0 or self.titrant_cations.get(m, 0.0) > 0)


def _recipe_ions(sample: Sample, method: Method, I: float) -> tuple[list[tuple[str, str, float]], float]:
    """The recipe's counter-ions and spectator anions at ionic strength I, as parts, and the ionic strength of the
    charged forms they balance (metals, buffer forms, free OH- or H+, masking ligands) [mol/L]."""
    db = database()
    T, pH = sample.temperature_C, method.pH
    parts: list[tuple[str, str, float]] = []
    half_z2 = 0.0
    adjust = adjusting_base_ions()
    for m, c in sample.metals.items():
        z = db.metals[m]["charge"]
        half_z2 += 0.5 * (z * z + z) * c  # the metal and its z monovalent anions
    for m, c in sample.alkali_M.items():
        parts += [("sample matrix", m, c), ("sample matrix", "anion", c)]
    if sample.acid_M > 0:
        parts += [("sample acid, neutralised", m, n * sample.acid_M) for m, n in adjust.items()]
        parts.append(("sample acid, neutralised", "anion", sample.acid_M))
    buf = method.buffer_info
    label = f"buffer ({buf.id})"
    if buf.ligand:
        forms = buffer_forms(buf, method.buffer_total_M, pH, I, T)
        zL = db.charges[buf.ligand]
        charges = zL + np.arange(len(forms))
        q = float(forms @ charges)  # charge the buffer's forms carry [mol/L]
        half_z2 += 0.5 * float(forms @ charges ** 2)
        r = buf.recipe
        weighed = {"salt_plus_base_solution": float(forms[1:].sum()), "salt_plus_acid_solution": float(forms[0]),
                   "base_plus_acid_solution": float(forms.sum())}.get(r.kind, 0.0)
        for m, n in formula_ions(r.weighed_formula):
            parts.append((label, m, n * weighed))
            q += n * weighed
        if q > 0:  # an acid salt's or a strong acid's anion
            parts.append((label, "anion", q))
        elif q < 0:  # made up with the strong base that adjusts the pH
            parts += [(label + ", pH adjusted", m, -n * q) for m, n in adjust.items()]
    elif buf.recipe.kind == "strong_base":
        oh = free_hydroxide_M(pH, I, T)
        half_z2 += 0.5 * oh
        parts += [(label, m, n * oh) for m, n in formula_ions(buf.recipe.base_formula)]
    elif buf.recipe.kind == "strong_acid":
        h = free_hydrogen_M(pH, I, T)
        half_z2 += 0.5 * h
        parts.append((label, "anion", h))
    for agent, (_, dose) in zip(method.masking_agents, method.masking, strict=True):
        parts += [(f"masking ({agent.id})", m, n * dose) for m, n in formula_ions(agent.formula)]
        half_z2 += 0.5 * db.charges[agent.ligand] ** 2 * dose
    return parts, half_z2


def medium(sample: Sample, method: Method) -> Medium:
    """The medium of ``method`` applied to ``sample``: counter-ions, spectator anions and background, with the
    ionic strength of the aliquot as prepared estimated by a few fixed-point passes (the buffer's forms and the free
    hydroxide depend on it). Remembered by what it is computed from (a search asks for the same one several times
    per candidate: its titration, its standard's, its side reactions)."""
    key = (sample.ionic_strength_M, sample.temperature_C, tuple(sample.metals.items()), tuple(sample.alkali_M.items()),
           sample.acid_M, method.pH, method.buffer, method.buffer_total_M, method.masking, method.titrant)
    found = _MEDIA.get(key)
    if found is None:
        if len(_MEDIA) >= MEDIA_REMEMBERED:
            _MEDIA.clear()
        found = _MEDIA[key] = _medium(sample, method)
    return found


MEDIA_REMEMBERED = 20_000  # media kept by medium() (a few kB each) before the memory starts afresh
_MEDIA: dict[tuple, Medium] = {}


def _medium(sample: Sample, method: Method) -> Medium:
    background = sample.ionic_strength_M
    I = background
    for _ in range(ESTIMATE_PASSES):
        parts, half_z2 = _recipe_ions(sample, method, I)
        I = min(background + half_z2 + 0.5 * sum(c for _, _, c in parts), IONIC_STRENGTH_MAX_M)
    cations: dict[str, float] = {}
    anions = 0.0
    for _, ion, c in parts:
        if ion == "anion":
            anions += c
        else:
            cations[ion] = cations.get(ion, 0.0) + c
    return Medium(cations=cations, titrant_cations=titrant_ions(method), anions_M=anions, background_M=background,
                  parts=tuple(parts), ionic_strength_M=I)


def side_reactions(sample: Sample, method: Method) -> tuple[Conditions, dict[str, float]]:
    """What the side-reaction (conditional constant) picture takes from the medium: the conditions at the ionic
    strength of the aliquot as prepared, and the alkali ions at the equivalence point (the aliquot's and the
    titrant's, diluted to the equivalence volume) [mol/L]."""
    med = medium(sample, method)
    V0, cT = sample.volume_mL, method.titrant_conc_M
    V_eq = sample.n_analyte_mmol / cT
    alkali = {m: (med.cations.get(m, 0.0) * V0 + med.titrant_cations.get(m, 0.0) * cT * V_eq) / (V0 + V_eq)
              for m in med.present()}
    from .method import titration_temperature_C  # method imports nothing of the medium; kept local all the same
    return Conditions(med.ionic_strength_M, titration_temperature_C(sample, method.indicator_info)), alkali


def background_M(plan: Plan, totals: Array) -> Array:
    """The spectators' share of the ionic strength at each point [mol/L]: the matrix's background and the
    monovalent anions of the recipe (diluted as the aliquot is), and the anions of the metal salts (z per metal ion,
    from the metals' totals at the point); the solve adds every species it holds.

    The dilution of the aliquot at each point is read from the indicator's total, which only the aliquot brings.
    """
    system, med = plan.system, plan.medium
    comps = system.components
    db = database()
    T = np.atleast_2d(totals)
    dilution = T[:, comps.index(plan.method.indicator)] / plan.method.indicator_dose_M
    anions = med.anions_M * dilution
    for m in comps:
        row = db.metals.get(m)
        if row is not None and not row.get("counter_ion"):
            anions = anions + row["charge"] * T[:, comps.index(m)]
    return med.background_M * dilution + 0.5 * anions


def beyond_davies(ionic_strength_M: Array) -> float | None:
    """The largest ionic strength reached where it passes :data:`~optimiser.constants.DAVIES_LIMIT_M`, else None."""
    top = float(np.max(ionic_strength_M, initial=0.0))
    return top if top > DAVIES_LIMIT_M else None
