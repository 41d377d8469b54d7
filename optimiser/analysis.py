"""What a report shows, computed once after the search, as plain data.

:func:`analyse` reads a :class:`~optimiser.search.SearchResult` and the chemistry modules and returns an
:class:`Analysis`: the bench procedure (:mod:`optimiser.procedure`), the criteria, the conditional-constant table,
the alternatives and their trade-offs, the curve and speciation tables, the safety list, the constants used and the
edges of the robustness windows. A report format (:mod:`optimiser.report`) only renders it.

One definition of log(c K') serves both the analyte's feasibility and the selectivity margin: c is the metal's
analytical concentration in the aliquot as pipetted, before any titrant dilutes it (the definition the search's
margin uses, :func:`analyte_feasibility`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import yaml

from .comparison import ComparisonTable, comparison_table
from .conditional import Conditions, conditional_constant, feasibility
from .constants import database
from .errors import DataError, MissingConstantError
from .method_document import MethodDocument, method_document
from .method import Method
from .procedure import BenchMethod, bench_method
from .medium import side_reactions
from .objectives import COTITRATED_SHARE_MAX, PH_DRIFT_MAX, READABLE_DROPS, TABLE_IONIC_STRENGTH_M
from .readout import CATEGORIES, DROP_mL, budget_label
from .reagents import HAZARD_NAMES, catalogue
from .report.text import share_percent, short_name
from .scenario import Scenario
from .search import Evaluation, SearchResult
from .search_stats import SearchStats
from .stocks import HAZARD_CAUTIONS, HEATING_CAUTION
from .strategies import strategy
from .titration import Titration

TABLE_PH = (4.0, 6.0, 8.0, 10.0, 12.0)  # pH columns of the conditional-constant table (the method's pH is added)
DPM_READ = 0.2  # the pM uncertainty of a visual end point in Ringbom's criterion (textbook value)


def feasible_log_cK(target_percent: float) -> float:
    """The log(c K') that Ringbom's error formula needs for an error within ``target_percent`` at dpM +/- 0.2:
    Et = (10^dpM - 10^-dpM) / sqrt(c K') x 100 %, so log(c K') >= 2 log10((10^0.2 - 10^-0.2) x 100 / target); 5.96 for
    0.1 %, the textbook's "6" (Ringbom, Complexation in Analytical Chemistry, 1963).

    >>> round(feasible_log_cK(0.1), 2), round(feasible_log_cK(1.0), 2)
    (5.96, 3.96)
    """
    return 2 * math.log10((10 ** DPM_READ - 10 ** -DPM_READ) * 100 / target_percent)
MARGIN_NEEDED = 4.0  # about 1 % (common practice; 5 for about 0.3 %)
ALTERNATIVES_PER_STRATEGY = 4


@dataclass(frozen=True)
class Criterion:
    name: str
    need: str
    value: str
    met: bool


@dataclass(frozen=True)
class LogKRow:
    metal: str
    role: str  # "analyte" or "interferent"
    conc_mM: float
    log_K: tuple[float | None, ...]  # one per pH of the table; None where a constant is missing


@dataclass(frozen=True)
class LogKTable:
    titrant: str
    pH: tuple[float, ...]
    rows: tuple[LogKRow, ...]


@dataclass(frozen=True)
class AlternativeRow:
    strategy: str
    pH: float
    buffer: str
    titrant: str
    masking: str
    indicator: str
    mode: str
    error: float | None  # after standardisation [%], as the headline
    margin: float | None
    sharpness: float | None
    hazard: str
    tradeoff: str


@dataclass(frozen=True)
class CurveRow:
    """pM at the equivalence and end points; the fraction of an interferent bound to the titrant at the end point."""

    metal: str
    pM_eq: float
    pM_ep: float | None
    cotitrated: float | None
    is_analyte: bool


@dataclass(frozen=True)
class SpeciationRow:
    label: str  # "Zn, start"
    shares: dict[str, float]  # category -> fraction of the metal


@dataclass(frozen=True)
class SafetyItem:
    name: str
    hazard: str
    cautions: tuple[str, ...]


@dataclass(frozen=True)
class ConstantRow:
    reaction: str
    log_K: float
    temperature_C: float
    ionic_strength_M: float
    medium: str
    dH_kJ_mol: float | None
    citation: str
    from_memory: bool
    note: str
    uncertainty: float | None = None  # of log_K [log10 units] (data/README.md)
    quality: str = "published"  # "published", "from memory" or "fitted to practice" (FormationConstant.quality)


@dataclass(frozen=True)
class BudgetRow:
    """One cause of the titration error: its part as simulated and after standardisation [%]."""

    key: str
    label: str
    part_percent: float
    standardised_percent: float
    within_target: bool


@dataclass(frozen=True)
class Analysis:
    """Everything a report shows (plain data), and the result itself for the figures."""

    result: SearchResult
    scenario: Scenario
    meets_criteria: bool  # False: the method shown is the closest compromise, not a procedure to follow
    budget: tuple[BudgetRow, ...]
    standardised_error_percent: float | None
    error_by_cause_percent: float | None  # the causes added by magnitude (Titration.error_by_cause_percent)
    metals: tuple[str, ...]  # analytes first, then interferents: one order for every table and figure
    method: BenchMethod | None
    criteria: tuple[Criterion, ...]
    log_K_table: LogKTable
    alternatives: tuple[AlternativeRow, ...]
    curve: tuple[CurveRow, ...]
    speciation: tuple[SpeciationRow, ...]
    categories: tuple[str, ...]
    assumptions: tuple[str, ...]
    uncorrected_constants: int  # constants with no enthalpy, kept at their own temperature
    titration_temperature_C: float  # the sample's, or the indicator's working temperature it is warmed to
    masked_by_assumption: tuple[str, ...]
    safety: tuple[SafetyItem, ...]
    constants: tuple[ConstantRow, ...]
    robustness_edges: tuple[str, ...]
    volume_name: str  # the curve's volume axis: "titrant", "back-titrant"
    volume_label: str  # its axis label
    robust_pH: tuple[float, float] | None
    robust_dose: dict[str, tuple[float, float]]
    pH_drift: float | None
    mass_balance_error: float | None
    curve_points: int
    scenario_text: str
    comparison: ComparisonTable | None = None  # the scenario's listed methods beside the recommendation
    listed_safety: tuple[SafetyItem, ...] = ()  # cautions for the listed methods' reagents the recommendation lacks
    search_stats: SearchStats | None = None  # how the search went (None where the search did not count)
    document: MethodDocument | None = None  # the method as a laboratory method document (the SOP formats)


def metal_order(scenario: Scenario) -> tuple[str, ...]:
    s = scenario.sample
    return tuple(s.analyte) + tuple(m for m in s.metals if m not in s.analyte)


def _conditions(scenario: Scenario, method: Method | None) -> tuple[Conditions, dict[str, float]]:
    """The side-reaction picture's conditions and alkali ions for ``method`` (:func:`optimiser.medium.side_reactions`);
    without a method, the handbook tables' ionic strength and no alkali ions."""
    if method is None:
        return Conditions(TABLE_IONIC_STRENGTH_M, scenario.sample.temperature_C), {}
    return side_reactions(scenario.sample, method)


def analyte_feasibility(scenario: Scenario, method: Method) -> float:
    """log(c K') of the analyte, the weakest member of an analyte group (all of it must titrate).

    c is the analyte's concentration in the aliquot as pipetted (not diluted to the end point), K' the conditional
    constant at the method's pH with its buffer and masking ligands: the same term the selectivity margin starts
    from, so that the feasibility shown and the margin shown share one definition.
    """
    s = scenario.sample
    ligands = method.ligand_totals()
    cond, alkali = _conditions(scenario, method)
    return min(float(feasibility(conditional_constant(a, method.titrant, method.pH, ligands, cond, alkali)
                                 .log_K_conditional, s.metals[a])) for a in s.analyte)


def criteria(scenario: Scenario, e: Evaluation, t: Titration) -> tuple[Criterion, ...]:
    """The criteria a method is judged by, the value this method reaches and whether it meets each."""
    method, ind = t.method, t.method.indicator_info
    feas = analyte_feasibility(scenario, method)
    target = scenario.targets.max_error_percent
    return (
        Criterion("Feasibility log(c K') of the analyte (Ringbom's error formula at dpM +/- 0.2 for the target; c in the "
                  "aliquot before titration)", f">= {feasible_log_cK(target):.2f} (for {_fmt(target)} %)", _fmt(feas),
                  feas >= feasible_log_cK(target)),
        Criterion("Selectivity margin delta log(cK') over the strongest interferent left in solution (same c)",
                  f">= 5 for about 0.3 %, >= {MARGIN_NEEDED:g} for about 1 % (common practice)",
                  "no interferent left in solution" if e.margin is None else _fmt(e.margin),
                  e.margin is None or e.margin >= MARGIN_NEEDED),
        Criterion("Predicted titration error after standardisation (against the analyte, same method)",
                  f"|error| <= {_fmt(target)} %", _signed(t.standardised_error_percent) + " %",
                  t.standardised_error_percent is not None and abs(t.standardised_error_percent) <= target),
        Criterion("Every part of the error budget on its own, after standardisation (common practice: biases must "
                  "not cancel)", f"|part| <= {_fmt(target)} %", _largest_part(t),
                  all(abs(v) <= target for v in t.standardised_budget.values())),
        Criterion("Analyte not yet bound at the end point", f"<= {_fmt(target)} %",
                  _fmt(t.analyte_unbound_percent) + " %" if t.budget else "-",
                  bool(t.budget) and t.analyte_unbound_percent <= target),
        Criterion("Share of each interferent titrated at the end point (our own threshold, where its part exceeds "
                  "a tenth of the target)", f"<= {100 * COTITRATED_SHARE_MAX:g} %",
                  ", ".join(f"{m} {share_percent(100 * v)} %" for m, v in t.cotitrated.items()) or "no interferent",
                  not [m for m, v in t.cotitrated.items()
                       if v > COTITRATED_SHARE_MAX and abs(t.budget.get(f"cotitration:{m}", 0.0)) > 0.1 * target]),
        Criterion("pH held up to the end point (pH free, buffer capacity)", f"|drift| <= {PH_DRIFT_MAX:g}",
                  _signed(t.pH_drift), t.pH_drift is None or abs(t.pH_drift) <= PH_DRIFT_MAX),
        Criterion("End-point sharpness (10-90 % turned; our own threshold, calibrated on published methods)",
                  f"<= {READABLE_DROPS:g} drops", f"{_fmt(t.sharpness_mL)} mL ({_fmt(t.sharpness_drops, 2)} drops)",
                  t.sharpness_mL is not None and t.sharpness_mL <= READABLE_DROPS * DROP_mL),
        Criterion("The indicator's colour changes", "two different colours", " to ".join(t.colour_change),
                  t.colour_change[0] != t.colour_change[1]),
        Criterion(f"{ind.name} changes colour at this pH", f"pH {ind.usable_pH[0]:g}-{ind.usable_pH[1]:g}",
                  f"pH {method.pH:.2f}", t.indicator_usable),
        Criterion("Indicator not blocked", "blocking metals masked or absent", ", ".join(t.blocked_by) or "none",
                  not t.blocked_by),
        Criterion("Titre within the burette", f"<= {_fmt(scenario.burette_mL)} mL", f"{_fmt(t.titre_mL, 4)} mL",
                  t.titre_mL <= scenario.burette_mL),
    )


def _largest_part(t: Titration) -> str:
    if t.largest_part is None:
        return "-"
    key, part = t.largest_part
    return f"largest: {budget_label(key)} {_signed(part)} %"


def _fmt(x: float | None, sig: int = 3) -> str:
    if x is None or not math.isfinite(x):
        return "-"
    if abs(x) < 1e-9:
        return "0"
    return f"{x:.{sig}g}" if abs(x) < 10 ** sig else f"{x:.0f}"


def _signed(x: float | None) -> str:
    return "-" if x is None else ("+" if x > 0 else "") + _fmt(x)


def log_K_table(result: SearchResult) -> LogKTable:
    """log K' of every metal at a few pH values and at the method's pH, with the method's ligands."""
    sc, t = result.scenario, result.recommended_titration
    method = t.method if t is not None else None
    pHs = tuple(sorted(set(TABLE_PH) | ({round(method.pH, 2)} if method else set())))
    titrant = method.titrant if method else sc.search.titrants[0]  # as the search's log K' curves
    ligands = method.ligand_totals() if method else {}
    rows = []
    cond, alkali = _conditions(sc, method)
    for metal in metal_order(sc):
        try:
            vals = tuple(conditional_constant(metal, titrant, pHs, ligands, cond, alkali).log_K_conditional.tolist())
        except MissingConstantError:
            vals = (None,) * len(pHs)
        rows.append(LogKRow(metal, "analyte" if metal in sc.sample.analyte else "interferent", sc.sample.metals[metal] * 1000,
                            vals))
    return LogKTable(titrant, pHs, tuple(rows))


def _difference_in_figures(e: Evaluation, rec: Evaluation) -> list[str]:
    parts = []
    e_err, rec_err = e.standardised_error_percent, rec.standardised_error_percent  # as the table shows them
    if e_err is not None and rec_err is not None:
        d = abs(e_err) - abs(rec_err)
        parts.append(f"{'smaller' if d < 0 else 'larger'} error by {abs(d):.2g} %")
    if e.margin is not None and rec.margin is not None and abs(e.margin - rec.margin) > 0.05:
        parts.append(f"margin {'+' if e.margin > rec.margin else ''}{e.margin - rec.margin:.1f} log units")
    if e.sharpness_mL is not None and rec.sharpness_mL is not None and abs(e.sharpness_mL - rec.sharpness_mL) > 0.005:
        parts.append(f"{'sharper' if e.sharpness_mL < rec.sharpness_mL else 'more gradual'} end point")
    return parts


def _difference_in_bench(e: Evaluation, rec: Evaluation) -> list[str]:
    parts = []
    if e.hazard != rec.hazard:
        parts.append(f"hazard {HAZARD_NAMES[e.hazard]} instead of {HAZARD_NAMES[rec.hazard]}")
    extra = len(e.candidate.masking) - len(rec.candidate.masking)
    if extra:
        n = abs(extra)
        parts.append(f"{'one' if n == 1 else 'two' if n == 2 else n} {'more' if extra > 0 else 'fewer'} masking "
                     f"agent{'' if n == 1 else 's'}")
    if e.violations:
        parts.append("not feasible: " + "; ".join(e.violations))
    return parts


def tradeoff(e: Evaluation, rec: Evaluation | None) -> str:
    """What an alternative gains and costs against the recommendation, in a few words."""
    if rec is None:
        return "; ".join(e.violations) or "feasible"
    if e.candidate == rec.candidate:
        return "the recommendation"
    return "; ".join(_difference_in_figures(e, rec) + _difference_in_bench(e, rec)) or "similar"


def _mode_text(candidate: Any) -> str:
    s = strategy(candidate.mode)
    variant = s.variant(candidate)
    return s.id + (f" ({variant})" if variant else "")


def alternatives(result: SearchResult) -> tuple[AlternativeRow, ...]:
    """The best few Pareto members of each strategy, with what each gains and costs."""
    rec = result.recommended
    by_strategy: dict[str, list[Evaluation]] = {}
    for a in result.front:
        by_strategy.setdefault(a.strategy, []).append(a.evaluation)
    cat = catalogue()
    rows = []
    for strat, evals in sorted(by_strategy.items()):
        for e in sorted(evals, key=lambda e: e.F)[:ALTERNATIVES_PER_STRATEGY]:
            if rec is not None and e.candidate == rec.candidate:
                e = rec  # scored again on the finer curve: the same numbers as the headline
            c = e.candidate
            rows.append(AlternativeRow(
                strategy=strat, pH=c.pH, buffer=short_name(cat.buffer(c.buffer).name), titrant=c.titrant,
                masking=", ".join(f"{short_name(cat.masking_agent(a).name)} {d * 1000:.3g} mmol/L"
                                  for a, d in (e.titration.method.masking if e.titration else c.masking)),
                indicator=short_name(cat.indicator(c.indicator).name),
                mode=_mode_text(e.titration.method if e.titration else c), error=e.standardised_error_percent,
                margin=e.margin, sharpness=e.sharpness_mL, hazard=HAZARD_NAMES[e.hazard], tradeoff=tradeoff(e, rec)))
    return tuple(rows)


def curve_rows(scenario: Scenario, t: Titration) -> tuple[CurveRow, ...]:
    return tuple(CurveRow(m, v, t.pM_ep.get(m), t.cotitrated.get(m), m in scenario.sample.analyte) for m, v in t.pM_eq.items())


def speciation_rows(scenario: Scenario, t: Titration) -> tuple[SpeciationRow, ...]:
    """Where each metal is at the start and at the end point, analytes first."""
    rows = []
    for when, spec in (("start", t.speciation_start), ("end point", t.speciation_end)):
        rows += [SpeciationRow(f"{m}, {when}", dict(spec[m])) for m in metal_order(scenario) if m in spec]
    return tuple(rows)


def safety(method: Method | None, bench: BenchMethod | None = None) -> tuple[SafetyItem, ...]:
    """Each reagent's hazard class and the cautions its data entry gives, the hazards of its stock solution (a
    flammable solvent, a corrosive concentrate), a heating step, and the rules on combinations of reagents (the
    report adds that these defer to the safety data sheet, local regulations and the safety officer).

    Raises
    ------
    DataError
        Where two of the cautions contradict each other (``safety_contradictions`` in reagents.yaml).
    """
    if method is None:
        return ()
    reagents = [method.buffer_info, *method.masking_agents, method.titrant_info]
    items = [SafetyItem(r.name, HAZARD_NAMES[r.hazard], tuple(r.cautions)) for r in reagents]
    if bench is not None:
        for s in bench.stocks:
            if s.hazards:
                items.append(SafetyItem(f"Stock: {s.name}", ", ".join(s.hazards), tuple(HAZARD_CAUTIONS[h] for h in s.hazards)))
        if bench.heated:
            items.append(SafetyItem("Heating step", "heating", (HEATING_CAUTION,)))
    ids = [method.buffer, method.titrant, method.indicator, *(a for a, _ in method.masking)]
    items += [SafetyItem(rule.name, HAZARD_NAMES[rule.hazard], tuple(rule.cautions))
              for rule in catalogue().safety_rules_for(ids)]  # rules on combinations of reagents (reagents.yaml)
    # what the strategy adds (a second step's buffer, a demasking agent)
    items += [SafetyItem(name, HAZARD_NAMES[h], tuple(c)) for name, h, c in method.strategy.reagent_cautions(method)]
    conflicts = catalogue().safety_conflicts(c for item in items for c in item.cautions)
    if conflicts:
        raise DataError("contradicting safety instructions for one method: "
                        + "; ".join(f"{name}: {a!r} against {b!r}" for name, a, b in conflicts))
    return tuple(items)


def listed_safety(result: SearchResult, shown: tuple[SafetyItem, ...]) -> tuple[SafetyItem, ...]:
    """The cautions of the listed methods' reagents (and combinations) that ``shown`` does not already give."""
    seen = {item.name for item in shown}
    out = []
    for o in getattr(result, "listed", ()):
        for item in safety(o.evaluation.candidate.method(result.scenario)):
            if item.name not in seen:
                seen.add(item.name)
                out.append(item)
    return tuple(out)


def _figure_constants(scenario: Scenario, t: Titration) -> list:
    """The constants the log K' figure and table rely on for every metal of the sample (its complexes with the
    titrant, its hydrolysis, its complexes with the method's ligands, the ligands' protonation), including metals
    that the equilibrium left out (masked by an assumption, reduced)."""
    db = database()
    m = t.method
    ligands = [m.titrant, *m.ligand_totals()]
    out = [k for lig in ligands for k in db.protonation.get(lig, ())]
    for metal in scenario.sample.metals:
        out += list(db.hydrolysis.get(metal, ()))
        for lig in ligands:
            out += list(db.complexes.get((metal, lig), ()))
    return out


def constants_table(t: Titration | None, temperature_C: float, scenario: Scenario | None = None) -> tuple[ConstantRow, ...]:
    """Every constant the recommended curve used and every constant the log K' figure and table rely on (once per
    species), with its conditions and full citation."""
    if t is None:
        return ()
    db = database()
    seen, rows = set(), []
    for k in [*t.constants_used, *(_figure_constants(scenario, t) if scenario is not None else ())]:
        if k.species in seen:
            continue
        seen.add(k.species)
        note = k.note
        if k.dH_kJ_mol is None and abs(k.temperature_C - temperature_C) > 1e-9:
            note = (note + "; " if note else "") + f"no enthalpy: kept at its {k.temperature_C:g} degC value"
        rows.append(ConstantRow(k.reaction, k.log_K, k.temperature_C, k.ionic_strength_M, k.medium, k.dH_kJ_mol,
                                db.references[k.ref]["citation"], k.from_memory, note, k.uncertainty, k.quality))
    return tuple(rows)


def _ends(lo: float, hi: float, grid_lo: float, grid_hi: float, close) -> list[str]:
    return [name for name, v, g in (("low", lo, grid_lo), ("high", hi, grid_hi)) if close(v, g)]


def robustness_edges(result: SearchResult) -> tuple[str, ...]:
    """Which ends of the robustness windows are the scan's own limits (the true window is wider there)."""
    out = []
    if result.robust_pH and result.robustness_pH_scan is not None:
        grid = result.robustness_pH_scan[0]
        ends = _ends(*result.robust_pH, grid[0], grid[-1], lambda v, g: abs(v - g) < 1e-9)
        if ends:
            out.append(f"the pH window reaches the end of the scan (one pH unit, within the buffer's working range) at its "
                       f"{' and '.join(ends)} side")
    for a, (lo, hi) in result.robust_dose.items():
        dose = result.robustness_dose_scan[a][0]
        ends = _ends(lo, hi, dose[0], dose[-1], lambda v, g: abs(v / g - 1) < 1e-9)
        if ends:
            out.append(f"the {a} window reaches the practical dose range at its {' and '.join(ends)} end")
    return tuple(out)


def budget_rows(scenario: Scenario, t: Titration | None) -> tuple[BudgetRow, ...]:
    """The error budget of the recommended titration, largest part after standardisation first; parts that are
    below 0.0005 % both before and after standardisation are left out."""
    if t is None or not t.budget:
        return ()
    target = scenario.targets.max_error_percent
    std = t.standardised_budget
    rows = [BudgetRow(k, budget_label(k), t.budget.get(k, 0.0), std.get(k, 0.0), abs(std.get(k, 0.0)) <= target)
            for k in dict.fromkeys([*t.budget, *std])
            if max(abs(t.budget.get(k, 0.0)), abs(std.get(k, 0.0))) >= 5e-4]
    return tuple(sorted(rows, key=lambda r: -abs(r.standardised_percent)))


def _titration_facts(sc: Scenario, t: Titration | None) -> dict[str, Any]:
    """The parts of the analysis read from the recommended titration (empty where there is none)."""
    if t is None:
        return {"curve": (), "speciation": (), "assumptions": (), "uncorrected_constants": 0, "masked_by_assumption": (),
                "volume_name": "titrant", "volume_label": "volume / mL", "pH_drift": None, "mass_balance_error": None,
                "curve_points": 0, "titration_temperature_C": sc.sample.temperature_C}
    T = t.sample.temperature_C  # the temperature it is titrated at (as_titrated)
    return {"titration_temperature_C": T,
        "curve": curve_rows(sc, t), "speciation": speciation_rows(sc, t), "assumptions": tuple(t.assumptions),
        "uncorrected_constants": sum(1 for k in t.constants_used if k.dH_kJ_mol is None and abs(k.temperature_C - T) > 1e-9),
        "masked_by_assumption": tuple(sorted(t.masked_by_assumption)), "volume_name": t.method.strategy.volume_name,
        "volume_label": t.method.strategy.volume_label(t.method), "pH_drift": t.pH_drift,
        "mass_balance_error": t.mass_balance_error, "curve_points": len(t.volume_mL)}


class _EchoDumper(yaml.SafeDumper):
    """Writes text that spans lines as a literal block (``|``) and never folds a long line, so the echoed scenario
    reads as it was written (no quoted text broken over lines, no stray closing quote)."""


def _text(dumper: yaml.SafeDumper, value: str) -> yaml.ScalarNode:
    block = "\n" in value.rstrip("\n") or (value.endswith("\n") and value.strip() != "")
    return dumper.represent_scalar("tag:yaml.org,2002:str", value, style="|" if block else None)


def _list(dumper: yaml.SafeDumper, value: list) -> yaml.SequenceNode:
    flow = all(not isinstance(v, (list, dict)) for v in value)  # [7.0, 13.0] on one line, as scenarios write it
    return dumper.represent_sequence("tag:yaml.org,2002:seq", value, flow_style=flow)


_EchoDumper.add_representer(str, _text)
_EchoDumper.add_representer(list, _list)


def scenario_yaml(as_read: Any) -> str:
    """The scenario as read, written back as YAML for the report.

    >>> print(scenario_yaml({"name": "w", "description": "Two words,\\nand a line.\\n"}), end="")
    name: w
    description: |
      Two words,
      and a line.
    """
    return yaml.dump(dict(as_read), Dumper=_EchoDumper, sort_keys=False, allow_unicode=True, width=10_000)


def analyse(result: SearchResult) -> Analysis:
    """Everything the report shows, computed once from the search result."""
    sc, e, t = result.scenario, result.recommended, result.recommended_titration
    has_method = e is not None and t is not None
    bench = bench_method(sc, t.method, t, e.margin) if has_method else None
    cautions = safety(t.method if has_method else None, bench)
    constants = constants_table(t, t.sample.temperature_C if t is not None else sc.sample.temperature_C, sc)
    document = (method_document(sc, t, bench, result.meets_criteria, cautions, t.method.indicator_info.sources,
                                len(constants)) if has_method else None)
    return Analysis(
        result=result, scenario=sc, meets_criteria=result.meets_criteria, budget=budget_rows(sc, t),
        standardised_error_percent=t.standardised_error_percent if t is not None else None,
        error_by_cause_percent=t.error_by_cause_percent if t is not None else None, metals=metal_order(sc),
        method=bench, document=document,
        criteria=criteria(sc, e, t) if has_method else (), log_K_table=log_K_table(result),
        alternatives=alternatives(result), categories=CATEGORIES, safety=cautions,
        constants=constants, robustness_edges=robustness_edges(result),
        robust_pH=tuple(result.robust_pH) if result.robust_pH else None, robust_dose=dict(result.robust_dose),
        scenario_text=scenario_yaml(sc.as_read),
        comparison=comparison_table(result), listed_safety=listed_safety(result, cautions),
        search_stats=getattr(result, "stats", None),
        **_titration_facts(sc, t))


__all__ = [
    "AlternativeRow",
    "Analysis",
    "BudgetRow",
    "budget_rows",
    "ConstantRow",
    "Criterion",
    "CurveRow",
    "LogKRow",
    "LogKTable",
    "SafetyItem",
    "SpeciationRow",
    "alternatives",
    "analyse",
    "analyte_feasibility",
    "constants_table",
    "criteria",
    "log_K_table",
    "metal_order",
    "robustness_edges",
    "safety",
    "tradeoff",
]
