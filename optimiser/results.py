"""The search result as plain data: the bench procedure, the JSON document, and atomic file writing.

The report and the JSON writer both read :func:`summary`, so the numbers an analyst reads in the report are
the numbers in the JSON file.
"""
from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from .conditional import Conditions, ligand_fractions
from .reagents import HAZARD_NAMES, catalogue, molar_mass
from .search import Evaluation, SearchResult, strategy_of
from .titration import DROP_mL, Titration
from .units import molar_mass_of_metal

SCHEMA_VERSION = 1


def _r(x: float | None, nd: int = 4) -> float | None:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return None
    return float(round(float(x), nd))


def buffer_recipe(buffer_id: str, total_M: float, pH: float, V0_mL: float, I: float, T: float,
                  extra_OH_mmol: float = 0.0) -> list[str]:
    """How to make up the buffer for one aliquot (amounts per aliquot, then adjust with a pH meter)."""
    cat = catalogue()
    b = cat.buffer(buffer_id)
    raw = b.raw
    steps = []
    if b.ligand:
        fr = ligand_fractions(b.ligand, pH, Conditions(I, T))
        base_frac = float(fr[0])  # fully deprotonated form: NH3, acetate, hexamine
        n_tot = total_M * V0_mL  # mmol in the aliquot
        n_base, n_acid = n_tot * base_frac, n_tot * (1 - base_frac)
        if buffer_id == "ammonia":
            m_acid = n_acid * molar_mass(raw["acid_formula"]) / 1000
            v_base = n_base / raw["base_solution"]["molarity_M"]
            steps.append(f"{n_acid:.3g} mmol NH4Cl ({m_acid * 1000:.0f} mg) and {v_base:.2f} mL {raw['base_solution']['name']} "
                         f"({n_base:.3g} mmol NH3): total ammonia {total_M:.3g} mol/L in the aliquot")
        elif buffer_id == "acetate":
            m_base = n_base * molar_mass(raw["base_formula"]) / 1000
            v_acid = n_acid / raw["acid_solution"]["molarity_M"]
            steps.append(f"{m_base * 1000:.0f} mg sodium acetate trihydrate ({n_base:.3g} mmol) and {v_acid:.3f} mL "
                         f"{raw['acid_solution']['name']} ({n_acid:.3g} mmol): total acetate {total_M:.3g} mol/L")
        elif buffer_id == "hexamine":
            m = n_tot * molar_mass(raw["base_formula"]) / 1000
            v_acid = n_acid / raw["acid_solution"]["molarity_M"]
            steps.append(f"{m * 1000:.0f} mg hexamine ({n_tot:.3g} mmol) and {v_acid:.2f} mL {raw['acid_solution']['name']}: "
                         f"total hexamine {total_M:.3g} mol/L")
    elif buffer_id == "NaOH":
        n_oh = (V0_mL * 10 ** (pH - 14.0) / 0.78) + extra_OH_mmol
        steps.append(f"about {n_oh / raw['base_solution']['molarity_M']:.2f} mL {raw['base_solution']['name']} "
                     f"({n_oh:.3g} mmol OH-, of which {extra_OH_mmol:.3g} mmol go into hydroxide precipitates)")
    elif buffer_id == "nitric_acid":
        n_h = V0_mL * 10 ** (-pH) / 0.78
        steps.append(f"about {n_h / raw['acid_solution']['molarity_M']:.2f} mL {raw['acid_solution']['name']} "
                     f"(or NaOH if the sample is more acid)")
    steps.append(f"adjust to pH {pH:.1f} with a calibrated pH meter")
    return steps


