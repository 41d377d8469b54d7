"""Displacement: a little of a metal-titrant complex (MgY, ZnY) is added so that the indicator responds.

An analyte whose own indicator complex is too weak (calcium with Eriochrome Black T or calmagite) displaces the
added metal from its titrant complex at the start; the freed metal holds the indicator until the titrant takes it
back at the end point. The metal and the titrant are added in equal amounts, so the complex adds nothing to the
titre: the error keeps the direct titration's definition, and the error budget shows the part of the added metal
not back on the titrant at the end point (``added_complex``). The water-hardness standards put magnesium-EDTA in
the buffer for this reason (Standard Methods 2340 C, in /work/shared/reference/standards.md).
"""
from __future__ import annotations

import numpy as np

from .. import findings as fd
from ..errors import InputError
from .base import Array, Plan, budget_parts
from .direct import DirectTitration

# metal -> the complex added and its usual concentration in the aliquot [mol/L], with its source.
COMPLEXES: dict[str, dict] = {
    # pH_range: the hardness buffers' pH, 10.0 +/- 0.1 (Standard Methods 2340 C), widened to 9-11 (our own choice)
    "Mg": {"dose_M": 2.5e-4, "pH_range": (9.0, 11.0),
           "salt": "magnesium-EDTA (Na2MgY), or equal amounts of MgSO4.7H2O and Na2H2Y.2H2O",
           # Standard Methods 2340 C: the ammonia buffer carries Mg-EDTA (standards.md); the amount from memory:
           # 1.179 g Na2H2Y.2H2O + 0.780 g MgSO4.7H2O per 250 mL of buffer, 1-2 mL of buffer per 50 mL of sample.
           "source": "Standard Methods 2340 C (Mg-EDTA in the buffer); dose from memory"},
    # pH_range: where zinc indicators (xylenol orange, EBT) serve, from memory
    "Zn": {"dose_M": 2.5e-4, "pH_range": (5.0, 11.0),
           "salt": "zinc-EDTA (Na2ZnY), or equal amounts of ZnSO4.7H2O and Na2H2Y.2H2O",
           # common practice: ZnY (or CuY) serves in the same way where the indicator responds to zinc (EBT, PAN)
           "source": "common practice; dose taken as for Mg-EDTA"},
}


class DisplacementTitration(DirectTitration):  # read and judged as a direct titration
    """Direct titration with a metal-titrant complex of ``method.back_metal`` added to the sample first.

    error = (V_ep - V_eq) / V_eq * 100 % (the added complex brings equal amounts of metal and titrant).
    """

    id = "displacement"
    label = "direct titration with a displacing metal complex"
    complexity = 0.5  # one more reagent in the buffer (our own scale)
    reads_release = True
    slow_is_violation = True
    family = "displacement"

    def check(self, method) -> None:
        if method.back_metal not in COMPLEXES:
            raise InputError(f"the displacement complex's metal must be {' or '.join(COMPLEXES)}; got {method.back_metal!r}")

    def applies(self, sample, search) -> bool:
        """Where an added metal binds a searched indicator more strongly than the analyte but a searched titrant less
        strongly (log K of ML): then it holds the indicator until the end point and is displaced by the analyte."""
        from .composite import log_K_ML

        for M in (m for m in search.back_metals if m in COMPLEXES):
            for ind in search.indicators:
                if not all(log_K_ML(M, ind) > log_K_ML(a, ind) > -np.inf for a in sample.analyte):
                    continue
                if any(all(log_K_ML(a, t) > log_K_ML(M, t) for a in sample.analyte) for t in search.titrants):
                    return True
        return False

    def prescreen(self, candidate, scenario) -> list[tuple[str, str]]:
        lo, hi = COMPLEXES.get(candidate.back_metal, {}).get("pH_range", (0.0, 14.0))
        if not lo <= candidate.pH <= hi:
            return [("strategy", f"the {candidate.back_metal}-titrant complex is added only between pH {lo:g} and {hi:g}")]
        return []

    def dose_M(self, method) -> float:
        """Concentration of the added complex in the aliquot [mol/L]."""
        return COMPLEXES[method.back_metal]["dose_M"]

    def added_metals(self, method) -> tuple[str, ...]:
        return (method.back_metal,)

    def plan_curve(self, plan: Plan) -> None:
        method = plan.method
        comps = plan.system.components
        iM, iY = comps.index(method.back_metal), comps.index(method.titrant)
        V0, dose = plan.V_start, self.dose_M(method)
        before = plan.totals_before

        def totals(V: Array) -> Array:
            T = before(V)
            f = V0 / (V0 + V)
            T[:, iM] += dose * f
            T[:, iY] += dose * f
            return T
        plan.totals_before = plan.totals = totals
        plan.V_eq_ref = plan.V_eq
        plan.V_hi = max(1.6 * plan.V_eq, 1.25 * plan.V_all, plan.V_eq + 0.5)
        plan.findings.append(fd.assumption("displacement_complex", metal=method.back_metal, conc_M=dose,
                                           origin=COMPLEXES[method.back_metal]["source"]))
        if plan.slow:
            plan.findings.append(fd.warning("slow_direct", metals=list(plan.slow), titrant=method.titrant))

    def budget(self, plan: Plan, eq, point: int, V_ep: float) -> dict[str, float]:
        V_total = plan.V_start + V_ep
        method = plan.method
        # the complex's metal is counted as a standard whose titrant came with it: the titrant it holds less what
        # was added is the added metal not back on the titrant (its indicator complex, its free ion)
        parts = budget_parts(plan, eq, point, V_total, standard=method.back_metal,
                             standard_added_M=self.dose_M(method) * plan.V_start / V_total)
        parts["added_complex"] = parts.pop("standard_unbound")
        return parts

    def reagent_steps(self, method, V0_mL: float) -> list[str]:
        c = COMPLEXES[method.back_metal]
        n = self.dose_M(method) * V0_mL
        return [f"Add {n:.3g} mmol of {c['salt']} ({self.dose_M(method) * 1000:.3g} mmol/L in the aliquot; the "
                f"water-hardness buffers carry it): it makes the indicator respond and adds nothing to the titre, "
                f"since metal and titrant come in equal amounts."]

    def complex_metal(self, method, sample) -> str:
        return method.back_metal

    def variant(self, method) -> str:
        return method.back_metal

    def describe(self, method) -> str:
        return f"direct with {method.back_metal}-{method.titrant} added"

    def json_fields(self, method) -> dict:
        return {"mode": self.id, "back_metal": None, "added_complex": f"{method.back_metal}-{method.titrant}",
                "added_complex_conc_M": COMPLEXES[method.back_metal]["dose_M"]}


__all__ = ["DisplacementTitration", "COMPLEXES"]
