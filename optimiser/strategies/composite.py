"""What the multi-step strategies share: their steps simulated one after the other, and one titration made of them.

A step is an ordinary single titration (a :class:`~optimiser.method.Method` whose strategy is direct) of the sample
as that step sees it: its analyte is what the step determines. A step in the same aliquot starts from the solution
the previous step left at its end point (:class:`~optimiser.strategies.base.Carry`: the titrant added so far, the
volume, what a reagent added or destroyed), so its own end point and error include the previous step's over- or
under-titration; a step on a new aliquot starts afresh. Each step is solved on the full equilibrium by
:func:`optimiser.titration.simulate_many`.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import findings as fd
from .base import Carry, Strategy

if TYPE_CHECKING:  # pragma: no cover
    from ..method import Method, Sample
    from ..titration import EndPoint, Titration


@dataclass(frozen=True)
class Step:
    """One titration of a multi-step strategy.

    Attributes
    ----------
    sample : Sample
        The sample as the step sees it; its analyte is what the step determines.
    method : Method
        The step's conditions (a single titration).
    text : str
        The step in words ("bismuth at pH 1.50, xylenol orange").
    same_aliquot : bool
        True where the step continues in the previous step's solution.
    removed_mmol : dict
        Component -> amount a reagent added before this step destroys [mmol] (a demasking agent).
    reported : bool
        True where the step's result is reported for itself (False for a step that only feeds a difference).
    """

    sample: Sample
    method: Method
    text: str
    same_aliquot: bool = True
    removed_mmol: dict[str, float] = field(default_factory=dict)
    reported: bool = True


def step_text(metals, method) -> str:
    """'Bi at pH 1.50 (nitric acid, xylenol orange)'."""
    return (f"{' + '.join(metals)} at pH {method.pH:.2f} ({method.buffer_info.name}, "
            f"{method.indicator_info.name})")


def _candidate_text(strategy, c) -> str:
    """A search candidate in words: the strategy and its genes."""
    extra = dict(getattr(c, "extra", ()))
    parts = []
    if "stage_pH" in extra:
        parts.append(f"other titration at pH {float(extra['stage_pH']):.2f}")
    if extra.get("co", "none") != "none":
        parts.append(f"for {extra['co']}")
    return strategy.label + (f" ({', '.join(parts)})" if parts else "")


class CompositeStrategy(Strategy):
    """A strategy made of several single titrations; subclasses say what the steps are (:meth:`steps`) and, where a
    result is computed from several end points, how (:meth:`derived`)."""

    composite = True
    reads_release = True
    slow_is_violation = True

    def steps(self, sample: Sample, method: Method) -> list[Step]:
        raise NotImplementedError

    def derived(self, sample: Sample, method: Method, steps: list[Step], titrations: list[Titration]) -> list[EndPoint]:
        """Results computed from the steps' end points (none by default)."""
        return []

    # the single-titration parts of the interface are the steps' own
    def plan_curve(self, plan) -> None:  # pragma: no cover - a composite is never planned as one curve
        raise NotImplementedError("a multi-step strategy is simulated step by step")

    def variant(self, method) -> str:
        """The other step's conditions and what it determines ("" for a search candidate: its genes say it)."""
        st = getattr(method, "stage", None)
        if st is None:
            return ""
        return f"{st.pH:.2f}/{st.buffer}/{st.indicator}|{','.join(method.co_analytes)}"

    def hazards(self, method) -> tuple[int, ...]:
        return (method.stage.hazard,) if method.stage is not None else ()

    def reagent_cautions(self, method) -> list[tuple[str, int, tuple[str, ...]]]:
        if method.stage is None:
            return []
        st = method.stage
        out = [(r.name, r.hazard, tuple(r.cautions)) for r in (st.buffer_info, *st.masking_agents)
               if r.id not in {method.buffer, *(a for a, _ in method.masking)}]
        return out

    def result_formula(self, scenario, method) -> str | None:
        steps = self.steps(scenario.sample, method)
        derived = [f"{', '.join(scenario.sample.analyte)} (by difference)"] \
            if type(self).derived is not CompositeStrategy.derived else []
        return "; ".join(_formulas([", ".join(st.sample.analyte) for st in steps], derived, method.titrant_conc_M,
                                   scenario.sample.volume_mL))

    def json_fields(self, method) -> dict:
        if not hasattr(method, "stage"):  # a search candidate: its genes
            return {"mode": self.id, "back_metal": None, **dict(getattr(method, "extra", ()))}
        st = method.stage
        return {"mode": self.id, "back_metal": None, "co_analytes": list(method.co_analytes),
                "stage": None if st is None else {"pH": st.pH, "buffer": st.buffer, "indicator": st.indicator,
                                                  "masking": [list(m) for m in st.masking]}}

    # -- simulation ----------------------------------------------------------------------------------------
    def simulate(self, sample: Sample, method: Method, n_points: int, pH_drift: bool, standardise: bool):
        return self.simulate_many(sample, [method], n_points, pH_drift, standardise)[0]

    def simulate_many(self, sample: Sample, methods, n_points: int, pH_drift: bool, standardise: bool) -> list:
        """Every step of every method, step by step: the k-th steps of all the methods in one batched call."""
        from ..titration import simulate_many

        plans = [self.steps(sample, m) for m in methods]
        done: list[list] = [[] for _ in methods]
        carries: list = [None] * len(methods)
        for k in range(max(len(p) for p in plans)):
            idx = [i for i, p in enumerate(plans) if k < len(p)]
            for i in idx:
                st = plans[i][k]
                if k and st.same_aliquot:
                    carries[i] = _carry_after(carries[i], plans[i][k - 1], done[i][-1], st)
                else:
                    carries[i] = Carry(0.0, {c: -v for c, v in st.removed_mmol.items()}) if st.removed_mmol else None
            for group in _by_sample(plans, idx, k):
                ts = simulate_many(plans[group[0]][k].sample, [plans[i][k].method for i in group], n_points=n_points,
                                   pH_drift=pH_drift, standardise=standardise, carry=[carries[i] for i in group])
                for i, t in zip(group, ts):
                    done[i].append(t)
        return [self.finish(sample, m, p, d) for m, p, d in zip(methods, plans, done)]

    def finish(self, sample: Sample, method: Method, steps: list[Step], ts: list) -> Titration:
        """The combined titration of one method's simulated steps."""
        return combine(sample, method, steps, ts, self.derived(sample, method, steps, ts))


