"""The method report: one self-contained HTML page (inline SVG figures and styles, no network)."""
from __future__ import annotations

import datetime as _dt
import math
from importlib import resources
from pathlib import Path

import jinja2
import yaml

from .. import __version__
from ..conditional import Conditions, conditional_constant, feasibility
from ..constants import database
from ..errors import MissingConstantError
from ..reagents import HAZARD_NAMES, catalogue
from ..results import method_summary, write_atomic
from ..search import SearchResult
from ..titration import GRADUAL_DROPS
from . import figures

SECTIONS = ("summary", "why", "tradeoffs", "curve", "speciation", "robustness", "assumptions", "safety", "constants")
FIGURES = ("fig-conditional", "fig-pareto", "fig-curve", "fig-speciation", "fig-robustness")


def fmt(x, sig: int = 3) -> str:
    """A number with ``sig`` significant figures for the report ('-' when missing)."""
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    x = float(x)
    if abs(x) < 1e-9:
        return "0"
    return f"{x:.{sig}g}" if abs(x) < 10 ** sig else f"{x:.0f}"


def signed(x, sig: int = 3) -> str:
    return "-" if x is None else ("+" if x > 0 else "") + fmt(x, sig)


def range_text(r) -> str:
    return "none within the target" if not r else f"{r[0]:.2f} to {r[1]:.2f}"


def _edges(result: SearchResult) -> list[str]:
    """Which ends of the robustness windows are the scan's own limits (the true window is wider there)."""
    out = []
    if result.robust_pH and result.robustness_pH_scan is not None:
        grid = result.robustness_pH_scan[0]
        ends = [name for name, v, g in (("low", result.robust_pH[0], grid[0]), ("high", result.robust_pH[1], grid[-1])) if abs(v - g) < 1e-9]
        if ends:
            out.append(f"the pH window reaches the end of the scan (one pH unit, within the buffer's working range) at its "
                       f"{' and '.join(ends)} side")
    for a, (lo, hi) in result.robust_dose.items():
        dose = result.robustness_dose_scan[a][0]
        ends = [name for name, v, g in (("low", lo, dose[0]), ("high", hi, dose[-1])) if abs(v / g - 1) < 1e-9]
        if ends:
            out.append(f"the {a} window reaches the practical dose range at its {' and '.join(ends)} end")
    return out


def _env() -> jinja2.Environment:
    loader = jinja2.FunctionLoader(lambda name: resources.files("optimiser.report").joinpath(name).read_text(encoding="utf-8"))
    env = jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)
    env.globals.update(fmt=fmt, signed=signed, range_text=range_text)
    return env


def _criteria(result: SearchResult, m: dict) -> list[dict]:
    sc = result.scenario
    t = result.recommended_titration
    e = result.recommended
    c = e.candidate
    cat = catalogue()
    cond = Conditions(sc.sample.ionic_strength_M, sc.sample.temperature_C)
    ligands = c.ligand_totals()
    V0 = sc.sample.volume_mL
    V_ep = t.endpoint_mL or t.equivalence_mL
    feas = []
    for a in sc.sample.analyte:
        c_ep = sc.sample.metals[a] * V0 / (V0 + (V_ep if c.mode == "direct" else 0))
        feas.append(float(feasibility(conditional_constant(a, c.titrant, c.pH, ligands, cond).log_K_conditional, c_ep)))
    ind = cat.indicator(c.indicator)
    out = [
        {"name": "Feasibility log(c K') of the analyte (Ringbom)", "need": ">= 6 (about 0.1 % at dpM +/- 0.2)",
         "value": fmt(min(feas), 3), "met": min(feas) >= 6},
        {"name": "Selectivity margin delta log(cK') over the strongest interferent left in solution",
         "need": ">= 5 for about 0.3 %, >= 4 for about 1 % (common practice)",
         "value": "no interferent left in solution" if e.margin is None else fmt(e.margin, 3),
         "met": e.margin is None or e.margin >= 4},
        {"name": "Predicted titration error", "need": f"|error| <= {fmt(sc.targets.max_error_percent)} %",
         "value": signed(t.error_percent, 3) + " %", "met": t.error_percent is not None and abs(t.error_percent) <= sc.targets.max_error_percent},
        {"name": "End-point sharpness (10-90 % turned)", "need": f"<= {GRADUAL_DROPS:g} drops (common practice)",
         "value": f"{fmt(t.sharpness_mL, 3)} mL ({fmt(t.sharpness_drops, 2)} drops)", "met": not t.too_gradual},
        {"name": f"{ind.name} changes colour at this pH", "need": f"pH {ind.usable_pH[0]:g}-{ind.usable_pH[1]:g}",
         "value": f"pH {c.pH:.2f}", "met": t.indicator_usable},
        {"name": "Indicator not blocked", "need": "blocking metals masked or absent", "value": ", ".join(t.blocked_by) or "none",
         "met": not t.blocked_by},
        {"name": "Titre within the burette", "need": f"<= {fmt(sc.burette_mL)} mL",
         "value": f"{fmt(max(t.endpoint_mL or 0, t.excess_mL or 0), 4)} mL", "met": max(t.endpoint_mL or 0, t.excess_mL or 0) <= sc.burette_mL},
    ]
    return out


