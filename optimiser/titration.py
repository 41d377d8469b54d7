"""Titration simulation on the full equilibrium: curve, end point, error, sharpness, blocking, solids.

Definitions used throughout (and printed in the report):

- equivalence volume: the titrant volume that holds exactly the analyte (1:1), V_eq = n_analyte / c_titrant;
- indicator turned fraction: tau = 1 - f_bound(V) / f_bound(0), where f_bound is the fraction of the indicator
  bound to any metal; the **end point** is where tau = 0.5 (half of the indicator released from its metal
  complex). In a back-titration the end point is where half of the indicator's plateau is bound to the
  back-titrant metal;
- titration error: (V_ep - V_eq) / V_eq * 100 % (direct), or (n_found - n_analyte) / n_analyte * 100 % (back);
- sharpness: the titrant volume from tau = 0.1 to tau = 0.9, in mL and in drops of 0.05 mL.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from .conditional import check_concentration, check_pH
from .constants import H, database
from .equilibrium import Equilibrium, build_system, solve
from .errors import InapplicableMethodError, InputError, MissingConstantError
from .reagents import catalogue

Array = NDArray[np.float64]
DROP_mL = 0.05  # one drop from a burette (common practice)
GRADUAL_DROPS = 8.0  # an end point that takes more than 8 drops to turn is too gradual to see (common practice)
TITRANT_PROTONS = 2  # titrant added as the disodium salt Na2H2Y (common practice)
MASKED_THRESHOLD = 0.99  # a blocking metal counts as masked when 99 % of it is held away from the indicator


@dataclass(frozen=True)
class Sample:
    """The aliquot as titrated.

    Attributes
    ----------
    volume_mL : float
        Aliquot volume [mL].
    metals : Mapping[str, float]
        Metal id -> concentration in the aliquot [mol/L].
    analyte : tuple of str
        The metal or metals determined (summed, e.g. ("Ca", "Mg") for total hardness).
    ionic_strength_M : float
        [mol/L].
    temperature_C : float
        [degC].
    """

    volume_mL: float
    metals: Mapping[str, float]
    analyte: tuple[str, ...]
    ionic_strength_M: float = 0.1
    temperature_C: float = 25.0

    def __post_init__(self) -> None:
        db = database()
        if not (self.volume_mL > 0):
            raise InputError(f"sample volume must be positive (mL); got {self.volume_mL}")
        metals = {db.metal(m): float(check_concentration(c, f"concentration of {m}")) for m, c in self.metals.items()}
        object.__setattr__(self, "metals", metals)
        analyte = tuple(db.metal(a) for a in self.analyte)
        if not analyte:
            raise InputError("the sample needs an analyte")
        for a in analyte:
            if a not in metals:
                raise InputError(f"analyte {a} has no concentration in the sample (metals given: {', '.join(metals)})")
        object.__setattr__(self, "analyte", analyte)

    @property
    def interferents(self) -> tuple[str, ...]:
        return tuple(m for m in self.metals if m not in self.analyte)

    @property
    def n_analyte_mmol(self) -> float:
        return sum(self.metals[a] for a in self.analyte) * self.volume_mL


@dataclass(frozen=True)
class Method:
    """The conditions of one titration method.

    Attributes
    ----------
    pH : float
    buffer : str
        Buffer id (``ammonia``, ``acetate``, ``hexamine``, ``NaOH``).
    buffer_total_M : float
        Total of the buffer's ligand in the aliquot (NH3 + NH4+, ...) [mol/L]; ignored for NaOH.
    titrant, titrant_conc_M
        Titrant id and concentration [mol/L].
    masking : tuple of (agent, conc_M)
        Masking agents and their concentrations in the aliquot [mol/L].
    indicator : str
    indicator_conc_M : float or None
        Effective concentration in the aliquot [mol/L]; the indicator's usual dose by default.
    mode : str
        ``"direct"`` or ``"back"`` (excess titrant, then a standard of ``back_metal``).
    back_metal, back_conc_M, excess_ratio
        Back-titration standard (Zn or Mg), its concentration [mol/L], and the excess of titrant over
        the metals present.
    """

    pH: float
    buffer: str
    titrant: str
    titrant_conc_M: float
    indicator: str
    buffer_total_M: float = 0.1
    masking: tuple[tuple[str, float], ...] = ()
    indicator_conc_M: float | None = None
    mode: str = "direct"
    back_metal: str = "Zn"
    back_conc_M: float | None = None
    excess_ratio: float = 1.5

    def __post_init__(self) -> None:
        cat = catalogue()
        check_pH(self.pH)
        object.__setattr__(self, "buffer", cat.buffer(self.buffer).id)
        object.__setattr__(self, "titrant", cat.titrant(self.titrant).id)
        object.__setattr__(self, "indicator", cat.indicator(self.indicator).id)
        masking = tuple((cat.masking_agent(a).id, float(check_concentration(c, f"dose of {a}"))) for a, c in self.masking)
        if len({a for a, _ in masking}) != len(masking):
            raise InputError("each masking agent may be given once")
        object.__setattr__(self, "masking", masking)
        if not self.titrant_conc_M > 0:
            raise InputError(f"titrant concentration must be positive; got {self.titrant_conc_M}")
        check_concentration(self.buffer_total_M, "buffer total")
        if self.mode not in ("direct", "back"):
            raise InputError(f"mode must be 'direct' or 'back'; got {self.mode!r}")
        if self.mode == "back":
            if self.back_metal not in ("Zn", "Mg"):
                raise InputError(f"the back-titration standard must be Zn or Mg; got {self.back_metal!r}")
            if not self.excess_ratio > 1.0:
                raise InputError("the titrant excess ratio of a back-titration must be above 1")

    @property
    def back_concentration(self) -> float:
        return self.back_conc_M if self.back_conc_M is not None else self.titrant_conc_M

    @property
    def ligands(self) -> tuple[str, ...]:
        cat = catalogue()
        out = [self.titrant]
        buf = cat.buffer(self.buffer)
        if buf.ligand:
            out.append(buf.ligand)
        out += [cat.masking_agent(a).ligand for a, _ in self.masking]
        out.append(self.indicator)
        return tuple(dict.fromkeys(out))


@dataclass(frozen=True)
class Prepared:
    """A sample after the stated assumptions (reduction of Cu(II), masking without constants) are applied."""

    metals: dict[str, float]
    masked_by_assumption: dict[str, float]
    ligand_totals: dict[str, float]
    assumptions: tuple[str, ...]
    warnings: tuple[str, ...]


def prepare(sample: Sample, method: Method) -> Prepared:
    """Apply the masking agents' reductions and assumption-based masking to the sample's metals."""
    cat = catalogue()
    metals = dict(sample.metals)
    ligand_totals: dict[str, float] = {}
    buf = cat.buffer(method.buffer)
    if buf.ligand:
        ligand_totals[buf.ligand] = method.buffer_total_M
    assumptions, warnings = [], []
    masked: dict[str, float] = {}
    for agent_id, dose in method.masking:
        agent = cat.masking_agent(agent_id)
        left = dose
        for metal, rule in agent.reduces.items():
            c = metals.get(metal, 0.0)
            if c <= 0:
                continue
            need = rule["mol_reagent_per_mol_metal"] * c
            frac = min(1.0, left / need) if need > 0 else 1.0
            metals[metal] = c * (1 - frac)
            metals[rule["to"]] = metals.get(rule["to"], 0.0) + c * frac
            left -= need * frac
            assumptions.append(f"{agent.name}: {rule['note']}.")
            if frac < 1:
                warnings.append(f"{agent.name} dose is too small to reduce all {metal} ({100 * frac:.0f} % reduced).")
        for metal, rule in agent.masks.items():
            c = metals.get(metal, 0.0)
            if c <= 0:
                continue
            lo, hi = rule["pH_range"]
            if lo <= method.pH <= hi and dose >= rule["min_ratio"] * c:
                masked[metal] = masked.get(metal, 0.0) + c
                metals[metal] = 0.0
                assumptions.append(f"{agent.name}: {rule['note']}.")
            elif lo <= method.pH <= hi:
                warnings.append(f"{agent.name}: the dose is below {rule['min_ratio']} times the {metal} present; {metal} is not taken as masked.")
        ligand_totals[agent.ligand] = ligand_totals.get(agent.ligand, 0.0) + max(left, 0.0)
        if method.pH < agent.min_pH:
            warnings.append(f"{agent.name} is not used below pH {agent.min_pH} (the method's pH is {method.pH:.2f}).")
    metals = {m: c for m, c in metals.items() if c > 0 or m in sample.analyte}
    return Prepared(metals, masked, ligand_totals, tuple(dict.fromkeys(assumptions)), tuple(warnings))


def _check_constants(metals: Sequence[str], titrant: str) -> None:
    db = database()
    for m in metals:
        if db.metals[m].get("binds_titrant", True) is False:
            continue
        if not any(H not in k.stoichiometry for k in db.complexes.get((m, titrant), ())):
            raise MissingConstantError(f"no log K for {m}-{titrant} in the database, so {titrant} cannot be evaluated "
                                       f"with {m} present (the model never takes a missing constant as 'no binding')")


@dataclass(frozen=True)
class Titration:
    """A simulated titration (direct or back) and what an analyst reads from it.

    Arrays run over ``volume_mL`` (titrant for a direct titration, back-titrant for a back-titration).
    ``endpoint_mL`` and ``error_percent`` are None where the indicator never turns.
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
    endpoint_mL: float | None
    error_percent: float | None
    sharpness_mL: float | None
    pM_eq: dict[str, float]
    pM_ep: dict[str, float]
    cotitrated: dict[str, float]
    precipitates_start: tuple[str, ...]
    precipitates_end: tuple[str, ...]
    blocked_by: tuple[str, ...]
    indicator_usable: bool
    colour_change: tuple[str, str]
    excess_mL: float | None
    warnings: tuple[str, ...]
    assumptions: tuple[str, ...]
    speciation_start: dict[str, dict[str, float]]
    speciation_end: dict[str, dict[str, float]]
    constants_used: tuple = field(default=(), repr=False)
    pH_drift: float | None = None
    masked_by_assumption: tuple[str, ...] = ()
    indicator_blank_percent: float | None = None
    slow_analytes: tuple[str, ...] = ()
    analyte_precipitates: tuple[str, ...] = ()
    mass_balance_error: float = 0.0  # largest relative mass-balance error over the curve, recomputed

    @property
    def sharpness_drops(self) -> float | None:
        return None if self.sharpness_mL is None else self.sharpness_mL / DROP_mL

    @property
    def too_gradual(self) -> bool:
        return self.sharpness_mL is None or self.sharpness_mL > GRADUAL_DROPS * DROP_mL

    @property
    def ok(self) -> bool:
        return self.endpoint_mL is not None and not self.blocked_by and self.indicator_usable