def _by_sample(plans, idx, k) -> list[list[int]]:
    """Methods whose k-th step titrates the same sample (analyte), to be simulated in one call."""
    groups: dict = {}
    for i in idx:
        groups.setdefault(plans[i][k].sample.analyte, []).append(i)
    return list(groups.values())


def _carry_after(before: Carry | None, prev: Step, t: Titration, nxt: Step) -> Carry:
    """The solution the previous step leaves at its end point (its equivalence where it has none), for the next."""
    V = t.endpoint_mL if t.endpoint_mL is not None else t.equivalence_mL
    amounts = dict(before.amounts_mmol) if before is not None else {}
    m = prev.method
    V_start = prev.sample.volume_mL + (before.volume_mL if before is not None else 0.0)
    amounts[m.titrant] = amounts.get(m.titrant, 0.0) + m.titrant_conc_M * V
    mine = nxt.method.ligand_totals()
    for lig, c in m.ligand_totals().items():  # the previous step's reagents the next one does not add again
        if lig not in mine:
            amounts[lig] = amounts.get(lig, 0.0) + c * V_start
    if m.indicator != nxt.method.indicator:
        amounts[m.indicator] = amounts.get(m.indicator, 0.0) + m.indicator_dose_M * V_start
    for k, v in nxt.removed_mmol.items():
        amounts[k] = amounts.get(k, 0.0) - v
    titrated = tuple(dict.fromkeys((*(before.titrated if before else ()), *prev.sample.analyte)))
    return Carry(volume_mL=(before.volume_mL if before else 0.0) + V, amounts_mmol=amounts, titrated=titrated)


def _padded(dicts: list[dict], lengths: list[int]) -> dict:
    """Arrays of each key concatenated over the steps (NaN where a step lacks the key)."""
    keys = list(dict.fromkeys(k for d in dicts for k in d))
    return {k: np.concatenate([np.asarray(d[k], float) if k in d else np.full(n, np.nan) for d, n in zip(dicts, lengths)])
            for k in keys}


def _unique(items) -> tuple:
    out: list = []
    for x in items:
        if not any(x is y or x == y for y in out):
            out.append(x)
    return tuple(out)


