"""One point of the search space: a method's discrete choices and continuous settings, as the search encodes it."""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from .method import Method
from .reagents import catalogue
from .scenario import Scenario
from .strategies import strategy


@dataclass(frozen=True)
class Candidate:
    """One point of the search space, decoded (what a pymoo individual means).

    Attributes
    ----------
    pH : float
    buffer : str
    log_buffer : float
        log10 of the buffer ligand's total [mol/L] (ignored for a buffer without ligand).
    titrant : str
    masking : tuple of (agent, conc_M)
    indicator : str
    mode : str
        The strategy's id.
    back_metal : str
        The strategy's own choice (the back-titration standard), where it has one.
    extra : tuple of (name, value)
        The strategy's own genes (:meth:`~optimiser.strategies.base.Strategy.genes`: a multi-step strategy's other
        conditions), sorted by name; empty for a strategy without any.
    """

    pH: float
    buffer: str
    log_buffer: float
    titrant: str
    masking: tuple[tuple[str, float], ...]
    indicator: str
    mode: str
    back_metal: str
    extra: tuple[tuple[str, object], ...] = ()

    def method(self, scenario: Scenario) -> Method:
        buf = catalogue().buffer(self.buffer)
        base = dict(pH=self.pH, buffer=self.buffer, buffer_total_M=10 ** self.log_buffer if buf.ligand else 0.0,
                    titrant=self.titrant, titrant_conc_M=scenario.titrant_conc_M, masking=self.masking,
                    indicator=self.indicator, mode=self.mode, back_metal=self.back_metal)
        base.update(self.strategy.method_fields(dict(self.extra), scenario.sample, scenario.search, base))
        return Method(**base)

    @property
    def strategy(self):
        return strategy(self.mode)

    def ligand_totals(self) -> dict[str, float]:
        """Total concentration of each ligand the method adds (buffer ligand and masking agents) [mol/L]."""
        cat = catalogue()
        out: dict[str, float] = {}
        buf = cat.buffer(self.buffer)
        if buf.ligand:
            out[buf.ligand] = 10 ** self.log_buffer
        for a, dose in self.masking:
            lig = cat.masking_agent(a).ligand
            out[lig] = out.get(lig, 0.0) + dose
        return out

    def key(self) -> tuple:
        return (round(self.pH, 3), self.buffer, round(self.log_buffer, 2), self.titrant,
                tuple((a, round(math.log10(c), 2)) for a, c in self.masking), self.indicator, self.mode,
                self.strategy.variant(self), tuple((k, round(v, 3) if isinstance(v, float) else v) for k, v in self.extra))


def buffers_for(pH: float, allowed: Sequence[str]) -> list[str]:
    """Buffers (in the scenario's order) whose working range holds this pH."""
    cat = catalogue()
    return [b for b in allowed if cat.buffer(b).pH_range[0] <= pH <= cat.buffer(b).pH_range[1]]