def method_summary(result: SearchResult, e: Evaluation, t: Titration) -> dict[str, Any]:
    """The recommended method as a bench procedure and the figures of merit (plain data)."""
    cat = catalogue()
    sc = result.scenario
    c = e.candidate
    s = sc.sample
    V0 = s.volume_mL
    tit = cat.titrant(c.titrant)
    ind = cat.indicator(c.indicator)
    masking = []
    for a, conc in c.masking:
        agent = cat.masking_agent(a)
        mmol = conc * V0
        grams = mmol * agent.molar_mass / 1000
        amount = f"{mmol:.3g} mmol = {grams * 1000:.1f} mg {agent.salt}"
        if agent.density_g_mL:
            amount += f" ({grams / agent.density_g_mL * 1000:.0f} uL)"
        masking.append({"agent": a, "name": agent.name, "conc_M": conc, "mmol_per_aliquot": mmol, "grams_per_aliquot": grams,
                        "amount": amount})
    oh_extra = 0.0
    if c.buffer == "NaOH":
        for metal, sp in t.speciation_start.items():
            if sp.get("solid", 0) > 0:
                oh_extra += 2 * sp["solid"] * s.metals.get(metal, 0.0) * V0
    buf = cat.buffer(c.buffer)
    total_buf = 10 ** c.log_buffer if buf.ligand else 0.0
    recipe = buffer_recipe(c.buffer, total_buf, c.pH, V0, s.ionic_strength_M, s.temperature_C, oh_extra)
    cT = sc.titrant_conc_M
    if c.mode == "back":
        formula = (f"n({sc.analyte_label}) [mmol] = c(titrant) x V(titrant) - c({c.back_metal}) x V({c.back_metal}); "
                   f"c [mmol/L] = n / {V0:g} mL x 1000")
    else:
        formula = f"c({sc.analyte_label}) [mmol/L] = {cT:g} mol/L x V(titrant) [mL] / {V0:g} mL x 1000"
    if sc.report_as:
        try:
            M = molar_mass(sc.report_as)
            formula += f"; as {sc.report_as}: mg/L = c [mmol/L] x {M:.2f}"
        except (ValueError, KeyError):
            pass
    elif len(s.analyte) == 1:
        formula += f"; mg/L {s.analyte[0]} = c [mmol/L] x {molar_mass_of_metal(s.analyte[0]):.3f}"
    procedure = [f"Pipette {V0:g} mL of sample into a titration flask."]
    if c.buffer == "NaOH" and t.precipitates_start:
        procedure.append(f"Add about 90 % of the expected titrant ({0.9 * (t.endpoint_mL or t.equivalence_mL):.1f} mL) before "
                         f"raising the pH, so that {', '.join(t.precipitates_start)} does not carry down the analyte.")
    heated = c.mode == "back" and any("heating" in a for a in t.assumptions)
    if heated:  # the slow analyte reacts with the excess in the still acidic sample, before its hydroxide can form
        procedure.append(f"Add {t.excess_mL:.2f} mL of {cT:g} M {c.titrant} (an excess) to the sample before it is "
                         "buffered (it should be acidic, about pH 3); boil gently for 3-5 minutes and cool (common practice).")
    for m in masking:
        procedure.append(f"Add {m['amount']} ({m['name']}; {m['conc_M'] * 1000:.3g} mmol/L in the aliquot).")
    procedure.append(f"Buffer ({buf.name}): " + "; ".join(recipe) + ".")
    if c.mode == "back":
        procedure.append(("" if heated else f"Add {t.excess_mL:.2f} mL of {cT:g} M {c.titrant} (an excess); ")
                         + f"{'Add' if heated else 'add'} {ind.name} ({ind.dose}) and titrate with {cT:g} M "
                         f"{c.back_metal} standard from {t.colour_change[0]} to {t.colour_change[1]}.")
    else:
        procedure.append(f"Add {ind.name} ({ind.dose}) and titrate with {cT:g} M {c.titrant} from {t.colour_change[0]} "
                         f"to {t.colour_change[1]}.")
    procedure.append("Calculate: " + formula + ".")
    return {
        "aliquot_mL": V0, "pH": c.pH, "buffer": c.buffer, "buffer_name": buf.name, "buffer_total_M": total_buf,
        "buffer_recipe": recipe, "titrant": c.titrant, "titrant_name": tit.name, "titrant_conc_M": cT,
        "titrant_salt": tit.salt, "titrant_g_per_L": cT * tit.molar_mass, "masking": masking, "indicator": c.indicator,
        "indicator_name": ind.name, "indicator_dose": ind.dose, "mode": c.mode,
        "back_metal": c.back_metal if c.mode == "back" else None, "excess_mL": t.excess_mL,
        "endpoint_mL": t.endpoint_mL, "equivalence_mL": t.equivalence_mL, "colour_change": list(t.colour_change),
        "predicted_error_percent": t.error_percent, "selectivity_margin_log": e.margin, "endpoint_sharpness_mL": t.sharpness_mL,
        "endpoint_sharpness_drops": t.sharpness_drops, "hazard": HAZARD_NAMES[e.hazard], "hazard_level": e.hazard,
        "complexity": e.F[result.objectives.index("complexity")] if "complexity" in result.objectives else None,
        "precipitates": sorted(set(t.precipitates_start) | set(t.precipitates_end)),
        "robust_pH": list(result.robust_pH) if result.robust_pH else None,
        "robust_dose": {k: list(v) for k, v in result.robust_dose.items()}, "formula": formula, "procedure": procedure,
        "warnings": list(t.warnings), "assumptions": list(t.assumptions), "pH_drift": t.pH_drift,
        "cotitrated": t.cotitrated, "strategy": strategy_of(e), "indicator_blank_percent": t.indicator_blank_percent,
    }


