"""Sequential titration: two titrations one after the other in the same aliquot, at two pH values.

The metal whose titrant complex holds at the lower pH is titrated first (bismuth at pH 1-2 with xylenol orange);
the pH is then raised with a second buffer and the next metal titrated in the same solution, often with the same
dye (lead at pH 5-6 with hexamine) (common practice; /work/shared/DOMAIN.md). The second titration starts from the
solution the first left at its end point: the volumes add up, and the titrant the first added beyond (or short of)
its metal is found in the second result (its ``carried_over`` budget part).
"""
from __future__ import annotations

from ..errors import InputError
from ..method import Sample
from .composite import StagedStrategy, Step, _candidate_text, step_text


class SequentialTitration(StagedStrategy):
    """``method.stage`` titrates ``method.co_analytes``, then ``method`` the analyte, in one aliquot (lower pH first)."""

    id = "sequential"
    label = "sequential titration in one aliquot"
    complexity = 1.0  # a second buffer and a second end point (our own scale)
    time_cost = 1.5  # one aliquot, two end points (our own scale)
    family = "sequential titration"

    def check(self, method) -> None:
        if method.stage is None or not method.co_analytes:
            raise InputError("a sequential titration needs the first step's conditions (stage) and the metals it "
                             "determines (co_analytes)")
        if method.stage.strategy.composite or method.stage.mode != "direct":
            raise InputError("each step of a sequential titration must be a direct titration")

    def steps(self, sample: Sample, method) -> list[Step]:
        first = Sample(sample.volume_mL, sample.metals, method.co_analytes, sample.ionic_strength_M,
                       sample.temperature_C, sample.acid_M)
        second = Sample(sample.volume_mL, sample.metals, sample.analyte, sample.ionic_strength_M,
                        sample.temperature_C, sample.acid_M)
        reported = tuple(method.co_analytes) in sample.groups
        pair = [Step(first, method.stage, step_text(method.co_analytes, method.stage), reported=reported),
                Step(second, method.with_mode("direct"), step_text(sample.analyte, method))]
        if method.stage.pH > method.pH:  # the lower pH first: the metal titrated there stays bound as the pH rises
            pair = [replace_first(pair[1]), replace_first(pair[0], same=True)]
        return pair

    def describe(self, method) -> str:
        if not hasattr(method, "stage"):
            return _candidate_text(self, method)
        return (f"sequential: {'+'.join(method.co_analytes)} at pH {method.stage.pH:.2f}, then the analyte at "
                f"pH {method.pH:.2f}")

    def bench_steps(self, scenario, method, t, writers=None) -> list[str] | None:
        from .composite import composite_steps

        return composite_steps(scenario, method, t, self.steps(scenario.sample, method), between=self._between, writers=writers)

    @staticmethod
    def _between(k, step) -> str:
        return (f"Without emptying the flask, raise the pH to {step.method.pH:.2f} with the {step.method.buffer_info.name} "
                "buffer below (the solution turns back to the complex colour)")


def replace_first(step: Step, same: bool = False) -> Step:
    from dataclasses import replace

    return replace(step, same_aliquot=same)


__all__ = ["SequentialTitration"]
