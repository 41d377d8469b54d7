"""Back-titration: a measured excess of titrant, then the excess titrated with a metal standard.

Used where the analyte reacts too slowly with the titrant, blocks the indicator, or precipitates at the
titration pH. With a slow analyte (aluminium) the excess goes into the still acidic sample, which is boiled
before it is buffered, so that the analyte's complex forms and then stays inert (common practice).
"""
from __future__ import annotations

import numpy as np

from .. import findings as fd
from ..errors import InputError
from ..reagents import catalogue
from .base import Array, Plan, Strategy, budget_parts, indicator_bound



class BackTitration(Strategy):
    """Excess titrant, then a standard of ``method.back_metal``; the end point is half of the indicator's plateau
    bound to the standard.

    error = (c_Y V_x - c_B V_ep - n_analyte) / n_analyte * 100 %.
    """

    id = "back"
    label = "back-titration"
    complexity = 1.0
    reads_release = False
    slow_is_violation = False
    uses_standard = True
    volume_name = "back-titrant"
    family = "back-titration"

    def check(self, method) -> None:
        standards = catalogue().standards  # the back-titration standards are data (reagents.yaml)
        if method.back_metal not in standards:
            raise InputError(f"the back-titration standard must be {' or '.join(standards)}; got {method.back_metal!r}")
        if not method.excess_ratio > 1.0:
            raise InputError("the titrant excess ratio of a back-titration must be above 1")

    def added_metals(self, method) -> tuple[str, ...]:
        return (method.back_metal,)

    def plan_curve(self, plan: Plan) -> None:
        method, sample, system = plan.method, plan.sample, plan.system
        comps = system.components
        cT = method.titrant_conc_M
        n_an = sample.n_analyte_mmol
        V0 = sample.volume_mL
        V_x = method.excess_ratio * max(plan.V_all, plan.V_eq)  # an excess over the analyte even where part of it cannot bind
        cB = method.back_concentration
        VB_eq = (cT * V_x - n_an) / cB
        iB, iY = comps.index(method.back_metal), comps.index(method.titrant)
        plan.V_x, plan.V_eq_ref = V_x, VB_eq
        plan.V_hi = max(1.8 * VB_eq, (cT * V_x) / cB * 1.1)
        inert = np.zeros(len(comps))
        if plan.slow:
            from ..equilibrium import solve  # the compiled solver loads only when a curve is planned
            from ..medium import background_M

            T_x = plan.totals_before(np.array([V_x]))
            first = solve(system, T_x, pH=method.pH, ionic_strength_M=None,
                          background_ionic_strength_M=background_M(plan, T_x), temperature_C=sample.temperature_C,
                          ionic_strength_start_M=plan.medium.ionic_strength_M)
            for m in plan.slow:
                bound = first.bound(m, method.titrant)[0]
                inert[comps.index(m)] += bound
                inert[iY] += bound
            plan.frozen = {m: float(first.bound(m, method.titrant)[0] / max(first.totals[0, comps.index(m)], 1e-300))
                           for m in plan.slow}
            plan.inert_mM = {method.titrant: float(inert[iY]) * (V0 + V_x)}
        totals_before = plan.totals_before

        def totals_back(V: Array) -> Array:
            T0 = totals_before(np.array([V_x]))[0] - inert
            T = np.maximum(T0, 0.0)[None, :] * ((V0 + V_x) / (V0 + V_x + V))[:, None]
            T[:, iB] += cB * V / (V0 + V_x + V)
            return T
        plan.totals = totals_back
        plan.findings.append(fd.assumption("back_excess", excess_ratio=method.excess_ratio, excess_mL=V_x,
                                           standard_conc_M=cB, standard=method.back_metal))
        if plan.slow:
            plan.findings.append(fd.assumption("slow_heated", metals=list(plan.slow), standard=method.back_metal))

    def reference(self, plan: Plan, eq) -> float:
        return float(indicator_bound(plan.method, eq, [plan.method.back_metal])[-1])

    def turned(self, plan: Plan, eq, ref: float) -> Array:
        return indicator_bound(plan.method, eq, [plan.method.back_metal]) / max(ref, 1e-300)

    def error_percent(self, plan: Plan, V_ep: float) -> float:
        method = plan.method
        n_an = plan.sample.n_analyte_mmol
        return ((method.titrant_conc_M * plan.V_x - method.back_concentration * V_ep) - n_an) / n_an * 100.0

    def budget(self, plan: Plan, eq, point: int, V_ep: float) -> dict[str, float]:
        V_total = plan.sample.volume_mL + plan.V_x + V_ep
        method = plan.method
        return budget_parts(plan, eq, point, V_total, inert_mmol=plan.inert_mM.get(method.titrant, 0.0),
                            standard=method.back_metal, standard_added_M=method.back_concentration * V_ep / V_total)

    def colour_change(self, complex_colour: str, free_colour: str) -> tuple[str, str]:
        return free_colour, complex_colour

    def complex_metal(self, method, sample) -> str:
        return method.back_metal

    def free_form_point(self) -> int:
        return 0

    def held_from_indicator(self, speciation: dict[str, float]) -> float:
        # the excess titrant holds the metal away from the indicator before the back-titration starts
        return speciation["masked"] + speciation["bound to titrant"]

    def titre_mL(self, endpoint_mL: float | None, excess_mL: float | None) -> float:
        return max(excess_mL or 0.0, endpoint_mL or 0.0)

    def variant(self, method) -> str:
        return method.back_metal

    def describe(self, method) -> str:
        return f"back-titration with {method.back_metal}"

    def volume_label(self, method) -> str:
        return f"back-titrant ({method.back_metal}) volume / mL"

    def json_fields(self, method) -> dict:
        return {"mode": self.id, "back_metal": method.back_metal}
