"""What an analyst reads from a solved curve: end point, sharpness, speciation, indicator forms, blocking,
co-titration, the indicator blank and the solids.

Each function takes solved equilibria and returns numbers or :class:`~optimiser.findings.Finding` facts;
none of them writes a sentence (see :mod:`optimiser.findings`).
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
from numpy.typing import NDArray

from . import findings as fd
from .constants import H
from .equilibrium import Equilibrium
from .findings import Finding
from .method import Method, Sample
from .pretreatment import Prepared

Array = NDArray[np.float64]
DROP_mL = 0.05  # one drop from a burette (common practice)
GRADUAL_DROPS = 8.0  # an end point that takes more than 8 drops to turn is too gradual to see (common practice)
MASKED_THRESHOLD = 0.99  # a blocking metal counts as masked when 99 % of it is held away from the indicator
BLOCK_SHARE = 0.1  # a metal that can hold more than a tenth of the dye where it should be free blocks it (our own)
UNBOUND_INDICATOR = 0.2  # below this bound fraction at the start, the indicator shows no colour change (our own)
CATEGORIES = ("free", "bound to titrant", "bound to indicator", "masked", "bound to buffer ligand", "hydroxo complexes",
              "solid", "bound to sample anions")


BUDGET_LABELS = {
    "titrant_unbound": "titrant beyond what the metals hold (end point past equivalence)",
    "indicator_blank": "analyte still held by the indicator",
    "analyte_unbound": "analyte not yet bound to the titrant",
    "standard_unbound": "back-titration standard not held by the titrant",
    "carried_over": "titrant an earlier step added beyond (or short of) the metals it titrated",
    "added_complex": "added metal-titrant complex not returned to the titrant at the end point",
}


def read_levels(method: Method, ref: float) -> tuple[float, float, float]:
    """The turned fractions read as the end point and as the start and end of the colour change.

    A two-colour indicator: the end point where half of its metal complex is gone (the mixed colour), the change
    from 10 % to 90 %. A one-colour indicator (its free dye colourless, ``Indicator.visible_limit_M`` given) read
    where the analyte releases it: the end point where its metal complex falls below the least concentration the eye
    sees, the change from ten times that concentration to it (about the last drop that clears the colour).

    Parameters
    ----------
    ref : float
        Fraction of the indicator bound to the metals at the start.
    """
    lim = method.indicator_info.visible_limit_M
    c = method.indicator_dose_M * ref  # the metal complex at the start [mol/L]
    if lim is None or not method.strategy.reads_release or not lim < 0.5 * c:
        return 0.5, 0.1, 0.9
    return 1.0 - lim / c, max(0.1, 1.0 - 10.0 * lim / c), 1.0 - lim / c


def shows_no_change(method: Method, ref: float) -> bool:
    """True where the indicator is too little bound at the start to show a colour change: less than
    :data:`UNBOUND_INDICATOR` of a two-colour dye; for a one-colour dye read where the analyte releases it, a metal
    complex below ten times the least concentration the eye sees (such a dye is dosed in excess over the metal, so a
    small bound fraction is still an intense colour)."""
    lim = method.indicator_info.visible_limit_M
    if lim is None or not method.strategy.reads_release:
        return ref < UNBOUND_INDICATOR
    return method.indicator_dose_M * ref < 10.0 * lim


def turned_crossing(method: Method, x: Array, turned: Array, level: float) -> float | None:
    """First x at which the indicator has turned by ``level``: linear interpolation for a two-colour indicator; for a
    one-colour indicator above half-turned, interpolation on log10(1 - turned), since its complex falls about
    exponentially with the titrant near the end point (a straight line there would put the end point late on a
    coarse curve)."""
    if method.indicator_info.visible_limit_M is None or level <= 0.5:
        return interp_crossing(x, turned, level)
    y = -np.log10(np.clip(1.0 - np.asarray(turned, dtype=float), 1e-15, None))
    return interp_crossing(x, y, -float(np.log10(1.0 - level)))


def budget_label(key: str) -> str:
    """Words for an error-budget key (``cotitration:<metal>`` or one of :data:`BUDGET_LABELS`)."""
    if key.startswith("step "):  # a multi-step strategy's result: "step 2: <key>"
        step, rest = key.split(": ", 1)
        return f"{step}: {budget_label(rest)}"
    if key.startswith("cotitration:"):
        return f"{key.split(':', 1)[1]} co-titrated"
    return BUDGET_LABELS[key]


def interp_crossing(x: Array, y: Array, level: float, start: int = 0) -> float | None:
    """First x at which y rises through ``level`` (linear interpolation), searching from index ``start``."""
    above = np.nonzero(y[start:] >= level)[0]
    if not len(above):
        return None
    i = start + int(above[0])
    if i == 0:
        return float(x[0])
    x0, x1, y0, y1 = x[i - 1], x[i], y[i - 1], y[i]
    return float(x0 + (level - y0) * (x1 - x0) / (y1 - y0)) if y1 != y0 else float(x1)


def _category(ligands: Sequence[str], is_free: bool, method: Method, mask_ligands: set[str],
              anions: Mapping[str, float] | None = None) -> str | None:
    if not ligands:
        return "free" if is_free else "hydroxo complexes"
    if method.titrant in ligands:
        return "bound to titrant"
    if method.indicator in ligands:
        return "bound to indicator"
    if mask_ligands & set(ligands):
        return "masked"
    if method.buffer_info.ligand in ligands:
        return "bound to buffer ligand"
    if anions and set(anions) & set(ligands):
        return "bound to sample anions"
    return None


def _holders(system, metal: str) -> list[tuple[int, object, list[str], bool]]:
    """The species that hold ``metal``, in the system's order: (index, its coefficient, its other components but H+,
    whether it is the free ion); remembered per system."""
    key = ("holders", metal)
    memo = system.memo
    if key not in memo:
        i = system.index(metal)
        memo[key] = [(k, row[i], [c for c, v in zip(system.components, row) if v > 0 and c != metal and c != H], sp == metal)
                     for k, (sp, row) in enumerate(zip(system.species, system.nu)) if row[i] > 0]
    return memo[key]


def speciation(eq: Equilibrium, point: int, prep: Prepared, method: Method, metals: Sequence[str],
               anions: Mapping[str, float] | None = None) -> dict[str, dict[str, float]]:
    """Where each metal is at one point, as shares of its total: free, titrant, indicator, masking, buffer, hydroxo,
    solid, the sample's anions (:data:`CATEGORIES`)."""
    s = eq.system
    mask_ligs = {agent.ligand for agent in method.masking_agents}
    out: dict[str, dict[str, float]] = {}
    c = eq.c[point]
    for m in metals:
        i = s.index(m)
        tot = eq.totals[point, i] + 0.0
        parts = dict.fromkeys(CATEGORIES, 0.0)
        for k, n, ligs, free in _holders(s, m):
            cat = _category(ligs, free, method, mask_ligs, anions)
            if cat is not None:
                parts[cat] += n * c[k]
        parts["solid"] = float(eq.solid_amount[point] @ s.nu_solid[:, i]) if s.solids else 0.0
        total_all = tot + prep.masked_by_assumption.get(m, 0.0)
        if total_all <= 0:
            continue
        parts["masked"] += prep.masked_by_assumption.get(m, 0.0)
        out[m] = {k: v / total_all for k, v in parts.items()}
    for m, c in prep.masked_by_assumption.items():
        if m not in out and c > 0:
            out[m] = {**dict.fromkeys(CATEGORIES, 0.0), "masked": 1.0}
    return out


