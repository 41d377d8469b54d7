"""Titration simulation on the full equilibrium: the curve, its end point(s) and what is read from them.

Definitions used throughout (and printed in the report):

- equivalence volume: the titrant volume that holds exactly the analyte (1:1), V_eq = n_analyte / c_titrant;
- indicator turned fraction: how far the indicator has changed from its starting form, as the strategy reads it
  (:mod:`optimiser.strategies`); the **end point** is where half of it has turned;
- titration error: defined by the strategy ((V_ep - V_eq) / V_eq * 100 % for a direct titration);
- sharpness: the volume from 10 % to 90 % turned, in mL and in drops of 0.05 mL.

The flow: :func:`plan` sets up each method (pretreatment, chemical system, totals along the curve by its
strategy), one batched solve per chemical system gives the coarse curves, further ones the refined end-point regions,
another the equivalence and end points themselves (:func:`optimiser.curves.read_rounds`; the primary standards of
those that show an end point one round behind); :func:`_finish` reads them (:mod:`optimiser.readout`).
"""
from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from numpy.typing import NDArray

from . import findings as fd
from . import readout
from .anions import assumptions as anion_assumptions
from .constants import DAVIES_LIMIT_M, H, database
from .curves import merge, pH_drifts, read_rounds
from .equilibrium import Equilibrium, build_system
from .errors import InapplicableMethodError, MissingConstantError
from .findings import Finding
from .medium import beyond_davies, medium
from .method import Method, Sample, as_titrated
from .pretreatment import Prepared, prepare
from .readout import GRADUAL_DROPS, DROP_mL
from .strategies.base import Carry, Plan

Array = NDArray[np.float64]

__all__ = ["Sample", "Method", "Prepared", "prepare", "EndPoint", "Titration", "simulate", "simulate_many", "DROP_mL",
           "GRADUAL_DROPS", "Carry"]


# the parts of an error budget that together make one end point's offset from its equivalence point (read by the
# same colour change, so their signs belong together); every other part is a cause of its own
END_POINT_PARTS = frozenset({"titrant_unbound", "indicator_blank", "analyte_unbound", "standard_unbound",
                             "added_complex"})


@dataclass(frozen=True)
class EndPoint:
    """One end point of a titration and its figures of merit.

    Attributes
    ----------
    label : str
        What is determined at this end point (the analyte label).
    volume_mL : float or None
        On the curve's volume axis [mL]; None where the indicator never turns.
    error_percent : float or None
        As the strategy defines it [%].
    sharpness_mL : float or None
        Volume from 10 % to 90 % turned [mL].
    colour_change : tuple of str
        (before, after).
    pM : dict
        Metal -> pM at the end point.
    budget : dict
        The error split by cause [%] (keys worded by :func:`optimiser.readout.budget_label`); the parts add up to
        ``error_percent``. Empty where there is no end point.
    step : str
        The step it belongs to, in words ("" for a single titration): a multi-step strategy's conditions.
    start_mL : float
        Where the step's curve starts on the titration's combined volume axis [mL] (0 for a single titration).
    derived : bool
        True for a result computed from other end points (a determination by difference), not read on a curve.
    """

    label: str
    volume_mL: float | None
    error_percent: float | None
    sharpness_mL: float | None
    colour_change: tuple[str, str]
    pM: dict[str, float]
    budget: dict[str, float] = field(default_factory=dict)
    step: str = ""
    start_mL: float = 0.0
    derived: bool = False
    standardised_percent: float | None = None  # a multi-step strategy's error after standardisation [%]
    standardised_parts: dict[str, float] = field(default_factory=dict)  # ... and its budget [%]