def _tradeoff(e, rec) -> str:
    if rec is None:
        return "; ".join(e.violations) or "feasible"
    if e.candidate == rec.candidate:
        return "the recommendation"
    parts = []
    if e.error_percent is not None and rec.error_percent is not None:
        d = abs(e.error_percent) - abs(rec.error_percent)
        parts.append(f"{'smaller' if d < 0 else 'larger'} error by {abs(d):.2g} %")
    if e.margin is not None and rec.margin is not None and abs(e.margin - rec.margin) > 0.05:
        parts.append(f"margin {'+' if e.margin > rec.margin else ''}{e.margin - rec.margin:.1f} log units")
    if e.sharpness_mL is not None and rec.sharpness_mL is not None and abs(e.sharpness_mL - rec.sharpness_mL) > 0.005:
        parts.append(f"{'sharper' if e.sharpness_mL < rec.sharpness_mL else 'more gradual'} end point")
    if e.hazard != rec.hazard:
        parts.append(f"hazard {HAZARD_NAMES[e.hazard]} instead of {HAZARD_NAMES[rec.hazard]}")
    extra = len(e.candidate.masking) - len(rec.candidate.masking)
    if extra:
        parts.append(f"{'one more' if extra == 1 else 'one fewer' if extra == -1 else str(extra)} masking agent")
    if e.violations:
        parts.append("not feasible: " + "; ".join(e.violations))
    return "; ".join(parts) or "similar"


def _alternatives(result: SearchResult) -> list[dict]:
    rec = result.recommended
    rows = []
    by_strategy: dict[str, list] = {}
    for a in result.front:
        by_strategy.setdefault(a.strategy, []).append(a.evaluation)
    for strat, evals in sorted(by_strategy.items()):
        for e in sorted(evals, key=lambda e: e.F)[:4]:
            c = e.candidate
            rows.append({"strategy": strat, "pH": c.pH, "buffer": c.buffer, "titrant": c.titrant,
                         "masking": ", ".join(f"{a} {d * 1000:.3g} mM" for a, d in c.masking), "indicator": c.indicator,
                         "mode": c.mode + (f" ({c.back_metal})" if c.mode == "back" else ""), "error": e.error_percent,
                         "margin": e.margin, "sharpness": e.sharpness_mL, "hazard": HAZARD_NAMES[e.hazard],
                         "tradeoff": _tradeoff(e, rec)})
    return rows


def _cc_table(result: SearchResult) -> dict:
    sc = result.scenario
    c = result.recommended.candidate if result.recommended else None
    pHs = sorted({4.0, 6.0, 8.0, 10.0, 12.0} | ({round(c.pH, 2)} if c else set()))
    cond = Conditions(sc.sample.ionic_strength_M, sc.sample.temperature_C)
    ligands = c.ligand_totals() if c is not None else {}
    rows = []
    for metal in figures.metal_order(result):
        try:
            vals = conditional_constant(metal, c.titrant if c else "EDTA", pHs, ligands, cond).log_K_conditional.tolist()
        except MissingConstantError:
            vals = [None] * len(pHs)
        rows.append({"metal": metal, "role": "analyte" if metal in sc.sample.analyte else "interferent",
                     "conc_mM": sc.sample.metals[metal] * 1000, "logk": vals})
    return {"pH": pHs, "rows": rows}


