"""The discrete structures of a method (titrant, indicator, buffer, masking agents, strategy, standard), enumerated
over a scenario's space and pruned by hard rules that need no simulation.

A structure fixes every discrete choice; what is left to optimise are the continuous parts (pH within the
structure's own range, the buffer's and the masking agents' doses). Each rule below is a fact of the data or a
bound of the model, never a guess about what works: a structure that survives them is simulated at least once.
"""
from __future__ import annotations

import itertools
import math
from collections import Counter
from dataclasses import dataclass

import numpy as np

from .candidate import Candidate
from .conditional import Conditions, conditional_constant, feasibility
from .constants import database
from .errors import InputError, MissingConstantError
from .reagents import catalogue
from .scenario import Scenario
from .strategies import strategy

# the hard rules, in the order they are applied (the first that holds names the reason)
HAZARD = "a reagent above the scenario's hazard limit"
PH_RANGES = "no pH where the indicator's and the buffer's ranges overlap within the scenario's"
MASK_PH = "a masking agent's working pH lies above that range"
MASK_IDLE = "a masking agent binds, reduces or holds no metal of the sample"
MISSING = "a constant the method needs is missing (a metal of the sample or the standard with the titrant)"
STRATEGY = "the strategy does not accept the combination"
UNREAD = "the indicator binds neither the analyte nor the metal whose complex it shows"
WEAK = "the analyte binds the titrant too weakly at every pH of the range"
RULES = (HAZARD, PH_RANGES, MASK_PH, MASK_IDLE, MISSING, STRATEGY, UNREAD, WEAK)

WEAK_SAFETY = 2.0  # log units below the bound before a structure is pruned as too weak (our own safety margin)
PH_INSET = 0.0  # how far inside the ranges' edges the structure's pH range is kept (the checks are inclusive)
MIN_WIDTH = 0.05  # a pH range narrower than this is no room to work in (our own)
GENE_PH_STEP = 0.5  # grid of a strategy's own real genes (a second step's pH) in the enumeration [pH units] (our own)


@dataclass(frozen=True)
class Structure:
    """One combination of discrete choices, and the pH range where all of them are usable.

    Attributes
    ----------
    titrant, indicator, buffer : str
    masking : tuple of str
        Masking agents (sorted), their doses left to optimise.
    mode : str
        The strategy's id.
    back_metal : str
        The strategy's own choice (the back-titration standard); the scenario's first where the strategy has none.
    pH_range : tuple of float
        Where the indicator, the buffer, every masking agent and the scenario allow the pH.
    extra : tuple of (name, value)
        The strategy's own genes (:meth:`optimiser.strategies.base.Strategy.genes`), fixed: choices as they are, a
        real gene (a second step's pH) on a grid of :data:`GENE_PH_STEP`.
    """

    titrant: str
    indicator: str
    buffer: str
    masking: tuple[str, ...]
    mode: str
    back_metal: str
    pH_range: tuple[float, float]
    extra: tuple[tuple[str, object], ...] = ()

    @property
    def key(self) -> tuple:
        return structure_key_of(self.titrant, self.indicator, self.buffer, self.masking, self.mode, self.back_metal,
                                self.extra)

    def candidate(self, pH: float, log_buffer: float, doses: tuple[float, ...]) -> Candidate:
        """The candidate of this structure at a pH, a log10 buffer total [log10 M] and the agents' doses [mol/L]."""
        return Candidate(pH=round(float(pH), 4), buffer=self.buffer, log_buffer=round(float(log_buffer), 3),
                         titrant=self.titrant, masking=tuple(zip(self.masking, (float(d) for d in doses))),
                         indicator=self.indicator, mode=self.mode, back_metal=self.back_metal, extra=self.extra)


def structure_key_of(titrant, indicator, buffer, masking, mode, back_metal, extra=()) -> tuple:
    return (titrant, indicator, buffer, tuple(masking), mode, back_metal if strategy(mode).uses_standard else "",
            tuple(extra))


def structure_key(c: Candidate) -> tuple:
    """The key of the structure a candidate belongs to."""
    return structure_key_of(c.titrant, c.indicator, c.buffer, tuple(a for a, _ in c.masking), c.mode, c.back_metal,
                            c.extra)