@dataclass(frozen=True)
class Titration:
    """A simulated titration and what an analyst reads from it.

    Arrays run over ``volume_mL`` (the strategy's volume axis: titrant, or back-titrant; a multi-step strategy's
    steps one after the other). ``endpoints`` holds one :class:`EndPoint` per titre (one for a direct or a
    back-titration; one per step, and per derived result, for a multi-step strategy); ``endpoint_mL``,
    ``error_percent``, ``sharpness_mL``, ``colour_change`` and ``pM_ep`` read the governing one
    (``endpoints[governing]``: the first, or the multi-step strategy's worst result).
    """

    sample: Sample
    method: Method
    volume_mL: Array
    pM: dict[str, Array]
    bound_fraction: dict[str, Array]
    indicator_fractions: dict[str, Array]
    indicator_colours: dict[str, str]
    turned: Array
    pH: Array
    solids: dict[str, Array]
    equivalence_mL: float
    endpoints: tuple[EndPoint, ...]
    pM_eq: dict[str, float]
    cotitrated: dict[str, float]
    precipitates_start: tuple[str, ...]
    precipitates_end: tuple[str, ...]
    blocked_by: tuple[str, ...]
    indicator_usable: bool
    excess_mL: float | None
    findings: tuple[Finding, ...]
    speciation_start: dict[str, dict[str, float]]
    speciation_end: dict[str, dict[str, float]]
    constants_used: tuple = field(default=(), repr=False)
    pH_drift: float | None = None
    masked_by_assumption: tuple[str, ...] = ()
    indicator_blank_percent: float | None = None
    slow_analytes: tuple[str, ...] = ()
    analyte_precipitates: tuple[str, ...] = ()
    mass_balance_error: float = 0.0  # largest relative mass-balance error over the curve, recomputed
    ionic_strength_M: Array = field(default_factory=lambda: np.zeros(0), repr=False)  # computed at each point [mol/L]
    standardisation: EndPoint | None = None  # the same method on the primary standard, where simulated (not where
    # this titration shows no end point on its coarse curve: there is nothing to standardise)
    governing: int = 0  # the end point the single-value properties read
    steps: tuple["Titration", ...] = field(default=(), repr=False)  # a multi-step strategy's titrations, in order
    titre_total_mL: float | None = None  # a multi-step strategy's burette volume, where it is not one end point's
    determined: tuple[tuple[str, ...], ...] = ()  # the analyte groups reported (a multi-step strategy's; else the analyte)

    @property
    def analyte_unbound_percent(self) -> float:
        """The analyte not yet bound to the titrant at the end point [% of it]: the governing end point's, or the
        largest of the steps' end points where the result is derived from several."""
        if self.result.derived:
            return max((-ep.budget.get("analyte_unbound", 0.0) for ep in self.endpoints if not ep.derived), default=0.0)
        return -self.budget.get("analyte_unbound", 0.0)

    @property
    def groups_determined(self) -> tuple[tuple[str, ...], ...]:
        """The analyte groups this titration reports a result for (a single titration: the sample's analyte)."""
        return self.determined or (self.sample.analyte,)

    @property
    def result(self) -> EndPoint:
        """The governing end point (the first; a multi-step strategy's worst result)."""
        return self.endpoints[self.governing]

    @property
    def endpoint_mL(self) -> float | None:
        return self.result.volume_mL

    @property
    def error_percent(self) -> float | None:
        return self.result.error_percent

    @property
    def sharpness_mL(self) -> float | None:
        return self.result.sharpness_mL

    @property
    def colour_change(self) -> tuple[str, str]:
        return self.result.colour_change

    @property
    def pM_ep(self) -> dict[str, float]:
        return self.result.pM

    @property
    def budget(self) -> dict[str, float]:
        """The governing end point's error split by cause [%]."""
        return self.result.budget

    @property
    def standardised_error_percent(self) -> float | None:
        """The error left after the titrant is standardised against the analyte with the same method [%]:
        (1 + e) / (1 + e_std) - 1. The raw error where no standardisation was simulated."""
        e = self.error_percent
        std = self.standardisation
        if self.result.standardised_percent is not None:
            return self.result.standardised_percent
        if e is None or std is None or std.error_percent is None:
            return e
        return standardised(e, std.error_percent)

    @property
    def standardised_budget(self) -> dict[str, float]:
        """The error budget after standardisation [%]: each part less the standard's own, over (1 + e_std); the
        parts add up to :attr:`standardised_error_percent`. The raw budget where no standardisation was simulated."""
        std = self.standardisation
        if self.result.standardised_parts:
            return dict(self.result.standardised_parts)
        if std is None or std.error_percent is None or not self.budget:
            return dict(self.budget)
        scale = 1 + std.error_percent / 100
        keys = list(dict.fromkeys([*self.budget, *std.budget]))
        return {k: (self.budget.get(k, 0.0) - std.budget.get(k, 0.0)) / scale for k in keys}

    @property
    def error_by_cause_percent(self) -> float | None:
        """The error after standardisation with its causes added by magnitude, so that opposite biases do not cancel
        [%]: the end point's own offset (the parts in :data:`END_POINT_PARTS`, one reading of the indicator, taken
        together with their signs), plus each other part (an interferent co-titrated, titrant carried over from an
        earlier step) by its magnitude; a multi-step strategy's steps each have their own end point. The magnitude of
        the net error where no budget was computed."""
        std = self.standardised_budget
        if not std:
            e = self.standardised_error_percent
            return None if e is None else abs(e)
        offsets: dict[str, float] = {}
        others = 0.0
        for key, part in std.items():
            step, _, cause = key.rpartition(": ")
            if cause in END_POINT_PARTS:
                offsets[step] = offsets.get(step, 0.0) + part
            else:
                others += abs(part)
        return others + sum(abs(v) for v in offsets.values())

    @property
    def largest_part(self) -> tuple[str, float] | None:
        """The budget's largest part after standardisation, (key, %); None where there is no end point."""
        std = self.standardised_budget
        if not std:
            return None
        key = max(std, key=lambda k: abs(std[k]))
        return key, std[key]

    @property
    def warnings(self) -> tuple[str, ...]:
        return fd.words(self.findings, fd.WARNING)

    @property
    def assumptions(self) -> tuple[str, ...]:
        return fd.words(self.findings, fd.ASSUMPTION)

    @property
    def sharpness_drops(self) -> float | None:
        return None if self.sharpness_mL is None else self.sharpness_mL / DROP_mL

    @property
    def too_gradual(self) -> bool:
        return self.sharpness_mL is None or self.sharpness_mL > GRADUAL_DROPS * DROP_mL

    @property
    def titre_mL(self) -> float:
        """The largest volume the burette must deliver [mL]."""
        if self.titre_total_mL is not None:
            return self.titre_total_mL
        return self.method.strategy.titre_mL(self.endpoint_mL, self.excess_mL)

    @property
    def ok(self) -> bool:
        return self.endpoint_mL is not None and not self.blocked_by and self.indicator_usable


