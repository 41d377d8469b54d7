"""How a search went: the method structures it considered, pruned, simulated and found feasible, and its candidates.

A structure is a method's discrete choices (titrant, indicator, buffer, masking agents, strategy and its standard); a
candidate is a structure with its continuous settings (pH, doses). The report and the JSON show a
:class:`SearchStats`; :func:`from_evaluations` counts one from the evaluations a search made, where the search does not
count its own.
"""
from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from .evaluation import Evaluation


@dataclass(frozen=True)
class SearchStats:
    """Counts of one search.

    Attributes
    ----------
    structures_considered : int
        Distinct structures the search looked at.
    structures_pruned : tuple of (reason, count)
        Structures left out without a simulation, by the reason worded (largest count first).
    structures_simulated : int
        Structures with at least one candidate simulated.
    structures_feasible : int
        Structures with at least one candidate that meets every acceptance criterion.
    candidates_simulated : int
        Candidates passed to the simulation (cache hits excluded; those whose simulation failed, for example on a
        missing constant, included).
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


def structure_of(e: Evaluation) -> tuple:
    """The discrete choices of an evaluated candidate (its structure), without pH and doses."""
    c = e.candidate
    return (c.titrant, c.indicator, c.buffer, tuple(sorted(a for a, _ in c.masking)), c.mode, c.strategy.variant(c))


def from_evaluations(evaluations: Iterable[Evaluation], reasons: Mapping[str, str] | None = None) -> SearchStats:
    """Count a search from every distinct candidate it evaluated (a search that does not count its own).

    A structure counts as pruned where none of its candidates was simulated; its reason is the commonest quick-check
    violation among them, worded by ``reasons`` (violation kind -> text; by default the short texts of
    :data:`optimiser.objectives.VIOLATIONS`).
    """
    if reasons is None:
        from .objectives import VIOLATIONS
        reasons = {kind: text for kind, (_, text) in VIOLATIONS.items()}
    by_structure: dict[tuple, list] = {}
    n_sim = n_pre = 0
    for e in evaluations:
        by_structure.setdefault(structure_of(e), []).append(e)
        if e.simulated:
            n_sim += 1
        else:
            n_pre += 1
    pruned: Counter[str] = Counter()
    simulated = feasible = 0
    for evals in by_structure.values():
        if any(e.simulated for e in evals):
            simulated += 1
            feasible += any(e.feasible for e in evals)
        else:
            kinds = Counter(k for e in evals for k in e.kinds)
            kind = max(kinds, key=lambda k: (kinds[k], k)) if kinds else None
            pruned[reasons.get(kind, kind or "not evaluated")] += 1
    return SearchStats(structures_considered=len(by_structure),
                       structures_pruned=tuple(sorted(pruned.items(), key=lambda kv: (-kv[1], kv[0]))),
                       structures_simulated=simulated, structures_feasible=feasible, candidates_simulated=n_sim,
                       candidates_prescreened=n_pre)
