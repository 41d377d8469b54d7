"""How a search went: the structures it considered, pruned, simulated and found feasible, and its candidates."""
from __future__ import annotations

from dataclasses import asdict, dataclass


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

    def as_dict(self) -> dict:
        """The counts as plain data (the JSON's ``search`` block): pruning as a mapping reason -> count."""
        out = asdict(self)
        out["structures_pruned"] = dict(self.structures_pruned)
        return out