def standardised(error_percent: float, standard_error_percent: float) -> float:
    """The error left after the titrant is standardised on a standard that shows ``standard_error_percent`` [%]:
    (1 + e) / (1 + e_std) - 1."""
    return ((1 + error_percent / 100) / (1 + standard_error_percent / 100) - 1) * 100


def _check_constants(metals: Sequence[str], titrant: str) -> None:
    db = database()
    for m in metals:
        if db.metals[m].get("binds_titrant", True) is False:
            continue
        if not any(H not in k.stoichiometry for k in db.complexes.get((m, titrant), ())):
            raise MissingConstantError(f"no log K for {m}-{titrant} in the database, so {titrant} cannot be evaluated "
                                       f"with {m} present (the model never takes a missing constant as 'no binding')")


def plan(sample: Sample, method: Method, n_points: int, carry: Carry | None = None, like: Plan | None = None) -> Plan:
    """Set up one titration: pretreatment, chemical system, and the totals along the curve (by its strategy).

    ``carry`` is what earlier steps of a multi-step strategy left in the solution (their titrant, a metal or ligand
    added or consumed, their volume); the method's own reagents are concentrations at this step's start. ``like``: a
    plan whose chemical system holds every component of this one (the sample's, for its standard), which is then
    used with zero totals for the components this titration lacks, so that both are solved in one call (the
    equilibrium is the same: a component with no total forms no species)."""
    db = database()
    strategy = method.strategy
    warmed_from = sample.temperature_C
    sample = as_titrated(sample, method)
    prep = prepare(sample, method)
    added = strategy.added_metals(method)
    carried = dict(carry.amounts_mmol) if carry is not None else {}
    added = tuple(added) + tuple(m for m in carried if m in db.metals and m not in added)
    metals = list(prep.metals) + [m for m in added if m not in prep.metals]
    _check_constants([m for m in metals if prep.metals.get(m, 0.0) > 0 or m in added], method.titrant)
    if not any(prep.metals.get(a, 0.0) > 0 for a in sample.analyte):
        raise InapplicableMethodError(f"the method leaves no {', '.join(sample.analyte)} to titrate: "
                                      f"{', '.join(a for a, _ in method.masking) or 'its reagents'} mask or reduce the analyte itself")
    med = medium(sample, method)  # the step's own recipe (a carried step's earlier titrant brings no alkali ions here)
    ions = med.present()
    ligands = method.ligands + tuple(k for k in carried if k not in db.metals and k not in method.ligands)
    # the sample's own anions join the method's ligands as components (after them, so a method's system is unchanged)
    system = build_system(tuple(metals) + ions, tuple(dict.fromkeys([*ligands, *sample.anions])))
    if like is not None and set(system.components) <= set(like.system.components):
        system = like.system
    comps = system.components
    V0, cT = sample.volume_mL + (carry.volume_mL if carry is not None else 0.0), method.titrant_conc_M
    binding = [m for m in prep.metals if db.metals[m].get("binds_titrant", True) is not False]
    base = np.zeros(len(comps))
    for m, c in prep.metals.items():
        base[comps.index(m)] = c * sample.volume_mL / V0
    for lig, c in prep.ligand_totals.items():
        base[comps.index(lig)] += c
    base[comps.index(method.indicator)] += method.indicator_dose_M
    for anion, c in sample.anions.items():
        base[comps.index(anion)] += c * sample.volume_mL / V0
    for k, n in carried.items():
        base[comps.index(k)] = max(base[comps.index(k)] + n / V0, 0.0)
    added = np.zeros(len(comps))  # what one mole of titrant brings: the titrant and its counter-ions
    added[comps.index(method.titrant)] = 1.0
    for ion in ions:
        base[comps.index(ion)] += med.cations.get(ion, 0.0) * sample.volume_mL / V0
        added[comps.index(ion)] += med.titrant_cations.get(ion, 0.0)

    def totals_before(V: Array) -> Array:
        return base[None, :] * (V0 / (V0 + V))[:, None] + added[None, :] * (cT * V / (V0 + V))[:, None]

    p = Plan(sample=sample, method=method, prep=prep, system=system, metals=metals, totals_before=totals_before,
             V_eq=sample.n_analyte_mmol / cT, V_all=sum(prep.metals[m] for m in binding) * sample.volume_mL / cT,
             n_points=n_points, slow=[m for m in sample.analyte if db.metals[m].get("slow_with_titrant")],
             findings=list(prep.findings) + [fd.assumption("anion_input", note=n)
                                             for n in (*sample.anion_notes, *anion_assumptions(sample.anions))],
             medium=med, carry=carry)
    if sample.temperature_C != warmed_from:
        ind = method.indicator_info
        p.findings.append(fd.assumption("working_temperature", source=ind.working_temperature_source or "common practice",
                                        indicator=ind.name, temperature_C=sample.temperature_C, sample_C=warmed_from))
    strategy.plan_curve(p)
    p.V = np.linspace(0.0, p.V_hi, n_points)
    return p