def _method_json(result: SearchResult, e: Evaluation) -> dict[str, Any]:
    c = e.candidate
    t = e.titration
    return {
        "pH": _r(c.pH, 3), "buffer": c.buffer, "titrant": c.titrant, "titrant_conc_M": result.scenario.titrant_conc_M,
        "masking": [{"agent": a, "conc_M": _r(d, 6)} for a, d in c.masking], "indicator": c.indicator, "mode": c.mode,
        "back_metal": c.back_metal if c.mode == "back" else None,
        "predicted_error_percent": _r(e.error_percent), "selectivity_margin_log": _r(e.margin, 3),
        "endpoint_sharpness_mL": _r(e.sharpness_mL), "hazard": HAZARD_NAMES[e.hazard], "strategy": strategy_of(e),
        "precipitates": sorted(set(t.precipitates_start) | set(t.precipitates_end)) if t is not None else [],
        "warnings": list(t.warnings) if t is not None else list(e.violations), "feasible": e.feasible,
        "violations": list(e.violations),
    }


def to_json(result: SearchResult) -> dict[str, Any]:
    """The JSON document of a run (stable keys; documented in the README)."""
    sc = result.scenario
    rec = None
    if result.recommended is not None:
        rec = _method_json(result, result.recommended)
        rec["robust_pH"] = [_r(x, 3) for x in result.robust_pH] if result.robust_pH else None
        rec["robust_dose_M"] = {k: [_r(v[0], 6), _r(v[1], 6)] for k, v in result.robust_dose.items()}
        t = result.recommended_titration
        rec["endpoint_mL"] = _r(t.endpoint_mL)
        rec["equivalence_mL"] = _r(t.equivalence_mL)
        rec["colour_change"] = list(t.colour_change)
        rec["cotitrated"] = {k: _r(v, 6) for k, v in t.cotitrated.items()}
        rec["indicator_blank_percent"] = _r(t.indicator_blank_percent)
    alts = []
    for a in result.front:
        if result.recommended is not None and a.evaluation.candidate == result.recommended.candidate:
            continue
        alts.append(_method_json(result, a.evaluation))
    cc = result.conditional
    return {
        "schema": SCHEMA_VERSION, "scenario": sc.name, "analyte": list(sc.sample.analyte), "seed": result.seed,
        "evaluations": result.evaluations, "wall_time_s": _r(result.wall_time_s, 2), "objectives": list(result.objectives),
        "recommended": rec, "rule": result.rule, "alternatives": alts,
        "conditional_constants": {"titrant": result.recommended.candidate.titrant if result.recommended else "EDTA",
                                  "pH": [float(x) for x in cc["pH"]],
                                  **{m: [_r(v, 3) for v in cc[m]] for m in sc.sample.metals}},
        "notes": list(result.notes),
    }


def titration_json(t: Titration, every: int = 1) -> dict[str, Any]:
    """The JSON object of ``optimiser simulate --json``."""
    V = t.volume_mL
    return {
        "equivalence": {"volume_mL": _r(t.equivalence_mL), "pM": {m: _r(v) for m, v in t.pM_eq.items()}},
        "endpoint": {"volume_mL": _r(t.endpoint_mL), "pM": {m: _r(v) for m, v in t.pM_ep.items()}},
        "error_percent": _r(t.error_percent), "indicator_blank_percent": _r(t.indicator_blank_percent),
        "sharpness_mL": _r(t.sharpness_mL),
        "sharpness_drops": _r(t.sharpness_drops, 1), "too_gradual": t.too_gradual,
        "cotitrated": {m: _r(v, 6) for m, v in t.cotitrated.items()},
        "precipitates": sorted(set(t.precipitates_start) | set(t.precipitates_end)),
        "precipitates_start": list(t.precipitates_start), "precipitates_endpoint": list(t.precipitates_end),
        "blocked_by": list(t.blocked_by), "colour_change": list(t.colour_change), "mode": t.method.mode,
        "excess_mL": _r(t.excess_mL), "pH_drift": _r(t.pH_drift), "drop_mL": DROP_mL,
        "warnings": list(t.warnings), "assumptions": list(t.assumptions),
        "mass_balance_error": float(f"{t.mass_balance_error:.2e}"),
        "curve": {"volume_mL": [_r(v) for v in V[::every]],
                  "pM": {m: [_r(v) for v in arr[::every]] for m, arr in t.pM.items()},
                  "indicator_turned": [_r(v) for v in t.turned[::every]]},
    }


def write_atomic(path: Path, text: str) -> None:
    """Write a file through a temporary file and a rename: never a half-written or broken file in place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def dumps(obj: Any) -> str:
    def default(o):
        if isinstance(o, np.generic):
            return o.item()
        if isinstance(o, np.ndarray):
            return o.tolist()
        raise TypeError(f"cannot write {type(o).__name__} as JSON")
    return json.dumps(obj, indent=2, default=default, allow_nan=False) + "\n"