def _interp_crossing(x: Array, y: Array, level: float, start: int = 0) -> float | None:
    """First x at which y rises through ``level`` (linear interpolation), searching from index ``start``."""
    above = np.nonzero(y[start:] >= level)[0]
    if not len(above):
        return None
    i = start + int(above[0])
    if i == 0:
        return float(x[0])
    x0, x1, y0, y1 = x[i - 1], x[i], y[i - 1], y[i]
    return float(x0 + (level - y0) * (x1 - x0) / (y1 - y0)) if y1 != y0 else float(x1)


def _speciation(eq: Equilibrium, point: int, prep: Prepared, method: Method, metals: Sequence[str]) -> dict[str, dict[str, float]]:
    """Where each metal is at one point: free, titrant, indicator, masking, buffer, hydroxo, solid."""
    cat = catalogue()
    s = eq.system
    buf = cat.buffer(method.buffer).ligand
    mask_ligs = {cat.masking_agent(a).ligand for a, _ in method.masking}
    out: dict[str, dict[str, float]] = {}
    for m in metals:
        i = s.index(m)
        tot = eq.totals[point, i] + 0.0
        parts = {"free": 0.0, "bound to titrant": 0.0, "bound to indicator": 0.0, "masked": 0.0,
                 "bound to buffer ligand": 0.0, "hydroxo complexes": 0.0, "solid": 0.0}
        for sp, row, conc in zip(s.species, s.nu, eq.c[point]):
            if row[i] <= 0:
                continue
            amount = row[i] * conc
            ligs = [c for c, v in zip(s.components, row) if v > 0 and c != m and c != H]
            if not ligs:
                parts["free" if sp == m else "hydroxo complexes"] += amount
            elif method.titrant in ligs:
                parts["bound to titrant"] += amount
            elif method.indicator in ligs:
                parts["bound to indicator"] += amount
            elif mask_ligs & set(ligs):
                parts["masked"] += amount
            elif buf in ligs:
                parts["bound to buffer ligand"] += amount
        parts["solid"] = float(eq.solid_amount[point] @ s.nu_solid[:, i]) if s.solids else 0.0
        total_all = tot + prep.masked_by_assumption.get(m, 0.0)
        if total_all <= 0:
            continue
        parts["masked"] += prep.masked_by_assumption.get(m, 0.0)
        out[m] = {k: v / total_all for k, v in parts.items()}
    for m, c in prep.masked_by_assumption.items():
        if m not in out and c > 0:
            out[m] = {"free": 0.0, "bound to titrant": 0.0, "bound to indicator": 0.0, "masked": 1.0,
                      "bound to buffer ligand": 0.0, "hydroxo complexes": 0.0, "solid": 0.0}
    return out