def simulate(sample: Sample, method: Method, n_points: int = 161, pH_drift: bool = False,
             standardise: bool = False) -> Titration:
    """Simulate the titration of ``sample`` by ``method`` on the full equilibrium.

    Parameters
    ----------
    sample : Sample
    method : Method
    n_points : int
        Points of the coarse curve; the end-point region is refined with as many again.
    pH_drift : bool
        Also solve with the pH free (proton balance with the buffer's own acid-base chemistry and the
        titrant's protons) and report how far it drifts up to the end point.
    standardise : bool
        Also simulate the standardisation of the titrant (see :func:`simulate_many`).

    Returns
    -------
    Titration
    """
    return simulate_many(sample, [method], n_points=n_points, pH_drift=pH_drift, standardise=standardise)[0]


def standard_sample(sample: Sample) -> Sample:
    """The primary standard the titrant is standardised against: the analyte alone, at the sample's concentrations,
    volume, ionic strength and temperature (titrated by the same method, with the same indicator dose)."""
    return Sample(sample.volume_mL, {a: sample.metals[a] for a in sample.analyte}, sample.analyte,
                  sample.ionic_strength_M, sample.temperature_C, sample.acid_M)


def simulate_many(sample: Sample, methods: Sequence[Method], n_points: int = 161, pH_drift: bool = False,
                  errors: list | None = None, standardise: bool = False,
                  carry: Carry | Sequence[Carry | None] | None = None) -> list[Titration | None]:
    """Simulate many methods on one sample; candidates that share a chemical system are solved together.

    Parameters
    ----------
    errors : list, optional
        If given, a method that cannot be evaluated (a missing constant) yields None and its error is appended
        as ``(index, exception)``; otherwise the error is raised.
    standardise : bool
        Also simulate each method on the primary standard (:func:`standard_sample`), so that each titration carries
        the error left after the titrant is standardised (``Titration.standardisation``). Only where the sample's
        coarse curve shows an end point: with none there is nothing to standardise, and ``standardisation`` is None.
    carry : Carry or list of Carry, optional
        What earlier steps left in the solution (a multi-step strategy's later step; one for all the methods, or one
        per method; not applied to the standard).

    Methods whose strategy runs several titrations (``strategy.composite``) are simulated by their strategy, which
    calls this function for each step (the same step of all its methods in one call).
    """
    carries = list(carry) if isinstance(carry, (list, tuple)) else [carry] * len(methods)
    plans: list[Plan | None] = []
    composite: dict[int, Titration | None] = {}
    by_strategy: dict[str, list[int]] = {}
    for k, m in enumerate(methods):
        if m.strategy.composite:
            by_strategy.setdefault(m.strategy.id, []).append(k)
    for ks in by_strategy.values():
        try:
            ts = methods[ks[0]].strategy.simulate_many(sample, [methods[k] for k in ks], n_points, pH_drift, standardise)
        except (MissingConstantError, InapplicableMethodError):
            if errors is None:
                raise
            ts = []
            for k in ks:  # one by one, so that only the offending method is lost
                try:
                    ts.append(methods[k].strategy.simulate(sample, methods[k], n_points, pH_drift, standardise))
                except (MissingConstantError, InapplicableMethodError) as exc:
                    errors.append((k, exc))
                    ts.append(None)
        composite.update(zip(ks, ts))
    for k, m in enumerate(methods):
        try:
            if m.strategy.composite:
                plans.append(None)
            else:
                plans.append(plan(sample, m, n_points, carries[k]))
        except (MissingConstantError, InapplicableMethodError) as exc:
            if errors is None:
                raise
            errors.append((k, exc))
            composite[k] = None
            plans.append(None)
    live = [p for p in plans if p is not None]

    def standard(p: Plan) -> Plan:
        return plan(standard_sample(sample), p.method, n_points, _reagents_only(p.carry), like=p)

    done = _run(live, pH_drift, standard if standardise else None) if live else []
    results = iter(done)
    return [composite[k] if k in composite else next(results) for k in range(len(plans))]