def combine(sample: Sample, method: Method, steps: list[Step], ts: list[Titration], derived: list[EndPoint]) -> Titration:
    """One titration made of the steps' titrations: the curves one after the other (a step followed by another in
    the same aliquot cut at its end point), an end point per step and per derived result, the governing end point
    the reported result with the largest error (none where an end point is missing)."""
    cuts, offsets, start = [], [], 0.0
    for k, t in enumerate(ts):
        keep = np.ones(len(t.volume_mL), bool)
        follows = k + 1 < len(steps) and steps[k + 1].same_aliquot
        if follows and t.endpoint_mL is not None:
            keep = t.volume_mL <= t.endpoint_mL + 1e-12
        cuts.append(keep)
        offsets.append(start)
        end = t.endpoint_mL if (follows and t.endpoint_mL is not None) else float(t.volume_mL[keep][-1])
        start += end
    lengths = [int(c.sum()) for c in cuts]

    def cat(get):
        return _padded([{k: v[c] for k, v in get(t).items()} for t, c in zip(ts, cuts)], lengths)

    eps = []
    for k, (st, t) in enumerate(zip(steps, ts)):
        e = t.endpoints[0]
        eps.append(replace(e, label=", ".join(st.sample.analyte), step=f"step {k + 1}: {st.text}", start_mL=offsets[k],
                           standardised_percent=t.standardised_error_percent, standardised_parts=t.standardised_budget))
    eps += derived
    reported = [k for k, st in enumerate(steps) if st.reported] + list(range(len(steps), len(eps)))
    governing = max(reported, key=lambda k: np.inf if eps[k].error_percent is None
                    else abs(eps[k].standardised_percent if eps[k].standardised_percent is not None else eps[k].error_percent))
    earlier = set()
    cotitrated: dict[str, float] = {}
    for st, t in zip(steps, ts):
        for m, share in t.cotitrated.items():
            if m not in earlier and m not in sample.analyte:
                cotitrated[m] = max(cotitrated.get(m, 0.0), share)
        earlier |= set(st.sample.analyte) if st.same_aliquot else set()
    found = []
    for k, (st, t) in enumerate(zip(steps, ts)):
        if k and st.same_aliquot:
            carried = t.method.titrant_conc_M * (ts[k - 1].endpoint_mL or ts[k - 1].equivalence_mL)
            found.append(fd.assumption("step_carry", step=k + 1, titrant_mmol=carried,
                                       volume_mL=offsets[k]))
        elif k:
            found.append(fd.assumption("second_aliquot", analyte=", ".join(sample.analyte)))
        found += list(t.findings)
    drifts = [t.pH_drift for t in ts if t.pH_drift is not None]
    gov_t = ts[min(governing, len(ts) - 1)]
    first, last = ts[0], ts[-1]
    from ..titration import Titration

    titre = 0.0
    for k, (st, t) in enumerate(zip(steps, ts)):
        step_titre = t.titre_mL
        titre = titre + step_titre if (k and st.same_aliquot) else max(titre, step_titre)
    return Titration(
        sample=sample, method=method,
        volume_mL=np.concatenate([t.volume_mL[c] + o for t, c, o in zip(ts, cuts, offsets)]),
        pM=cat(lambda t: t.pM), bound_fraction=cat(lambda t: t.bound_fraction),
        indicator_fractions=cat(lambda t: t.indicator_fractions),
        indicator_colours={k: v for t in ts for k, v in t.indicator_colours.items()},
        turned=np.concatenate([t.turned[c] for t, c in zip(ts, cuts)]),
        pH=np.concatenate([t.pH[c] for t, c in zip(ts, cuts)]),
        solids={k: np.nan_to_num(v) for k, v in cat(lambda t: t.solids).items()},
        equivalence_mL=gov_t.equivalence_mL + offsets[min(governing, len(ts) - 1)], endpoints=tuple(eps),
        pM_eq=dict(gov_t.pM_eq), cotitrated=cotitrated, precipitates_start=first.precipitates_start,
        precipitates_end=last.precipitates_end, blocked_by=tuple(dict.fromkeys(m for t in ts for m in t.blocked_by)),
        indicator_usable=all(t.indicator_usable for t in ts), excess_mL=None, findings=tuple(found),
        speciation_start=first.speciation_start, speciation_end=last.speciation_end,
        constants_used=_unique(c for t in ts for c in t.constants_used),
        pH_drift=max(drifts, key=abs) if drifts else None,
        masked_by_assumption=tuple(dict.fromkeys(m for t in ts for m in t.masked_by_assumption)),
        indicator_blank_percent=gov_t.indicator_blank_percent,
        slow_analytes=tuple(dict.fromkeys(m for t in ts for m in t.slow_analytes)),
        analyte_precipitates=tuple(dict.fromkeys(m for t in ts for m in t.analyte_precipitates)),
        mass_balance_error=max(t.mass_balance_error for t in ts), governing=governing, steps=tuple(ts),
        titre_total_mL=titre, determined=tuple(dict.fromkeys(
            [st.sample.analyte for st in steps if st.reported] + [sample.analyte for ep in derived if ep.derived])))