def search_modes(scenario: Scenario) -> tuple[str, ...]:
    """The scenario's strategies that apply to its sample (each strategy says where it does; one the scenario lists
    by name in ``search.modes`` may serve more, :meth:`~optimiser.strategies.base.Strategy.applies_when_asked`)."""
    sp = scenario.search
    listed = "modes" in ((scenario.as_read or {}).get("search") or {})
    return tuple(m for m in sp.modes if strategy(m).applies(scenario.sample, sp)
                 or (listed and strategy(m).applies_when_asked(scenario.sample, sp))) or sp.modes[:1]


def gene_variants(scenario: Scenario, mode: str) -> list[tuple[tuple[str, object], ...]]:
    """Every setting of a strategy's own genes, a real gene on a grid of :data:`GENE_PH_STEP`, settings that give
    the same method fields (the same second step, the same co-analytes) counted once."""
    sp, sample = scenario.search, scenario.sample
    genes = strategy(mode).genes(sample, sp)
    if not genes:
        return [()]
    axes = []
    for name, spec in sorted(genes.items()):
        if spec[0] == "real":
            lo, hi = float(spec[1]), float(spec[2])
            first = math.ceil(lo / GENE_PH_STEP) * GENE_PH_STEP
            axes.append([(name, round(float(v), 2)) for v in np.arange(first, hi + 1e-9, GENE_PH_STEP)] or [(name, lo)])
        else:
            axes.append([(name, v) for v in spec[1]])
    base = {"titrant": sp.titrants[0], "titrant_conc_M": scenario.titrant_conc_M, "buffer_total_M": 0.1}
    out, seen = [], set()
    for combo in itertools.product(*axes):
        try:
            fields = strategy(mode).method_fields(dict(combo), sample, sp, base)
        except InputError:
            continue
        sig = repr(sorted(fields.items()))
        if sig not in seen:
            seen.add(sig)
            out.append(tuple(combo))
    return out


def required_log_cK(target_percent: float) -> float:
    """log(c K') a titration needs for an error within ``target_percent`` [%]: 4 at 1 %, 5 at 0.3 %, 6 at 0.1 %.

    The same numbers bound the selectivity margin (Ringbom's thresholds, textbook; common practice): with the
    analyte unbound at the end point and the titrant in excess each within the target t (fractions), c K' must
    reach 1/t**2, i.e. log c K' >= 4 - 2 log10(t / 1 %).
    """
    return 4.0 - 2.0 * math.log10(target_percent)


def enumerate_structures(scenario: Scenario) -> tuple[list[Structure], tuple[tuple[str, int], ...], int]:
    """Every structure of the scenario's space that the hard rules leave, the count pruned by each rule, and the
    number considered."""
    sp = scenario.search
    cat = catalogue()
    sample = scenario.sample
    metals = tuple(sample.metals)
    combos: list[tuple[str, ...]] = [()]
    for k in range(1, sp.max_masking_agents + 1):
        combos += [tuple(sorted(c)) for c in itertools.combinations(sp.masking, k)]
    variants = [(mode, bm, extra) for mode in search_modes(scenario)
                for bm in (sp.back_metals if strategy(mode).uses_standard else sp.back_metals[:1])
                for extra in gene_variants(scenario, mode)]
    acts = {a: _acts_on(a, metals) for a in sp.masking}
    weak = _WeakAnalyte(scenario)
    kept, pruned, considered = [], Counter(), 0
    for t, ind, buf, masks, (mode, bm, extra) in itertools.product(sp.titrants, sp.indicators, sp.buffers, combos,
                                                                    variants):
        considered += 1
        reason, rng = _first_rule(scenario, t, ind, buf, masks, mode, bm, acts, weak, cat, extra)
        if reason is not None:
            pruned[reason] += 1
        else:
            kept.append(Structure(t, ind, buf, masks, mode, bm, rng, extra))
    return kept, tuple((r, pruned[r]) for r in RULES if pruned[r]), considered