def indicator_forms(eq: Equilibrium, method: Method, metals: Sequence[str]) -> tuple[dict[str, Array], dict[str, str]]:
    """The indicator's forms along the curve: fractions of its total, and the colour of each form.

    Keys are ``"<metal>-<indicator>"`` for metal complexes and ``"In"``, ``"HIn"``, ``"H2In"``, ... for the free dye.
    """
    system, indicator = eq.system, method.indicator_info
    comps = system.components
    iI = comps.index(method.indicator)
    fr: dict[str, Array] = {}
    colours: dict[str, str] = {}
    tot_ind = np.maximum(eq.totals[:, iI], 1e-300)
    for k, row in enumerate(system.nu):
        if row[iI] <= 0:
            continue
        metal_in = [c for c, v in zip(comps, row) if v > 0 and c in metals]
        if metal_in:
            key = f"{metal_in[0]}-{indicator.id}"
            colours[key] = indicator.complex_colour(metal_in[0])
        else:
            h = int(row[comps.index(H)])
            key = f"H{h if h > 1 else ''}In" if h > 0 else "In"
            colours[key] = indicator.free_colour(h)
        fr[key] = fr.get(key, 0.0) + row[iI] * eq.c[:, k] / tot_ind
    return fr, colours


def dominant_free_form(fractions: Mapping[str, Array], point: int) -> int:
    """Protons on the free dye's most abundant form at ``point``."""
    free = {k: v[point] for k, v in fractions.items() if "-" not in k}
    if not free:
        return 0
    key = max(free, key=free.get)
    return 0 if key == "In" else int(key[1:-2] or 1)


def cotitrated(eqp: Equilibrium, point: int, sample: Sample, method: Method) -> dict[str, float]:
    """Share of each interferent bound to the titrant at ``point`` (the end point)."""
    comps = eqp.system.components
    out = {}
    for m in sample.interferents:
        if m in comps:
            tot = eqp.totals[point, comps.index(m)]
            out[m] = float(eqp.bound(m, method.titrant)[point] / tot) if tot > 0 else 0.0
        else:
            out[m] = 0.0
    return out


def indicator_blank(eqp: Equilibrium, point: int, sample: Sample, method: Method) -> float | None:
    """Analyte still held by the indicator at ``point``, as a negative share of the analyte [%].

    An indicator blank: it cancels when the titrant is standardised against the same metal with the same
    indicator dose.
    """
    comps = eqp.system.components
    held = sum(float(eqp.bound(method.indicator, a)[point]) for a in sample.analyte if a in comps)
    total = sum(float(eqp.totals[point, comps.index(a)]) for a in sample.analyte if a in comps)
    return -100.0 * held / total if total > 0 else None