def _reagents_only(carry: Carry | None) -> Carry | None:
    """What a step's standard shares with the step: a ligand a reagent destroyed (not the titrant or metals of
    earlier steps, which the standard never saw)."""
    if carry is None:
        return None
    from .constants import database

    metals = database().metals
    kept = {k: v for k, v in carry.amounts_mmol.items() if v < 0 and k not in metals}
    return Carry(0.0, kept) if kept else None


def _run(live: Sequence[Plan], pH_drift: bool, standard: Callable[[Plan], Plan] | None = None
         ) -> list[Titration]:
    """The batched solves (:func:`optimiser.curves.read_rounds`: coarse curves, refined end-point regions, finer
    where still coarse against the titre, equivalence and end points), then the read-out of each titration, with its
    pH drift where asked. ``standard`` sets up a titration's primary standard; it is set up and solved, one round
    behind, only for a titration whose coarse curve shows an end point (with none there is nothing to standardise),
    and only its :class:`EndPoint` is read, as ``Titration.standardisation`` (None for the others)."""
    reads, seconds = read_rounds(live, standard)
    coarse, V_eps = [r.coarse for r in reads], [r.V_ep for r in reads]
    drifts = pH_drifts(live, coarse, V_eps) if pH_drift else [None] * len(live)
    done = [_finish(r.plan, r.coarse, r.fine, r.grid, r.probed, r.ref, r.V_ep, d) for r, d in zip(reads, drifts, strict=True)]
    if standard is None:
        return done
    return [replace(t, standardisation=None if s is None else
                    _endpoint_only(s.plan, s.coarse, s.fine, s.grid, s.probed, s.ref, s.V_ep))
            for t, s in zip(done, seconds, strict=True)]