def _safety(result: SearchResult) -> list[dict]:
    cat = catalogue()
    c = result.recommended.candidate if result.recommended else None
    if c is None:
        return []
    items = [(cat.buffer(c.buffer).name, cat.buffer(c.buffer).hazard, cat.buffer(c.buffer).cautions)]
    items += [(cat.masking_agent(a).name, cat.masking_agent(a).hazard, cat.masking_agent(a).cautions) for a, _ in c.masking]
    items.append((cat.titrant(c.titrant).name, cat.titrant(c.titrant).hazard, cat.titrant(c.titrant).cautions))
    if c.buffer != "NaOH" and any(a == "cyanide" for a, _ in c.masking):
        items.append(("acid and cyanide", 4, ("Never bring an acid near a cyanide-containing solution or its waste.",)))
    return [{"name": n, "hazard": HAZARD_NAMES[h], "cautions": list(cs) or ["No special caution beyond good laboratory practice."]}
            for n, h, cs in items]


def _constants(result: SearchResult) -> list[dict]:
    db = database()
    t = result.recommended_titration
    if t is None:
        return []
    seen, rows = set(), []
    T = result.scenario.sample.temperature_C
    for k in t.constants_used:
        if k.species in seen:
            continue
        seen.add(k.species)
        note = k.note
        if k.dH_kJ_mol is None and abs(k.temperature_C - T) > 1e-9:
            note = (note + "; " if note else "") + f"no enthalpy: kept at its {k.temperature_C:g} degC value"
        rows.append({"reaction": k.reaction, "log_K": k.log_K, "temperature_C": k.temperature_C,
                     "ionic_strength_M": k.ionic_strength_M, "medium": k.medium, "dH_kJ_mol": k.dH_kJ_mol,
                     "citation": db.references[k.ref]["citation"], "from_memory": k.from_memory, "note": note})
    return rows


def render(result: SearchResult, date: str | None = None) -> str:
    """The report as one HTML string."""
    sc = result.scenario
    t = result.recommended_titration
    m = method_summary(result, result.recommended, t) if result.recommended is not None else None
    figs = {"conditional": figures.conditional_figure(result), "pareto": figures.pareto_figure(result)}
    if t is not None:
        figs.update(titration=figures.titration_figure(result), speciation=figures.speciation_figure(result),
                    robustness=figures.robustness_figure(result))
    spec_rows = []
    if t is not None:
        for when, spec in (("start", t.speciation_start), ("end point", t.speciation_end)):
            for metal in figures.metal_order(result):
                if metal in spec:
                    spec_rows.append((f"{metal}, {when}", spec[metal]))
    T = sc.sample.temperature_C
    uncorrected = [k for k in (t.constants_used if t else ()) if k.dH_kJ_mol is None and abs(k.temperature_C - T) > 1e-9]
    css = resources.files("optimiser.report").joinpath("style.css").read_text(encoding="utf-8")
    return _env().get_template("template.html.j2").render(
        sc=sc, result=result, m=m, t=t, figs=figs, css=css, criteria=_criteria(result, m) if m else [],
        alternatives=_alternatives(result), cc_table=_cc_table(result),
        cc_titrant=result.recommended.candidate.titrant if result.recommended else "EDTA",
        categories=figures.CATEGORIES, spec_rows=spec_rows, assumptions=list(t.assumptions) if t else [],
        uncorrected=uncorrected, safety=_safety(result), constants=_constants(result), edges=_edges(result),
        masked_assumed=sorted(t.masked_by_assumption) if t else [],
        scenario_text=yaml.safe_dump(dict(sc.as_read), sort_keys=False, allow_unicode=True),
        version=__version__, date=date or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"))


def safe_name(name: str) -> str:
    """A file name from a scenario name (letters, digits, - and _ only)."""
    out = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in name).strip("_")
    return out[:80] or "scenario"


def write(result: SearchResult, out_dir: Path, json_text: str, base: str | None = None) -> tuple[Path, Path]:
    """Write DIR/<name>.html and DIR/<name>.json atomically (name from the scenario unless given); returns both paths."""
    out_dir = Path(out_dir)
    base = safe_name(base or result.scenario.name)
    html_path, json_path = out_dir / f"{base}.html", out_dir / f"{base}.json"
    html = render(result)
    write_atomic(json_path, json_text)
    write_atomic(html_path, html)
    return html_path, json_path


__all__ = ["render", "write", "SECTIONS", "FIGURES", "safe_name", "fmt", "signed"]