def solid_findings(eq_start: Equilibrium, start: int, eq_end: Equilibrium, end: int, sample: Sample
                   ) -> tuple[list[str], list[Finding]]:
    """The analyte's own solids that make the method fail, and a finding for every solid present at the start
    (``eq_start`` at ``start``) or at the end point (``eq_end`` at ``end``).

    A solid that holds one of the sample's anions is named with its amount and share of its metal. A solid of the
    analyte with an anion that can be driven off before the titration (carbonate, as CO2), present before the titrant
    is added but gone at the end point, does not fail the method: it is a warning with the published remedies (most of
    the titrant before the pH is raised, the five-minute rule, or the anion driven off first).
    """
    from .anions import ligands as anion_ligands

    system = eq_start.system
    at_start, at_end = set(eq_start.solids_present(start)), set(eq_end.solids_present(end))
    analyte_solids, out = [], []
    for s_name in sorted(at_start | at_end):
        j = system.solids.index(s_name)
        m = system.solid_metals[j]
        row = system.nu_solid[j]
        anions = [c for c, v in zip(system.components, row, strict=True) if v > 0 and c in sample.anions]
        eq, k = (eq_start, start) if s_name in at_start else (eq_end, end)
        if anions:
            lig = anion_ligands()[anions[0]]
            amount = float(eq.solid_amount[k, j])
            total = float(eq.totals[k, system.index(m)])
            values = {"solid": s_name, "metal": m, "anion": lig.name, "amount_mM": 1000 * amount,
                      "share": 100 * row[system.index(m)] * amount / total if total > 0 else 0.0}
            if m in sample.analyte and lig.expel and s_name not in at_end:
                out.append(fd.warning("anion_solid_dissolves", source="aoac_973_52", expel=lig.expel, **values))
                continue
            where = "before the titrant is added" if s_name not in at_end else (
                "at the end point" if s_name not in at_start else "before the titrant is added and at the end point")
            out.append(fd.warning("anion_solid", where=where, **values))
        if m in sample.analyte:
            analyte_solids.append(s_name)
            out.append(fd.warning("analyte_precipitates", metal=m, solid=s_name))
        else:
            out.append(fd.warning("solid_carries_down", solid=s_name, analyte=list(sample.analyte),
                                  source="Flaschka and Ganchoff"))
    return analyte_solids, out


def _holds_dye(eq: Equilibrium, method: Method, metal: str) -> bool:
    """Whether the data hold a constant for the metal's complex with the indicator (it is then in the equilibrium)."""
    s = eq.system
    if metal not in s.components:
        return False
    i, j = s.index(metal), s.index(method.indicator)
    return bool(np.any((s.nu[:, i] > 0) & (s.nu[:, j] > 0)))


def blocking(spec_start: Mapping[str, Mapping[str, float]], sample: Sample, method: Method, eq_end: Equilibrium,
             point: int) -> list[str]:
    """Metals that block the indicator, judged by amount.

    A metal listed as blocking the dye and not held away from it (:data:`MASKED_THRESHOLD`) blocks it:

    - where a published method states the level it tolerates (``tolerated`` in indicators.yaml), above that level;
    - where the data hold its complex with the dye, when it still holds more than :data:`BLOCK_SHARE` of the dye
      at the end point (``eq_end`` at ``point``: the equilibrium already holds the dye);
    - otherwise when its amount left in solution exceeds :data:`BLOCK_SHARE` of the dye's (a blocking metal holds
      at most its own amount of dye, so less leaves the colour change readable).
    """
    from .units import molar_mass_of_metal

    ind = method.indicator_info
    out = []
    for m in ind.blocked_by:
        sp = spec_start.get(m)
        if sp is None or m not in sample.metals:
            continue
        held = method.strategy.held_from_indicator(sp)
        if held >= MASKED_THRESHOLD:
            continue
        left_M = sample.metals[m] * (1.0 - held)
        if m in ind.tolerated_mg_L:
            blocked = left_M * molar_mass_of_metal(m) * 1000.0 > ind.tolerated_mg_L[m]
        elif _holds_dye(eq_end, method, m):
            total = eq_end.totals[point, eq_end.system.index(method.indicator)]
            blocked = float(eq_end.bound(method.indicator, m)[point]) > BLOCK_SHARE * total
        else:
            blocked = left_M > BLOCK_SHARE * method.indicator_dose_M
        if blocked:
            out.append(m)
    return out


def inferred_blocker(eq: Equilibrium, method: Method, metals: Sequence[str]) -> str | None:
    """The metal that still holds more than half of the indicator at the end of a curve whose indicator never
    turned."""
    tot = np.maximum(eq.totals[:, eq.system.index(method.indicator)], 1e-300)
    holders = {m: float(eq.bound(method.indicator, m)[-1]) for m in metals}
    worst = max(holders, key=holders.get)
    return worst if holders[worst] / tot[-1] > 0.5 else None
