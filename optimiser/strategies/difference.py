"""Determination by difference: two aliquots under two sets of conditions, the analyte from the difference.

Magnesium beside calcium: calcium + magnesium at pH 10 (Eriochrome Black T), calcium alone at pH 12-13 where
magnesium precipitates as its hydroxide (murexide or a calcon-type dye); magnesium is the difference of the two
titres (Standard Methods 2340 C and 3500-Ca B; /work/shared/reference/standards.md). Each aliquot is a titration of
its own; the analyte's error propagates from both:

    n_A = n_1 - n_2,   e_A = (n_1 e_1 - n_2 e_2) / n_A

so each aliquot's error is multiplied by the ratio of what it determines to the analyte (the error budget shows
each aliquot's parts, scaled so; they add up to e_A).
"""
from __future__ import annotations

from ..errors import InputError
from ..method import Sample
from .composite import StagedStrategy, Step, _candidate_text, step_text


class DifferenceDetermination(StagedStrategy):
    """``method`` titrates the analyte with ``method.co_analytes`` in one aliquot; ``method.stage`` the co-analytes
    alone in a second; the analyte is the difference."""

    id = "difference"
    label = "determination by difference (two aliquots)"
    complexity = 1.5  # a second aliquot, buffer and indicator (our own scale)
    time_cost = 2.0  # two titrations (our own scale)
    family = "difference"

    def check(self, method) -> None:
        if method.stage is None or not method.co_analytes:
            raise InputError("a determination by difference needs the second aliquot's conditions (stage) and the "
                             "metals it determines (co_analytes)")
        if method.stage.strategy.composite:
            raise InputError("each aliquot of a determination by difference is a single titration")

    def steps(self, sample: Sample, method) -> list[Step]:
        both = tuple(dict.fromkeys((*sample.analyte, *method.co_analytes)))
        first = Sample(sample.volume_mL, sample.metals, both, sample.ionic_strength_M, sample.temperature_C,
                       sample.acid_M)
        second = Sample(sample.volume_mL, sample.metals, method.co_analytes, sample.ionic_strength_M,
                        sample.temperature_C, sample.acid_M)
        return [Step(first, method.with_mode("direct"), step_text(both, method), reported=False),
                Step(second, method.stage, step_text(method.co_analytes, method.stage), same_aliquot=False,
                     reported=tuple(method.co_analytes) in sample.groups)]

    def derived(self, sample, method, steps, ts) -> list:
        from ..titration import EndPoint

        n1, n2 = steps[0].sample.n_analyte_mmol, steps[1].sample.n_analyte_mmol
        nA = sample.n_analyte_mmol
        t1, t2 = ts
        label = f"{', '.join(sample.analyte)} (by difference)"
        if t1.endpoint_mL is None or t2.endpoint_mL is None:
            return [EndPoint(label, None, None, None, t1.colour_change, {}, {}, step="step 1 - step 2", derived=True)]

        def scaled(b1: dict, b2: dict) -> dict:
            out = {f"step 1: {k}": v * n1 / nA for k, v in b1.items()}
            out.update({f"step 2: {k}": -v * n2 / nA for k, v in b2.items()})
            return out
        e = (n1 * t1.error_percent - n2 * t2.error_percent) / nA
        e_std = (n1 * t1.standardised_error_percent - n2 * t2.standardised_error_percent) / nA
        seen = [c for c in (t1.colour_change, t2.colour_change)]
        change = next((c for c in seen if c[0] == c[1]), t1.colour_change)
        return [EndPoint(label, t1.endpoint_mL - t2.endpoint_mL, e, max(t1.sharpness_mL or 0.0, t2.sharpness_mL or 0.0)
                         if t1.sharpness_mL is not None and t2.sharpness_mL is not None else None,
                         change, {}, scaled(t1.budget, t2.budget), step="step 1 - step 2", derived=True,
                         standardised_percent=e_std, standardised_parts=scaled(t1.standardised_budget, t2.standardised_budget))]

    def describe(self, method) -> str:
        if not hasattr(method, "stage"):
            return _candidate_text(self, method)
        return (f"by difference: analyte + {'+'.join(method.co_analytes)} at pH {method.pH:.2f}, "
                f"{'+'.join(method.co_analytes)} at pH {method.stage.pH:.2f}")

    def bench_steps(self, scenario, method, t, writers=None) -> list[str] | None:
        from .composite import composite_steps

        return composite_steps(scenario, method, t, self.steps(scenario.sample, method), between=None, writers=writers)


__all__ = ["DifferenceDetermination"]
