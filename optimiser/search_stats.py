"""How a search went: the structures it considered, pruned, simulated and found feasible, and its candidates."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class SearchStats:
    """Counts of one search.

    Attributes
    ----------
    structures_considered : int
        Discrete structures (titrant, indicator, buffer, masking agents, strategy, standard) enumerated.
    structures_pruned : tuple of (str, int)
        The hard rule that pruned structures before any simulation (its wording) and how many it pruned.
    structures_simulated : int
        Structures with at least one candidate simulated.
    structures_feasible : int
        Structures with at least one candidate that meets every acceptance criterion.
    candidates_simulated : int
        Candidates passed to the simulation (cache hits excluded; those that hit a missing constant included).
    candidates_prescreened : int
        Candidates rejected by the quick checks, without a simulation.
    """

    structures_considered: int
    structures_pruned: tuple[tuple[str, int], ...]
    structures_simulated: int
    structures_feasible: int
    candidates_simulated: int
    candidates_prescreened: int

    def as_dict(self) -> dict[str, Any]:
        """The counts as JSON-ready data (``structures_pruned`` as a list of ``{"reason", "count"}``)."""
        return {"structures_considered": self.structures_considered,
                "structures_pruned": [{"reason": r, "count": n} for r, n in self.structures_pruned],
                "structures_simulated": self.structures_simulated, "structures_feasible": self.structures_feasible,
                "candidates_simulated": self.candidates_simulated, "candidates_prescreened": self.candidates_prescreened}
