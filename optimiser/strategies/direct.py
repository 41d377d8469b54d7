"""Direct titration: the titrant is added to the buffered sample until the indicator is released."""
from __future__ import annotations


from .. import findings as fd
from .base import Array, Plan, Strategy, budget_parts, indicator_bound


class DirectTitration(Strategy):
    """Titrant into the sample; the end point is half of the indicator released from its metal complex.

    error = (V_ep - V_eq) / V_eq * 100 %.
    """

    id = "direct"
    label = "direct titration"
    complexity = 0.0
    reads_release = True
    slow_is_violation = True

    def plan_curve(self, plan: Plan) -> None:
        plan.totals = plan.totals_before
        plan.V_eq_ref = plan.V_eq
        plan.V_hi = max(1.6 * plan.V_eq, 1.25 * plan.V_all, plan.V_eq + 0.5)
        if plan.slow:
            plan.findings.append(fd.warning("slow_direct", metals=list(plan.slow), titrant=plan.method.titrant))

    def reference(self, plan: Plan, eq) -> float:
        return float(indicator_bound(plan.method, eq, plan.metals)[0])

    def turned(self, plan: Plan, eq, ref: float) -> Array:
        return (ref - indicator_bound(plan.method, eq, plan.metals)) / max(ref, 1e-300)

    def error_percent(self, plan: Plan, V_ep: float) -> float:
        return (V_ep - plan.V_eq) / plan.V_eq * 100.0

    def budget(self, plan: Plan, eq, point: int, V_ep: float) -> dict[str, float]:
        return budget_parts(plan, eq, point, plan.V_start + V_ep)


__all__ = ["DirectTitration"]
