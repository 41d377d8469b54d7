"""The ways of running a titration, one module each, behind one interface.

A strategy says what it adds to the sample as the titrant (or back-titrant) goes in, how the indicator's signal is
read, where the equivalence and end point are, how the error is defined, what the bench procedure needs, and what
it costs in complexity. Nothing outside this package tests a method's mode by name: code asks
``method.strategy`` (or :func:`strategy`) instead.

Adding a strategy: write a module with a subclass of :class:`Strategy`, and add it to :data:`REGISTRY` below.
"""
from __future__ import annotations

from ..errors import UnknownNameError
from .base import Strategy
from .back import BackTitration
from .direct import DirectTitration
from .demasking import DemaskingTitration
from .difference import DifferenceDetermination
from .displacement import DisplacementTitration
from .sequential import SequentialTitration

REGISTRY: dict[str, Strategy] = {s.id: s for s in (DirectTitration(), BackTitration(), DisplacementTitration(),
                                                   SequentialTitration(), DifferenceDetermination(),
                                                   DemaskingTitration())}


def strategy(mode: str) -> Strategy:
    """The strategy registered under ``mode`` (``"direct"``, ``"back"``, ...)."""
    try:
        return REGISTRY[mode]
    except (KeyError, TypeError):
        raise UnknownNameError("mode", str(mode), REGISTRY) from None


def strategy_ids() -> tuple[str, ...]:
    """Every registered strategy id, in registry order."""
    return tuple(REGISTRY)


__all__ = ["Strategy", "strategy", "strategy_ids", "REGISTRY"]
