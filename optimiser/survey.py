"""Where a structure is first simulated: the pH of its range where the conditional constants favour the analyte most.

The survey gives every structure that the hard rules leave one simulated candidate. Its pH is chosen from
Ringbom's model, which needs no equilibrium solve: on a 0.1 pH grid within the structure's range, the pH that
maximises the smaller of two surpluses, the analyte's log(c K') over what the target needs plus
:data:`ANALYTE_EXTRA`, and its selectivity margin over the interferents still in solution (those a masking agent
holds or reduces by a stated assumption are left out) over what the target needs; the buffer and the masking agents at
their survey doses. Surpluses above :data:`COMFORTABLE` count as equal, and ties go to the middle of the range.
"""
from __future__ import annotations

import math

import numpy as np

from .candidate import Candidate
from .conditional import Conditions, conditional_constant, feasibility
from .constants import database
from .errors import MissingConstantError
from .reagents import catalogue
from .scenario import Scenario
from .structures import Structure, required_log_cK

BUFFER_LOG_RANGE = (-1.3, -0.3)  # log10 M of the buffer ligand's total: 0.05-0.5 M, the practical range (common practice)
SURVEY_LOG_BUFFER = -0.7  # 0.2 M: the upper half of the practical range, where the buffer holds the pH (common practice)
SURVEY_DOSE = 0.5  # the survey's masking doses: the middle of each agent's log dose range
GRID_STEP = 0.1
ANALYTE_EXTRA = 4.0  # log units of c K' beyond Ringbom's bound before the analyte counts as comfortably bound: the
#                      indicator competes for it and the colour must turn within ten drops (our own survey heuristic)
EDGE = 0.15  # share of a structure's pH range kept clear at each end by the survey (our own)
COMFORTABLE = 2.0  # log units of surplus beyond which the survey prefers the middle of the range (our own)


def dose_of(agent: str, position: float) -> float:
    """The dose at a position (0-1) of an agent's log dose range [mol/L]."""
    lo, hi = (math.log10(x) for x in catalogue().masking_agent(agent).dose_range_M)
    return float(10 ** (lo + position * (hi - lo)))


def position_of(agent: str, dose: float) -> float:
    """The position (0-1) of a dose in an agent's log dose range."""
    lo, hi = (math.log10(x) for x in catalogue().masking_agent(agent).dose_range_M)
    return (math.log10(dose) - lo) / (hi - lo) if hi > lo else 0.0


class Survey:
    """The survey candidate of each structure (the conditional-constant curves kept per titrant and ligand set)."""

    def __init__(self, scenario: Scenario):
        self.scenario = scenario
        s = scenario.sample
        self.cond = Conditions(s.ionic_strength_M, s.temperature_C)
        lo, hi = scenario.search.pH_range
        self.grid = np.round(np.arange(lo, hi + 1e-9, GRID_STEP), 3)
        self.memo: dict[tuple, np.ndarray] = {}
        self.need = required_log_cK(scenario.targets.max_error_percent)

    def candidate(self, st: Structure) -> Candidate:
        doses = tuple(dose_of(a, SURVEY_DOSE) for a in st.masking)
        return st.candidate(self.pH(st, doses), SURVEY_LOG_BUFFER, doses)

    def pH(self, st: Structure, doses: tuple[float, ...]) -> float:
        lo, hi = st.pH_range
        lo, hi = lo + EDGE * (hi - lo), hi - EDGE * (hi - lo)  # reagents work inside their ranges, not at the edges
        inside = (self.grid >= lo - 1e-9) & (self.grid <= hi + 1e-9)
        mid = round((lo + hi) / 2, 3)
        if not inside.any():
            return mid
        score = self._score(st, doses)[inside]
        pHs = self.grid[inside]
        if not np.isfinite(score).any():
            return mid
        best = np.flatnonzero(score >= np.nanmax(score) - 1e-9)
        return float(pHs[best[np.argmin(np.abs(pHs[best] - mid))]])

    def _score(self, st: Structure, doses: tuple[float, ...]) -> np.ndarray:
        cat = catalogue()
        buf = cat.buffer(st.buffer)
        ligands: dict[str, float] = {}
        if buf.ligand:
            ligands[buf.ligand] = 10 ** SURVEY_LOG_BUFFER
        for a, d in zip(st.masking, doses):
            lig = cat.masking_agent(a).ligand
            ligands[lig] = ligands.get(lig, 0.0) + d
        key = (st.titrant, tuple(sorted(ligands.items())), st.masking)
        if key not in self.memo:
            self.memo[key] = self._curve(st.titrant, ligands, st.masking)
        return self.memo[key]

    def _curve(self, titrant: str, ligands: dict[str, float], masking: tuple[str, ...]) -> np.ndarray:
        s = self.scenario.sample
        db = database()
        held = set()
        for a in masking:
            agent = catalogue().masking_agent(a)
            held |= {db.metal(m) for m in (*agent.reduces, *agent.masks)}
        try:
            analyte = np.min([feasibility(conditional_constant(m, titrant, self.grid, ligands, self.cond).log_K_conditional,
                                          s.metals[m]) for m in s.analyte], axis=0)
            others = [feasibility(conditional_constant(m, titrant, self.grid, ligands, self.cond).log_K_conditional,
                                  s.metals[m]) for m in s.interferents if db.metal(m) not in held and s.metals[m] > 0]
        except MissingConstantError:
            return np.full(self.grid.shape, np.nan)
        score = analyte - self.need - ANALYTE_EXTRA
        if others:
            score = np.minimum(score, analyte - np.max(others, axis=0) - self.need)
        return np.minimum(score, COMFORTABLE)