@dataclass
class _Plan:
    """One titration's set-up between the batched solves (internal)."""

    sample: Sample
    method: Method
    prep: Prepared
    system: object
    metals: list
    totals: object
    V_eq_ref: float
    V_eq: float
    V_x: float | None
    V_hi: float
    n_points: int
    slow: list
    warnings: list
    assumptions: list
    frozen: dict = field(default_factory=dict)
    V: Array | None = None


def _plan(sample: Sample, method: Method, n_points: int) -> _Plan:
    cat = catalogue()
    db = database()
    prep = prepare(sample, method)
    back = method.mode == "back"
    metals = list(prep.metals)
    if back and method.back_metal not in metals:
        metals.append(method.back_metal)
    _check_constants([m for m in metals if prep.metals.get(m, 0.0) > 0 or m == method.back_metal], method.titrant)
    if not any(prep.metals.get(a, 0.0) > 0 for a in sample.analyte):
        raise InapplicableMethodError(f"the method leaves no {', '.join(sample.analyte)} to titrate: "
                                      f"{', '.join(a for a, _ in method.masking) or 'its reagents'} mask or reduce the analyte itself")
    system = build_system(tuple(metals), method.ligands)
    comps = system.components
    V0, cT = sample.volume_mL, method.titrant_conc_M
    c_ind = method.indicator_conc_M if method.indicator_conc_M is not None else cat.indicator(method.indicator).conc_M
    n_an = sample.n_analyte_mmol
    V_eq = n_an / cT
    binding = [m for m in prep.metals if db.metals[m].get("binds_titrant", True) is not False]
    V_all = sum(prep.metals[m] for m in binding) * V0 / cT
    warnings, assumptions = list(prep.warnings), list(prep.assumptions)
    base = np.zeros(len(comps))
    for m, c in prep.metals.items():
        base[comps.index(m)] = c
    for lig, c in prep.ligand_totals.items():
        base[comps.index(lig)] += c
    base[comps.index(method.indicator)] += c_ind
    iY = comps.index(method.titrant)

    def totals_direct(V: Array) -> Array:
        T = base[None, :] * (V0 / (V0 + V))[:, None]
        T[:, iY] += cT * V / (V0 + V)
        return T

    slow = [m for m in sample.analyte if db.metals[m].get("slow_with_titrant")]
    plan = _Plan(sample, method, prep, system, metals, totals_direct, V_eq, V_eq, None, 0.0, n_points, slow, warnings, assumptions)
    if back:
        V_x = method.excess_ratio * max(V_all, V_eq)  # an excess over the analyte even where part of it cannot bind
        cB = method.back_concentration
        VB_eq = (cT * V_x - n_an) / cB
        iB = comps.index(method.back_metal)
        plan.V_x, plan.V_eq_ref = V_x, VB_eq
        plan.V_hi = max(1.8 * VB_eq, (cT * V_x) / cB * 1.1)
        inert = np.zeros(len(comps))
        if slow:
            first = solve(system, totals_direct(np.array([V_x])), pH=method.pH, ionic_strength_M=sample.ionic_strength_M,
                          temperature_C=sample.temperature_C)
            for m in slow:
                i = comps.index(m)
                bound = first.bound(m, method.titrant)[0]
                inert[i] += bound
                inert[iY] += bound
            plan.frozen = {m: float(first.bound(m, method.titrant)[0] / max(first.totals[0, comps.index(m)], 1e-300)) for m in slow}

        def totals_back(V: Array) -> Array:
            T0 = totals_direct(np.array([V_x]))[0] - inert
            T = np.maximum(T0, 0.0)[None, :] * ((V0 + V_x) / (V0 + V_x + V))[:, None]
            T[:, iB] += cB * V / (V0 + V_x + V)
            return T
        plan.totals = totals_back
        assumptions.append(f"Back-titration: {method.excess_ratio:g} times the titrant needed for the metals present "
                           f"({V_x:.2f} mL) is added first, then titrated with {cB:g} M {method.back_metal}.")
        if slow:
            assumptions.append(f"{', '.join(slow)} reacts with the titrant only on heating (boil a few minutes after the excess is "
                               f"added); its complex is then inert and is not displaced by {method.back_metal} during the back-titration.")
    else:
        plan.V_hi = max(1.6 * V_eq, 1.25 * V_all, V_eq + 0.5)
        if slow:
            warnings.append(f"{', '.join(slow)} reacts too slowly with {method.titrant} at room temperature for a direct "
                            f"titration: use a back-titration (common practice).")
    plan.V = np.linspace(0.0, plan.V_hi, n_points)
    return plan