def _sharpness_band(p: Plan, eq: Equilibrium, eqf: Equilibrium, grid: Array, ref: float) -> tuple[float | None, float | None]:
    """Volumes where the colour change starts and ends (10 % and 90 % turned for a two-colour indicator, see
    :func:`readout.read_levels`), from the refined grid (the coarse curve where it does not reach)."""
    turned = p.method.strategy.turned
    _, lo, hi = readout.read_levels(p.method, ref)
    tf = turned(p, eqf, ref)
    V10 = readout.turned_crossing(p.method, grid, tf, lo)
    V90 = readout.turned_crossing(p.method, grid, tf, hi)
    t_coarse = turned(p, eq, ref)
    if V10 is None or (grid[0] > 0 and tf[0] > lo):
        V10 = readout.turned_crossing(p.method, p.V, t_coarse, lo)
    if V90 is None:
        V90 = readout.turned_crossing(p.method, p.V, t_coarse, hi)
    return V10, V90


def _with_refined(p: Plan, eq: Equilibrium, eqf: Equilibrium | None, grid: Array | None, ref: float):
    """The coarse curve merged with the refined end-point region, and the 10 % / 90 % turned volumes."""
    if eqf is None:
        return p.V, eq, (None, None)
    band = _sharpness_band(p, eq, eqf, grid, ref)
    Vall = np.concatenate([p.V, grid])
    order = np.argsort(Vall, kind="stable")
    return Vall[order], merge(eq, eqf, order), band