def co_analyte_options(sample: Sample) -> list[str]:
    """The choices of a search's ``co`` gene: each further analyte group, then each interferent, as 'A+B'."""
    out = ["+".join(g) for g in sample.groups]
    out += [m for m in sample.interferents if not any(m in g for g in sample.groups)]
    return list(dict.fromkeys(out)) or ["none"]


def stage_fields(extra: dict[str, Any], base: dict[str, Any], search: Any) -> dict[str, Any]:
    """The ``stage`` method and ``co_analytes`` from a search's genes (``stage_pH``, ``stage_buffer``,
    ``stage_indicator``, ``co``)."""
    from ..candidate import buffers_for
    from ..method import Method
    from ..reagents import catalogue

    pH = float(extra["stage_pH"])
    bufs = buffers_for(pH, search.buffers) or [search.buffers[0]]
    buf = bufs[int(extra.get("stage_buffer", 0)) % len(bufs)]
    total = (base.get("buffer_total_M") or 0.1) if catalogue().buffer(buf).ligand else 0.0
    stage = Method(pH=pH, buffer=buf, buffer_total_M=total, titrant=base["titrant"],
                   titrant_conc_M=base["titrant_conc_M"], indicator=stage_indicator(extra["stage_indicator"], pH, search))
    co = str(extra.get("co", "none"))
    return {"stage": stage, "co_analytes": tuple(co.split("+")) if co != "none" else ()}


def log_K_ML(metal: str, ligand: str) -> float:
    """log K of the 1:1 complex ML from the database (-inf where there is none)."""
    from ..constants import H, database

    ks = [k for k in database().complexes.get((metal, ligand), ()) if H not in k.stoichiometry
          and k.stoichiometry.get(ligand) == 1 and len(k.stoichiometry) == 2]
    return max((k.log_K for k in ks), default=-np.inf)


def needs_another_titration(sample: Sample, search: Any) -> bool:
    """Whether a strategy of several titrations is searched: where the scenario names several analytes to determine
    apart (its ``analyte`` list), which is what a sequential titration and a difference are for. A scenario with one
    analyte may still ask for them by name (``search.modes``; ``optimiser simulate --mode``)."""
    return bool(sample.groups)


def interferent_binds_more(sample: Sample, search: Any) -> bool:
    """Whether an interferent binds a searched titrant more strongly than the analyte (log K of ML): no pH then
    titrates the analyte alone, and practice titrates the interferent first or takes a difference."""
    for t in search.titrants:
        weakest = min(log_K_ML(a, t) for a in sample.analyte)
        if np.isfinite(weakest) and any(log_K_ML(m, t) > weakest for m in sample.interferents):
            return True
    return False


def stage_prescreen(c, scenario) -> list[tuple[str, str]]:
    """The stage genes' quick checks: its indicator's pH range, a buffer that holds its pH, a metal to determine, and
    a pH apart from the method's (two titrations at one pH are one titration)."""
    from ..candidate import buffers_for
    from ..reagents import catalogue

    extra = dict(c.extra)
    if "stage_pH" not in extra:
        return []
    out = []
    pH = float(extra["stage_pH"])
    ind = catalogue().indicator(stage_indicator(extra["stage_indicator"], pH, scenario.search))
    if not ind.usable_pH[0] <= pH <= ind.usable_pH[1]:
        out.append(("indicator_pH", f"{ind.name} shows no colour change at the second step's pH {pH:.2f}"))
    if not buffers_for(pH, scenario.search.buffers):
        out.append(("buffer", f"no allowed buffer holds the second step's pH {pH:.2f}"))
    if extra.get("co", "none") == "none":
        out.append(("strategy", "the second step determines nothing"))
    if abs(pH - c.pH) < 1.0:
        out.append(("strategy", "the two steps' pH values are less than one unit apart"))
    return out


def stage_indicator(gene, pH: float, search: Any) -> str:
    """The stage's indicator: a name, or (a search gene) the n-th of the searched indicators usable at its pH, so
    that the search does not spend its evaluations on a dye that shows no change there."""
    if isinstance(gene, str):
        return gene
    from ..reagents import catalogue

    cat = catalogue()
    usable = [i for i in search.indicators if cat.indicator(i).usable_pH[0] <= pH <= cat.indicator(i).usable_pH[1]]
    usable = usable or list(search.indicators)
    return usable[int(gene) % len(usable)]


def stage_genes(sample: Sample, search: Any) -> dict[str, tuple]:
    """The genes of a stage: its pH, its buffer pick, its indicator, and what it determines."""
    return {"stage_pH": ("real", *search.pH_range), "stage_buffer": ("choice", [0, 1]),
            "stage_indicator": ("choice", list(range(min(3, len(search.indicators))))),
            "co": ("choice", co_analyte_options(sample))}