def _solve_batch(plans: Sequence[_Plan], grids: Sequence[Array | None]) -> list[Equilibrium | None]:
    """Solve the grids of many titrations, one equilibrium call per chemical system."""
    out: list[Equilibrium | None] = [None] * len(plans)
    groups: dict[int, list[int]] = {}
    for k, (p, g) in enumerate(zip(plans, grids)):
        if g is not None and len(g):
            groups.setdefault(id(p.system), []).append(k)
    for ks in groups.values():
        system = plans[ks[0]].system
        T = np.concatenate([plans[k].totals(grids[k]) for k in ks])
        pH = np.concatenate([np.full(len(grids[k]), plans[k].method.pH) for k in ks])
        I = np.concatenate([np.full(len(grids[k]), plans[k].sample.ionic_strength_M) for k in ks])
        Tc = np.concatenate([np.full(len(grids[k]), plans[k].sample.temperature_C) for k in ks])
        labels = [f"{'back-titrant' if plans[k].method.mode == 'back' else 'titrant'} volume {v:.4f} mL "
                  f"(pH {plans[k].method.pH:.2f}, {plans[k].method.titrant}, {plans[k].method.indicator})"
                  for k in ks for v in grids[k]]
        restart = np.concatenate([np.arange(len(grids[k])) == 0 for k in ks])  # continuation within each curve
        eq = solve(system, T, pH=pH, ionic_strength_M=I, temperature_C=Tc, point_labels=labels, restart=restart)
        start = 0
        for k in ks:
            n = len(grids[k])
            out[k] = _slice(eq, slice(start, start + n))
            start += n
    return out