def _endpoint(p: Plan, band: tuple[float | None, float | None], eqp: Equilibrium, V_ep: float | None,
              fractions: dict) -> EndPoint:
    """The end point as read: its volume, error, sharpness (from the 10 % / 90 % turned volumes ``band``), colour
    change (from the indicator's ``fractions`` along the curve), pM and error budget (point 1 of the probed solve)."""
    method, sample = p.method, p.sample
    strategy, indicator = method.strategy, method.indicator_info
    V10, V90 = band
    error, pM_ep, budget = ((strategy.error_percent(p, V_ep), _pM_at(eqp, 1, p.metals), strategy.budget(p, eqp, 1, V_ep))
                            if V_ep is not None else (None, {}, {}))
    h_free = readout.dominant_free_form(fractions, strategy.free_form_point())
    change = strategy.colour_change(indicator.complex_colour(strategy.complex_metal(method, sample)),
                                    indicator.free_colour(h_free))
    return EndPoint(label=", ".join(sample.analyte), volume_mL=V_ep, error_percent=error,
                    sharpness_mL=None if (V10 is None or V90 is None) else abs(V90 - V10), colour_change=change,
                    pM=pM_ep, budget=budget)


def _endpoint_only(plan: Plan, eq: Equilibrium, eqf: Equilibrium | None, grid: Array | None, eqp: Equilibrium,
                   ref: float, V_ep: float | None) -> EndPoint:
    """The :class:`EndPoint` that :func:`_finish` would give, without the rest of the titration."""
    _, eq, band = _with_refined(plan, eq, eqf, grid, ref)
    return _endpoint(plan, band, eqp, V_ep, readout.indicator_forms(eq, plan.method, plan.metals)[0])


def _finish(plan: Plan, eq: Equilibrium, eqf: Equilibrium | None, grid: Array | None, eqp: Equilibrium, ref: float,
            V_ep: float | None, drift: float | None) -> Titration:
    sample, method, prep, system = plan.sample, plan.method, plan.prep, plan.system
    strategy, indicator = method.strategy, method.indicator_info
    metals = plan.metals
    found = list(plan.findings)
    V, eq, (V10, V90) = _with_refined(plan, eq, eqf, grid, ref)
    if eqf is None and readout.shows_no_change(method, ref):
        found.append(fd.warning("indicator_unbound", indicator=indicator.name, pH=method.pH, bound=ref))
    ep = 1 if V_ep is not None else 0  # index of the end point in the probed solve (0 is the equivalence)
    pM, bound_fraction = _curve_arrays(eq, method, metals)
    pM_eq = _pM_at(eqp, 0, metals)
    fr, colours = readout.indicator_forms(eq, method, metals)
    endpoint = _endpoint(plan, (V10, V90), eqp, V_ep, fr)
    sharp = endpoint.sharpness_mL
    blank = (readout.indicator_blank(eqp, 1, sample, method) if V_ep is not None and strategy.reads_release else None)
    cotitrated = readout.cotitrated(eqp, 1, sample, method) if V_ep is not None else {}
    solids = {name: eq.solid_amount[:, j] for j, name in enumerate(system.solids) if np.any(eq.solid_amount[:, j] > 1e-12)}
    pre_start = tuple(eq.solids_present(0))
    pre_end = tuple(eqp.solids_present(ep))
    analyte_solids, solid_facts = readout.solid_findings(eq, 0, eqp, ep, sample)
    found += solid_facts
    spec_start = readout.speciation(eq, 0, prep, method, metals, sample.anions)
    blocked = readout.blocking(spec_start, sample, method, *((eqp, 1) if V_ep is not None else (eq, -1)))
    if V_ep is None and not blocked and not readout.shows_no_change(method, ref) and strategy.reads_release:
        blocked += [m for m in (readout.inferred_blocker(eq, method, metals),) if m is not None]
    found += _indicator_findings(plan, blocked, blank, sharp if V_ep is not None else None)
    found += _medium_findings(plan, eq.ionic_strength_M)
    usable = indicator.usable_pH[0] <= method.pH <= indicator.usable_pH[1]
    return Titration(
        sample=sample, method=method, volume_mL=V, pM=pM, bound_fraction=bound_fraction, indicator_fractions=fr,
        indicator_colours=colours, turned=np.clip(strategy.turned(plan, eq, ref), -1.0, 2.0), pH=np.full(len(V), method.pH),
        solids=solids, equivalence_mL=float(plan.V_eq_ref), endpoints=(endpoint,), pM_eq=pM_eq, cotitrated=cotitrated,
        precipitates_start=pre_start, precipitates_end=pre_end, blocked_by=tuple(blocked), indicator_usable=usable,
        excess_mL=plan.V_x, findings=tuple(found), speciation_start=spec_start,
        speciation_end=readout.speciation(eqp, ep, prep, method, metals, sample.anions), constants_used=tuple(system.uses()),
        pH_drift=drift, masked_by_assumption=prep.masked_metals,
        indicator_blank_percent=blank, slow_analytes=tuple(plan.slow), analyte_precipitates=tuple(analyte_solids),
        mass_balance_error=eq.mass_balance_error(), ionic_strength_M=eq.ionic_strength_M)