def _formulas(read: list[str], derived: list[str], cT: float, V0: float) -> list[str]:
    out = [f"c({label}) [mmol/L] = {cT:g} mol/L x V{k + 1} [mL] / {V0:g} mL x 1000" for k, label in enumerate(read)]
    out += [f"c({label}) [mmol/L] = {cT:g} mol/L x (V1 - V2) [mL] / {V0:g} mL x 1000" for label in derived]
    return out


def composite_steps(scenario, method, t, steps: list[Step], between=None, writers: list | None = None) -> list[str]:
    """The numbered bench steps of a multi-step strategy: each step (a new flask
    where the step starts a new aliquot; ``between(k, step)`` says what is added before a step that continues in the
    same solution, or before the first titration where that step needs a reagent first), each titration with its
    own colour change and predicted reading, and how each result is calculated. The standardisation is the written
    method's (:func:`optimiser.bench_steps.written_method`); each step's additions are written from stock solutions by
    a writer of its own, appended to ``writers`` where given (their stocks join the method's)."""
    from ..bench_steps import step_writer
    from ..quantities import number

    V0, cT = scenario.sample.volume_mL, method.titrant_conc_M
    steps_t = t.steps or (t,)
    out: list[str] = []
    flask = 0
    for k, (st, tk) in enumerate(zip(steps, steps_t)):
        m = st.method
        new = k == 0 or not st.same_aliquot
        if new:
            flask += 1
            out.append(f"Pipette {V0:g} mL of sample into titration flask {flask}.")
            wk = step_writer(scenario, m, tk, writers)  # stock-solution additions, as the single titration's procedure
            out += wk.masking_steps(after_buffer=False)
        if between is not None and (not new or st.removed_mmol):
            text = between(k, st)
            if text:
                out.append(text + ".")
        if tk.precipitates_start and m.buffer_info.strong_alkali and tk.endpoint_mL is not None:
            out.append(f"Add about 90 % of the expected titrant ({0.9 * tk.endpoint_mL:.1f} mL) before raising the pH, "
                       f"so that {', '.join(tk.precipitates_start)} does not carry down the analyte (common practice).")
        if new or m.buffer != steps[k - 1].method.buffer or m.pH != steps[k - 1].method.pH:
            out.append(step_writer(scenario, m, tk, writers).buffer_step())
            if new:
                out += step_writer(scenario, m, tk, writers).masking_steps(after_buffer=True)
        ep = t.endpoints[k]
        colour = f"from {ep.colour_change[0]} to {ep.colour_change[1]}"
        reading = "-" if ep.volume_mL is None else f"titre about {number(ep.volume_mL, 2)} mL"
        ind = m.indicator_info
        dye = (f"Add {ind.name} ({ind.dose}) and titrate" if new or m.indicator != steps[k - 1].method.indicator
               else "Continue titrating")
        out.append(f"{dye} with {cT:g} M {m.titrant} {colour}: V{k + 1} (predicted {reading}; "
                   f"{', '.join(st.sample.analyte)}).")
    formulas = _formulas([ep.label for ep in t.endpoints if not ep.derived],
                         [ep.label for ep in t.endpoints if ep.derived], cT, V0)
    out.append("Reagent blank: carry the same volume of deionised water through these steps with every reagent and "
               "subtract its titres (common practice).")
    out.append("Calculate: " + "; ".join(formulas) + ".")
    return out




class StagedStrategy(CompositeStrategy):
    """A composite strategy with one other titration (a ``stage``: the first step in the same aliquot, or a second
    aliquot), searched where the scenario names several analytes: its genes are the stage's pH, buffer, indicator
    and what it determines (:func:`stage_genes`)."""

    def applies(self, sample, search) -> bool:
        return needs_another_titration(sample, search)

    def applies_when_asked(self, sample, search) -> bool:
        return needs_another_titration(sample, search) or interferent_binds_more(sample, search)

    def genes(self, sample, search) -> dict[str, tuple]:
        return stage_genes(sample, search)

    def method_fields(self, extra, sample, search, base) -> dict:
        return stage_fields(extra, base, search)

    def prescreen(self, candidate, scenario) -> list[tuple[str, str]]:
        return stage_prescreen(candidate, scenario)


__all__ = ["CompositeStrategy", "StagedStrategy", "composite_steps", "stage_prescreen", "needs_another_titration", "Step", "combine", "step_text", "stage_genes", "stage_fields", "co_analyte_options"]