def _first_rule(scenario, t, ind, buf, masks, mode, bm, acts, weak, cat, extra=()):
    sp = scenario.search
    levels = [cat.titrant(t).hazard, cat.buffer(buf).hazard, cat.indicator(ind).hazard]
    levels += [cat.masking_agent(a).hazard for a in masks]
    if strategy(mode).uses_standard:
        levels.append(cat.standards[bm].hazard)
    if max(levels) > sp.max_hazard:
        return HAZARD, None
    lo = max(sp.pH_range[0], cat.indicator(ind).usable_pH[0], cat.buffer(buf).pH_range[0])
    hi = min(sp.pH_range[1], cat.indicator(ind).usable_pH[1], cat.buffer(buf).pH_range[1])
    if hi - lo < MIN_WIDTH:
        return PH_RANGES, None
    lo = max([lo] + [cat.masking_agent(a).min_pH for a in masks])
    if hi - lo < MIN_WIDTH:
        return MASK_PH, None
    if not all(acts[a] for a in masks):
        return MASK_IDLE, None
    db = database()
    needed = set(scenario.sample.metals) | set(strategy(mode).added_metals(_Probe(bm)))
    if any(not _has_main(db, db.metal(m), t) for m in needed):
        return MISSING, None
    try:
        method = Candidate(pH=(lo + hi) / 2, buffer=buf, log_buffer=-1.0, titrant=t, indicator=ind, mode=mode,
                           back_metal=bm, masking=tuple((a, cat.masking_agent(a).dose_range_M[0]) for a in masks),
                           extra=extra).method(scenario)
        strategy(mode).check(method)
    except InputError:
        return STRATEGY, None
    shown = {db.metal(m) for m in (strategy(mode).complex_metal(method, scenario.sample), *scenario.sample.analyte)}
    if not any((m, ind) in db.complexes for m in shown):
        return UNREAD, None
    if strategy(mode).reads_release and weak.everywhere(t, lo + PH_INSET, hi - PH_INSET):
        return WEAK, None
    return None, (round(lo + PH_INSET, 4), round(hi - PH_INSET, 4))


class _Probe:
    """A stand-in method that only carries the standard (to ask a strategy which metals it adds)."""

    def __init__(self, back_metal: str):
        self.back_metal = back_metal


def _has_main(db, metal: str, titrant: str) -> bool:
    return any(k.stoichiometry.get(titrant) == 1 and len(k.stoichiometry) == 2 for k in db.complexes.get((metal, titrant), ()))


def _acts_on(agent: str, metals: tuple[str, ...]) -> bool:
    """True where a masking agent binds (a constant in the data), reduces or holds (a stated assumption) any of the
    metals."""
    db = database()
    a = catalogue().masking_agent(agent)
    ids = {db.metal(m) for m in metals}
    if ids & {db.metal(m) for m in (*a.reduces, *a.masks)}:
        return True
    return any((m, a.ligand) in db.complexes for m in ids)


class _WeakAnalyte:
    """The bound of :data:`WEAK`: K' without any auxiliary ligand is the largest the analyte can have (every ligand
    only lowers it), at the sample's (undiluted, so largest) concentration, on a 0.1 pH grid."""

    def __init__(self, scenario: Scenario):
        s = scenario.sample
        self.scenario = scenario
        self.cond = Conditions(s.ionic_strength_M, s.temperature_C)
        self.need = required_log_cK(scenario.targets.max_error_percent) - WEAK_SAFETY
        self.memo: dict[str, np.ndarray] = {}
        lo, hi = scenario.search.pH_range
        self.grid = np.round(np.arange(lo, hi + 1e-9, 0.1), 3)

    def everywhere(self, titrant: str, lo: float, hi: float) -> bool:
        if titrant not in self.memo:
            s = self.scenario.sample
            try:
                self.memo[titrant] = np.min([feasibility(conditional_constant(m, titrant, self.grid, None, self.cond)
                                                         .log_K_conditional, s.metals[m]) for m in s.analyte], axis=0)
            except MissingConstantError:
                self.memo[titrant] = np.full(self.grid.shape, np.inf)  # the rule MISSING speaks for it
        inside = (self.grid >= lo - 0.05) & (self.grid <= hi + 0.05)
        return bool(inside.any()) and bool(np.all(self.memo[titrant][inside] < self.need))