def _curve_arrays(eq: Equilibrium, method: Method, metals: Sequence[str]) -> tuple[dict[str, Array], dict[str, Array]]:
    """pM of each metal and its fraction bound to the titrant along the curve."""
    comps = eq.system.components
    # pM of a metal not (yet) present is undefined: NaN, so that it is not plotted and is null in JSON
    pM = {m: np.where(eq.totals[:, comps.index(m)] > 0, -np.log10(np.maximum(eq.free(m), 1e-300)), np.nan) for m in metals}
    bound_fraction = {m: eq.bound(m, method.titrant) / np.maximum(eq.totals[:, comps.index(m)], 1e-300) for m in metals}
    return pM, bound_fraction


def _pM_at(eq: Equilibrium, point: int, metals: Sequence[str]) -> dict[str, float]:
    return {m: float(-np.log10(max(eq.free(m)[point], 1e-300))) for m in metals}


def _indicator_findings(plan: Plan, blocked: list[str], blank: float | None, sharp: float | None) -> list[Finding]:
    """Blocking, pH range, magnesium for calcium indicators, the blank and a gradual change, as findings."""
    sample, method = plan.sample, plan.method
    indicator = method.indicator_info
    out = []
    if blocked:
        out.append(fd.warning("blocked", metals=list(blocked), indicator=indicator.name))
    if not indicator.usable_pH[0] <= method.pH <= indicator.usable_pH[1]:
        out.append(fd.warning("indicator_pH", indicator=indicator.name, low=indicator.usable_pH[0],
                              high=indicator.usable_pH[1], pH=method.pH))
    if (indicator.needs_Mg_for_Ca and "Ca" in sample.analyte and sample.metals.get("Mg", 0.0) <= 0
            and "Mg" not in plan.metals and method.strategy.reads_release):
        out.append(fd.warning("needs_magnesium", indicator=indicator.name))
    if sharp is not None and sharp > GRADUAL_DROPS * DROP_mL:
        out.append(fd.warning("too_gradual", sharpness_mL=sharp, drops=sharp / DROP_mL))
    return out


def _medium_findings(plan: Plan, ionic_strength_M: Array) -> list[Finding]:
    """The medium as a stated assumption (its counter-ions and the ionic strength computed along the curve), and a
    warning where that ionic strength passes the range of the Davies equation."""
    med = plan.medium
    ions = {m: med.cations.get(m, 0.0) for m in med.present()}
    titrant = plan.method.titrant
    unpaired = [m for m in ions if not database().complexes.get((m, titrant))]
    out = [fd.assumption("medium", ions=ions, titrant_ions=dict(med.titrant_cations), titrant=titrant,
                         low=float(np.min(ionic_strength_M)), high=float(np.max(ionic_strength_M)),
                         background=med.background_M, unpaired=unpaired)]
    top = beyond_davies(ionic_strength_M)
    if top is not None:
        out.append(fd.warning("davies_range", source="memory", ionic_strength=top, limit=DAVIES_LIMIT_M))
    return out