def _slice(eq: Equilibrium, sl: slice) -> Equilibrium:
    return Equilibrium(system=eq.system, c=eq.c[sl], solid_amount=eq.solid_amount[sl], saturation_index=eq.saturation_index[sl],
                       ionic_strength_M=eq.ionic_strength_M[sl], pH=eq.pH[sl], totals=eq.totals[sl],
                       max_residual=eq.max_residual, iterations=eq.iterations)


def _indicator_bound(plan: _Plan, eq: Equilibrium, metals: Sequence[str]) -> Array:
    ind = plan.method.indicator
    tot = eq.totals[:, eq.system.index(ind)]
    return sum(eq.bound(ind, m) for m in metals) / np.maximum(tot, 1e-300)


def _turned(plan: _Plan, eq: Equilibrium, ref: float) -> Array:
    if plan.method.mode == "back":
        return _indicator_bound(plan, eq, [plan.method.back_metal]) / max(ref, 1e-300)
    return (ref - _indicator_bound(plan, eq, plan.metals)) / max(ref, 1e-300)


def simulate(sample: Sample, method: Method, n_points: int = 161, pH_drift: bool = False) -> Titration:
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

    Returns
    -------
    Titration
    """
    return simulate_many(sample, [method], n_points=n_points, pH_drift=pH_drift)[0]


def simulate_many(sample: Sample, methods: Sequence[Method], n_points: int = 161, pH_drift: bool = False,
                  errors: list | None = None) -> list[Titration | None]:
    """Simulate many methods on one sample; candidates that share a chemical system are solved together.

    Parameters
    ----------
    errors : list, optional
        If given, a method that cannot be evaluated (a missing constant) yields None and its error is appended
        as ``(index, exception)``; otherwise the error is raised.
    """
    plans: list[_Plan | None] = []
    for k, m in enumerate(methods):
        try:
            plans.append(_plan(sample, m, n_points))
        except (MissingConstantError, InapplicableMethodError) as exc:
            if errors is None:
                raise
            errors.append((k, exc))
            plans.append(None)
    live = [p for p in plans if p is not None]
    coarse = _solve_batch(live, [p.V for p in live])
    refs, fine_grids = [], []
    for p, eq in zip(live, coarse):
        if p.method.mode == "back":
            ref = float(_indicator_bound(p, eq, [p.method.back_metal])[-1])
        else:
            ref = float(_indicator_bound(p, eq, p.metals)[0])
        refs.append(ref)
        grid = None
        if ref >= 0.2:
            t = _turned(p, eq, ref)
            x = _interp_crossing(p.V, t, 0.5)
            if x is not None:
                step = p.V[1] - p.V[0]
                grid = np.linspace(max(0.0, x - 4 * step), min(p.V_hi * 1.2, x + 4 * step), p.n_points)
        fine_grids.append(grid)
    fine = _solve_batch(live, fine_grids)
    V_eps = []
    for p, eqf, grid, ref in zip(live, fine, fine_grids, refs):
        V_eps.append(_interp_crossing(grid, _turned(p, eqf, ref), 0.5) if eqf is not None else None)
    probes = [np.array([p.V_eq_ref] + ([v] if v is not None else [])) for p, v in zip(live, V_eps)]
    probed = _solve_batch(live, probes)
    results = iter(_finish(p, c, f, g, pr, ref, v, pH_drift)
                   for p, c, f, g, pr, ref, v in zip(live, coarse, fine, fine_grids, probed, refs, V_eps))
    return [None if p is None else next(results) for p in plans]


def _finish(plan: _Plan, eq: Equilibrium, eqf: Equilibrium | None, grid: Array | None, eqp: Equilibrium, ref: float,
            V_ep: float | None, pH_drift: bool) -> Titration:
    cat = catalogue()
    sample, method, prep, system = plan.sample, plan.method, plan.prep, plan.system
    comps, metals = system.components, plan.metals
    indicator = cat.indicator(method.indicator)
    back = method.mode == "back"
    warnings, assumptions = list(plan.warnings), list(plan.assumptions)
    V = plan.V
    V10 = V90 = None
    if eqf is not None:
        tf = _turned(plan, eqf, ref)
        V10 = _interp_crossing(grid, tf, 0.1)
        V90 = _interp_crossing(grid, tf, 0.9)
        t_coarse = _turned(plan, eq, ref)
        if V10 is None or (grid[0] > 0 and tf[0] > 0.1):
            V10 = _interp_crossing(V, t_coarse, 0.1)
        if V90 is None:
            V90 = _interp_crossing(V, t_coarse, 0.9)
        Vall = np.concatenate([V, grid])
        order = np.argsort(Vall, kind="stable")
        V = Vall[order]
        eq = _merge(eq, eqf, order)
    elif ref < 0.2:
        warnings.append(f"{indicator.name} is hardly bound by the metals at pH {method.pH:.2f} "
                        f"({100 * ref:.0f} % bound): no visible colour change is predicted.")
    turned = _turned(plan, eq, ref)
    n_an = sample.n_analyte_mmol
    # pM of a metal not (yet) present is undefined: NaN, so that it is not plotted and is null in JSON
    pM = {m: np.where(eq.totals[:, comps.index(m)] > 0, -np.log10(np.maximum(eq.free(m), 1e-300)), np.nan) for m in metals}
    bound_fraction = {m: eq.bound(m, method.titrant) / np.maximum(eq.totals[:, comps.index(m)], 1e-300) for m in metals}
    pM_eq = {m: float(-np.log10(max(eqp.free(m)[0], 1e-300))) for m in metals}
    pM_ep = {m: float(-np.log10(max(eqp.free(m)[1], 1e-300))) for m in metals} if V_ep is not None else {}
    if back:
        error = None if V_ep is None else ((method.titrant_conc_M * plan.V_x - method.back_concentration * V_ep) - n_an) / n_an * 100.0
    else:
        error = None if V_ep is None else (V_ep - plan.V_eq) / plan.V_eq * 100.0
    sharp = None if (V10 is None or V90 is None) else abs(V90 - V10)
    # analyte still held by the indicator at the end point, as a share of the analyte: an indicator blank that cancels
    # when the titrant is standardised against the same metal with the same indicator dose
    blank = None
    if V_ep is not None and not back:
        held = sum(float(eqp.bound(method.indicator, a)[1]) for a in sample.analyte if a in comps)
        total = sum(float(eqp.totals[1, comps.index(a)]) for a in sample.analyte if a in comps)
        blank = -100.0 * held / total if total > 0 else None
    cotitrated = {}
    if V_ep is not None:
        for m in sample.interferents:
            if m in comps:
                tot = eqp.totals[1, comps.index(m)]
                cotitrated[m] = float(eqp.bound(m, method.titrant)[1] / tot) if tot > 0 else 0.0
            else:
                cotitrated[m] = 0.0
    iI = comps.index(method.indicator)
    fr, colours = {}, {}
    tot_ind = np.maximum(eq.totals[:, iI], 1e-300)
    for k, row in enumerate(system.nu):
        if row[iI] <= 0:
            continue
        metal_in = [c for c, v in zip(comps, row) if v > 0 and c in metals]
        if metal_in:
            key = f"{metal_in[0]}-{indicator.id}"
            colours[key] = indicator.metal_colour
        else:
            h = int(row[comps.index(H)])
            key = f"H{h if h > 1 else ''}In" if h > 0 else "In"
            colours[key] = indicator.free_colour(h)
        fr[key] = fr.get(key, 0.0) + row[iI] * eq.c[:, k] / tot_ind
    solids = {name: eq.solid_amount[:, j] for j, name in enumerate(system.solids) if np.any(eq.solid_amount[:, j] > 1e-12)}
    pre_start = tuple(eq.solids_present(0))
    pre_end = tuple(eqp.solids_present(1 if V_ep is not None else 0))
    analyte_solids = []
    for s_name in sorted(set(pre_start) | set(pre_end)):
        m = system.solid_metals[system.solids.index(s_name)]
        if m in sample.analyte:
            analyte_solids.append(s_name)
            warnings.append(f"The analyte {m} precipitates as {s_name}: the titration would be slow and low (add the titrant "
                            f"before the pH is raised, or change the pH).")
        else:
            warnings.append(f"{s_name} precipitates: it can adsorb or carry down {', '.join(sample.analyte)} and the indicator "
                            f"(a negative error that grows with the precipitate); add most of the titrant before the pH is raised "
                            f"(Flaschka and Ganchoff).")
    spec_start = _speciation(eq, 0, prep, method, metals)
    blocked = []
    for m in indicator.blocked_by:
        sp = spec_start.get(m)
        if sp is None or m not in sample.metals:
            continue
        held = sp["masked"] + (sp["bound to titrant"] if back else 0.0)
        if held < MASKED_THRESHOLD:
            blocked.append(m)
    if V_ep is None and not blocked and ref >= 0.2 and not back:
        holders = {m: float(eq.bound(method.indicator, m)[-1]) for m in metals}
        worst = max(holders, key=holders.get)
        if holders[worst] / tot_ind[-1] > 0.5:
            blocked.append(worst)
    if blocked:
        warnings.append(f"{', '.join(blocked)} block(s) {indicator.name} at this pH and dose: mask it, or change the method.")
    usable = indicator.usable_pH[0] <= method.pH <= indicator.usable_pH[1]
    if not usable:
        warnings.append(f"{indicator.name} shows its colour change only between pH {indicator.usable_pH[0]:g} and "
                        f"{indicator.usable_pH[1]:g} (the method's pH is {method.pH:.2f}).")
    if indicator.needs_Mg_for_Ca and "Ca" in sample.analyte and sample.metals.get("Mg", 0.0) <= 0 and not back:
        warnings.append(f"{indicator.name} gives a sharp calcium end point only with magnesium present: add a little Mg-EDTA "
                        f"to the buffer (it does not change the result).")
    if blank is not None and abs(blank) >= 0.2:
        warnings.append(f"{-blank:.2g} % of the analyte is still held by the indicator at the end point (an indicator blank, "
                        f"included in the predicted error): standardise the titrant against the same metal with the same "
                        f"indicator dose, or use less indicator.")
    if V_ep is not None and sharp is not None and sharp > GRADUAL_DROPS * DROP_mL:
        warnings.append(f"The colour change takes {sharp:.2f} mL ({sharp / DROP_mL:.0f} drops): too gradual to see sharply.")
    h_free = _dominant_free_form(fr, 0 if back else -1)
    start_colour = indicator.metal_colour.split(" (")[0]
    change = (indicator.free_colour(h_free), start_colour) if back else (start_colour, indicator.free_colour(h_free))
    drift = _pH_drift(plan, V_ep) if (pH_drift and V_ep is not None and not back) else None
    spec_end = _speciation(eqp, 1 if V_ep is not None else 0, prep, method, metals)
    return Titration(
        sample=sample, method=method, volume_mL=V, pM=pM, bound_fraction=bound_fraction, indicator_fractions=fr,
        indicator_colours=colours, turned=np.clip(turned, -1.0, 2.0), pH=np.full(len(V), method.pH), solids=solids,
        equivalence_mL=float(plan.V_eq_ref), endpoint_mL=V_ep, error_percent=error, sharpness_mL=sharp, pM_eq=pM_eq,
        pM_ep=pM_ep, cotitrated=cotitrated, precipitates_start=pre_start, precipitates_end=pre_end,
        blocked_by=tuple(blocked), indicator_usable=usable, colour_change=change, excess_mL=plan.V_x,
        warnings=tuple(dict.fromkeys(warnings)), assumptions=tuple(dict.fromkeys(assumptions)),
        speciation_start=spec_start, speciation_end=spec_end, constants_used=tuple(system.uses()), pH_drift=drift,
        masked_by_assumption=tuple(m for m, c in prep.masked_by_assumption.items() if c > 0), indicator_blank_percent=blank,
        slow_analytes=tuple(plan.slow), analyte_precipitates=tuple(analyte_solids),
        mass_balance_error=eq.mass_balance_error())


def _dominant_free_form(fractions: Mapping[str, Array], point: int) -> int:
    free = {k: v[point] for k, v in fractions.items() if "-" not in k}
    if not free:
        return 0
    key = max(free, key=free.get)
    return 0 if key == "In" else int(key[1:-2] or 1)


def _merge(a: Equilibrium, b: Equilibrium, order: Array) -> Equilibrium:
    def cat(x, y):
        return np.concatenate([x, y])[order]
    return Equilibrium(system=a.system, c=cat(a.c, b.c), solid_amount=cat(a.solid_amount, b.solid_amount),
                       saturation_index=cat(a.saturation_index, b.saturation_index),
                       ionic_strength_M=cat(a.ionic_strength_M, b.ionic_strength_M), pH=cat(a.pH, b.pH),
                       totals=cat(a.totals, b.totals), max_residual=max(a.max_residual, b.max_residual),
                       iterations=a.iterations + b.iterations)


def _pH_drift(plan: _Plan, V_ep: float) -> float:
    """pH change from the start to the end point with the pH free (buffer capacity)."""
    system, method, sample = plan.system, plan.method, plan.sample
    kw = dict(ionic_strength_M=sample.ionic_strength_M, temperature_C=sample.temperature_C)
    V = np.array([0.0, V_ep])
    T = plan.totals(V)
    start = solve(system, T[:1], pH=method.pH, **kw)
    iH = system.index(H)
    T_H0 = float(start.c[0] @ system.nu[:, iH])  # proton total that gives the set pH at the start
    V0 = sample.volume_mL
    T[:, iH] = T_H0 * V0 / (V0 + V) + TITRANT_PROTONS * method.titrant_conc_M * V / (V0 + V)
    free = solve(system, T, pH=None, **kw)
    return float(free.pH[1] - free.pH[0])
