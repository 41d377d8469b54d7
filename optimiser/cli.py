"""The command line: a thin ``main(argv) -> int`` over the package.

Exit status: 0 on success, 2 on bad input (one line on stderr that says what is wrong and what is
allowed; no traceback), 1 when a run fails.
"""
from __future__ import annotations

import argparse
import os
import re
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import NoReturn

import numpy as np

from . import __version__, parallel
from .errors import InputError, OptimiserError, printable, quoted
from .strategies import strategy_ids

PROG = "optimiser"


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one line, exit status 2, through main's handler
        raise InputError(f"{message} (see '{self.prog} --help')")

    def format_help(self) -> str:
        """The help, with the names the data and the registries allow filled in (``{titrants}``, ``{modes}``, ...):
        read only when help is asked for, so that a plain command does not load the catalogue to parse its options."""
        names = allowed_names()
        for action in self._actions:
            if action.help and "{" in action.help:
                action.help = action.help.format(**names)
        if self.epilog and "{" in self.epilog:
            self.epilog = self.epilog.format(**names)
        return super().format_help()


def allowed_names() -> dict[str, str]:
    """Every list of names a command or a scenario accepts, from the data and the registries (comma-separated)."""
    from .constants import database
    from .objectives import OBJECTIVES
    from .reagents import HAZARD_NAMES, catalogue
    from .report import FORMATS
    cat, db = catalogue(), database()

    def join(names) -> str:
        return ", ".join(names)
    return {"metals": join(m for m, r in db.metals.items() if not r.get("internal")), "titrants": join(cat.titrants),
            "buffers": join(cat.buffers), "masking": join(cat.masking), "indicators": join(cat.indicators),
            "standards": join(cat.standards), "modes": join(strategy_ids()), "formats": join(FORMATS),
            "objectives": join(o if isinstance(o, str) else o.name for o in OBJECTIVES),
            "hazards": join(HAZARD_NAMES)}


SCENARIO_NAMES = ("names a scenario file may use (any case, or an alias the data holds): metals {metals}; titrants "
                  "{titrants}; buffers {buffers}; masking agents {masking}; indicators {indicators}; modes {modes}; "
                  "back-titration standards {standards}; max_hazard {hazards}; targets.weights {objectives}.")


# A concentration on the command line, as in a scenario's reagent concentrations: a bare number is mol/L.
CONC_HELP = "a bare number is mol/L; or with a unit: 0.1M, 10 mM, 5 g/L"


def _pair(text: str, what: str, zero_ok: bool = False) -> tuple[str, float]:
    """NAME=CONCENTRATION, the concentration within the allowed range (:func:`optimiser.units.reagent_M`)."""
    from .units import reagent_M
    if "=" not in text:
        raise InputError(f"{what} must be NAME=CONCENTRATION, e.g. NH3=0.1M; got {quoted(text)}")
    name, conc = (x.strip() for x in text.split("=", 1))
    if not name:
        raise InputError(f"{what} {quoted(text)} has no name before '='; allowed: NAME=CONCENTRATION, e.g. NH3=0.1M")
    return name, reagent_M(conc, f"{what} {printable(name, 40)}", zero_ok)


def _number(text: str, what: str, lo: float | None = None, hi: float | None = None) -> float:
    try:
        v = float(text)
    except (ValueError, OverflowError):
        raise InputError(f"{what} must be a number; got {quoted(text)}") from None
    if not np.isfinite(v) or (lo is not None and v < lo) or (hi is not None and v > hi):
        raise InputError(f"{what} must be between {lo:g} and {hi:g}; got {quoted(text)}")
    return v


def _integer(text: str, what: str, lo: int, hi: int) -> int:
    """A whole number written as one ("2.5", "1e3" and "" refused, not rounded) from ``lo`` to ``hi``."""
    t = text.strip()
    if not re.fullmatch(r"[+-]?\d{1,12}", t):
        raise InputError(f"{what} must be a whole number from {lo} to {hi}; got {quoted(text)}")
    v = int(t)
    if not lo <= v <= hi:
        raise InputError(f"{what} must be a whole number from {lo} to {hi}; got {quoted(text)}")
    return v


def _format_option(parser: argparse.ArgumentParser) -> None:
    from .report import DEFAULT_FORMAT
    parser.add_argument("--format", action="append", metavar="FORMAT",
                        help="report format: {formats} (default " + DEFAULT_FORMAT + "); several as html,md,pdf or by "
                             "repeating the option; html is the full report, md and pdf the method as a laboratory "
                             "method document; the JSON result is always written beside them")


SEED_HELP = "seed of the search, a whole number from 0 to 2**31-1 (default %(default)s): the same seed, the same result"
OUT_HELP = ("output folder (default %(default)s; created, and checked writable before the search); files are named "
            "after the scenario's name")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog=PROG, description="Method-development optimiser for selective complexometric titrations.",
                epilog=f"'{PROG} COMMAND --help' describes each command and lists the names it accepts.")
    p.add_argument("--version", action="version", version=f"{PROG} {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    c = sub.add_parser("conditional", help="log alpha and conditional constants of a metal across pH",
                       description="log alpha_Y, log alpha_M, log K and log K' of a metal with a titrant at each pH.")
    c.add_argument("metal", help="the metal: {metals} (any case or alias: Fe3+, aluminum, ...)")
    c.add_argument("--titrant", help="the titrant: {titrants}, or any ligand of the data (default: the first, EDTA)")
    c.add_argument("--pH", nargs="+", required=True, metavar="PH", help="one or more pH values, 0 to 14")
    c.add_argument("--ligand", action="append", default=[], metavar="NAME=CONC",
                   help=f"total (analytical) ligand concentration, e.g. NH3=0.1M or ammonia=0.1 ({CONC_HELP}); "
                        "repeat for several ligands")
    c.add_argument("--ionic-strength", default="0.1", metavar="M", help="mol/L, 0 to 1 (default %(default)s)")
    c.add_argument("--temperature", default="25", metavar="DEGC", help="degC, 0 to 90 (default %(default)s); or with K")
    c.add_argument("--complex", metavar="CONC",
                   help=f"total concentration of the complex MY; prints the free metal ({CONC_HELP})")
    c.add_argument("--pH-scale", default="activity", choices=("activity", "concentration"),
                   help="what pH means: -log a(H+), as a glass electrode reads it, or -log [H+] (default %(default)s)")
    c.add_argument("--json", action="store_true", help="print a JSON document instead of the table")

    k = sub.add_parser("constants", help="the constants held for a metal or reagent, with conditions and sources",
                       description="Without a name: the catalogue and the number of constants held.")
    k.add_argument("name", nargs="?", help="a metal ({metals}), a titrant ({titrants}), a buffer ({buffers}), a masking "
                                           "agent ({masking}), an indicator ({indicators}) or a ligand")
    k.add_argument("--json", action="store_true", help="print a JSON document instead of the table")

    s = sub.add_parser("simulate", help="evaluate one given method on a scenario",
                       description="Simulates one method on a scenario's sample: end point, error and its budget, "
                                   "sharpness, co-titrated interferents, solids, warnings.")
    s.add_argument("scenario", help="a scenario file (YAML)")
    s.add_argument("--pH", required=True, help="the method's pH, 0 to 14")
    s.add_argument("--titrant", required=True, help="the titrant: {titrants}")
    s.add_argument("--indicator", required=True, help="the indicator: {indicators}")
    s.add_argument("--masking", action="append", default=[], metavar="NAME=CONC",
                   help=f"a masking agent ({{masking}}) and its concentration in the aliquot ({CONC_HELP}); repeat "
                        "for several")
    s.add_argument("--buffer", metavar="NAME[=CONC]",
                   help=f"buffer ({{buffers}}) and its total ligand concentration (default: the first that holds the "
                        f"pH, at its usual total; {CONC_HELP})")
    s.add_argument("--mode", default="direct", choices=strategy_ids(), metavar="MODE",
                   help="how the titration is run: {modes} (default %(default)s)")
    s.add_argument("--back-metal", default="Zn", metavar="METAL",
                   help="the back-titration standard: {standards} (default %(default)s)")
    s.add_argument("--titrant-conc", metavar="M", help=f"override the scenario's titrant concentration, 0.0001 to 1 M "
                                                        f"({CONC_HELP})")
    s.add_argument("--stage-pH", metavar="PH", help="the other titration of a multi-step mode (sequential: the first "
                   "step in the same aliquot; difference: the second aliquot): its pH")
    s.add_argument("--stage-buffer", metavar="NAME[=CONC]", help="... its buffer (default: one that holds the pH)")
    s.add_argument("--stage-indicator", metavar="NAME", help="... its indicator (default: --indicator)")
    s.add_argument("--co", default="", metavar="METAL[+METAL]", help="the metals that other titration determines (a "
                   "demasking mode's first titration)")
    s.add_argument("--json", action="store_true", help="print a JSON document (with the whole curve) instead of text")

    r = sub.add_parser("run", help="search a scenario (the built-in demo by default) and write its report",
                       description="Searches the methods a scenario allows and writes DIR/<name>.<format> and "
                                   "DIR/<name>.json, <name> from the scenario's name.", epilog=SCENARIO_NAMES)
    r.add_argument("scenario", nargs="?", help="a scenario file (YAML); without one, the built-in demo")
    r.add_argument("--out", default="reports", metavar="DIR", help=OUT_HELP)
    r.add_argument("--seed", default="1", metavar="N", help=SEED_HELP)
    r.add_argument("--jobs", metavar="N", help="processes the search and the report share their work over, a whole "
                                               "number 1-256 (default: one per core, 4 at most)")
    _format_option(r)

    ch = sub.add_parser("check", help="validate scenario files only (every file reported; exit 2 if any is bad)",
                        epilog=SCENARIO_NAMES)
    ch.add_argument("scenarios", nargs="+", metavar="SCENARIO", help="one or more scenario files (YAML)")

    b = sub.add_parser("batch", help="run every scenario in files and folders, in parallel",
                       description="Runs every scenario (*.yaml, *.yml) in the files and folders given, writes each "
                                   "report and JSON (named as 'run' names them, -2, -3, ... for a name used twice), "
                                   "index.html comparing them and summary.csv.", epilog=SCENARIO_NAMES)
    b.add_argument("paths", nargs="+", metavar="PATH", help="scenario files, or folders searched for *.yaml and *.yml")
    b.add_argument("--out", default="reports", metavar="DIR", help=OUT_HELP)
    b.add_argument("--jobs", metavar="N", help="worker processes, a whole number 1-256 (default: one per core)")
    b.add_argument("--seed", default="1", metavar="N", help=SEED_HELP)
    _format_option(b)
    return p


def _conditional_inputs(a):
    """The metal, pH values, ligand totals, conditions and titrant of ``optimiser conditional``, checked."""
    from .conditional import Conditions, check_pH
    from .constants import IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C, database
    from .errors import UnknownNameError
    from .reagents import catalogue, ligand_id
    from .units import in_range, molarity, reagent_M, temperature_C
    db = database()
    metal = db.metal(a.metal)
    pH = check_pH([_number(x, "pH", 0, 14) for x in a.pH])
    ligands: dict[str, float] = {}
    for name, conc in (_pair(x, "--ligand", zero_ok=True) for x in a.ligand):
        lig = ligand_id(name)
        if lig in ligands:
            raise InputError(f"--ligand {lig} is given twice; allowed: each ligand once")
        ligands[lig] = conc
    I = in_range(molarity(a.ionic_strength, "--ionic-strength"), 0.0, IONIC_STRENGTH_MAX_M,
                 "the ionic strength (--ionic-strength)", "mol/L")
    T = in_range(temperature_C(a.temperature), *TEMPERATURE_RANGE_C, "the temperature (--temperature)", "degC")
    a.complex_M = reagent_M(a.complex, "--complex") if a.complex is not None else None
    cond = Conditions(I, T, a.pH_scale)
    if a.titrant is None:
        return metal, pH, ligands, cond, catalogue().default_ids("titrants")[0]
    try:  # a titrant of the catalogue in any spelling ("edta"); any other ligand by its id or an alias
        titrant = catalogue().titrant(a.titrant).id
    except UnknownNameError as exc:
        try:
            titrant = ligand_id(a.titrant)
        except UnknownNameError:
            raise exc from None
    return metal, pH, ligands, cond, titrant


def _conditional_document(a, metal, pH, ligands, cond, cc) -> dict:
    from .conditional import free_metal_in_complex
    out = {"metal": metal, "titrant": cc.titrant, "pH": pH.tolist(), "log_alpha_Y": cc.log_alpha_Y.tolist(),
           "log_alpha_M": cc.log_alpha_M.tolist(), "log_K": np.broadcast_to(cc.log_K, pH.shape).tolist(),
           "log_K_conditional": cc.log_K_conditional.tolist(), "log_alpha_MY": cc.log_alpha_MY.tolist(),
           "ionic_strength_M": float(cond.ionic_strength_M), "temperature_C": float(cond.temperature_C),
           "ligands_total_M": ligands, "pH_scale": a.pH_scale}
    if a.complex_M is not None:
        C = a.complex_M
        out["free_metal_M"] = (free_metal_in_complex(cc.log_K_conditional, C) / 10 ** cc.log_alpha_M).tolist()
        out["complex_M"] = C
    if cc.uncorrected_temperature:
        out["kept_at_own_temperature"] = [k.species for k in cc.uncorrected_temperature]
    return out


def _print_conditional(doc: dict, cc, cond) -> None:
    metal, free = doc["metal"], doc.get("free_metal_M")
    lig_text = ", ".join(f"{k} {v:g} M total" for k, v in doc["ligands_total_M"].items()) or "none"
    print(f"{metal} with {cc.titrant}: log K = {doc['log_K'][0]:.3f} at I = {cond.ionic_strength_M:g} M, "
          f"{cond.temperature_C:g} degC (source value {cc.constant.log_K:g} at I = {cc.constant.ionic_strength_M:g} M, "
          f"{cc.constant.temperature_C:g} degC; {cc.constant.ref}); ligands: {lig_text}; pH scale: {doc['pH_scale']}")
    head = f"{'pH':>6} {'log aY(H)':>10} {'log aM':>8} {'log aMY':>8} {'log K':>8} {'log K_cond':>10}"
    print(head + (f" {'free ' + metal + ' / M':>16}" if free is not None else ""))
    for i, p in enumerate(doc["pH"]):
        line = (f"{p:6.2f} {doc['log_alpha_Y'][i]:10.3f} {doc['log_alpha_M'][i]:8.3f} {doc['log_alpha_MY'][i]:8.3f} "
                f"{doc['log_K'][i]:8.3f} {doc['log_K_conditional'][i]:10.3f}")
        print(line + (f" {free[i]:16.4e}" if free is not None else ""))
    if "kept_at_own_temperature" in doc:
        print("kept at their own temperature (no enthalpy known): " + ", ".join(doc["kept_at_own_temperature"]))


def _cmd_conditional(a) -> int:
    from .conditional import conditional_constant
    metal, pH, ligands, cond, titrant = _conditional_inputs(a)
    cc = conditional_constant(metal, titrant, pH, ligands, cond)
    doc = _conditional_document(a, metal, pH, ligands, cond, cc)
    if a.json:
        from .results import dumps
        sys.stdout.write(dumps(doc))
    else:
        _print_conditional(doc, cc, cond)
    return 0


def _print_catalogue(db, cat) -> None:
    metals = [m for m, r in db.metals.items() if not r.get("internal")]
    print("metals: " + ", ".join(metals))
    print("titrants: " + ", ".join(cat.titrants))
    print("buffers: " + ", ".join(cat.buffers))
    print("masking agents: " + ", ".join(cat.masking))
    print("indicators: " + ", ".join(cat.indicators))
    print(f"{sum(len(v) for v in db.complexes.values())} complex constants, {sum(len(v) for v in db.protonation.values())} "
          f"protonation constants, {sum(len(v) for v in db.hydrolysis.values())} hydrolysis constants, "
          f"{sum(len(v) for v in db.solids.values())} solubility products, {len(db.references)} references")
    print(f"'{PROG} constants NAME' lists one metal's or reagent's constants with their sources.")


def _reagent_key(name: str, db, cat) -> str | None:
    """The species whose constants a reagent name stands for (a titrant, a buffer's or masking agent's ligand, an
    indicator, or a ligand by its own name or an alias: any spelling the data knows); None if the name is none of
    these."""
    from .reagents import ligand_id
    for lookup, attr in ((cat.titrant, None), (cat.buffer, "ligand"), (cat.masking_agent, "ligand"), (cat.indicator, None)):
        try:
            obj = lookup(name)
        except InputError:
            continue
        return getattr(obj, attr) if attr else obj.id
    try:
        return ligand_id(name)
    except InputError:
        return None


def _constants_key(name: str, db, cat) -> str:
    from .errors import UnknownNameError
    try:
        return db.metal(name)
    except InputError:
        key = _reagent_key(name, db, cat)
    if key is None:
        allowed = [m for m, r in db.metals.items() if not r.get("internal")] + list(cat.titrants) + list(cat.buffers) + \
            list(cat.masking) + list(cat.indicators)
        raise UnknownNameError("name", name, allowed)
    return key


def _print_constants(key: str, rows: list[dict], db) -> None:
    print(f"{key}: {len(rows)} constants (log K at the conditions of the source; the model corrects them to the sample)")
    for r in rows:
        dH = f"dH {r['dH_kJ_mol']:g} kJ/mol" if r["dH_kJ_mol"] is not None else "dH not known"
        flag = f"  {r['quality'].upper()}" if r["quality"] != "published" else ""
        u = f" +/- {r['uncertainty']:g}" if r["uncertainty"] is not None else ""
        print(f"  {r['reaction']:<44} log K {r['log_K']:8.3f}{u}  {r['temperature_C']:g} degC  I {r['ionic_strength_M']:g} M "
              f"({r['medium'] or 'n/a'})  {dH}  [{r['source']}]{flag}")
    print("sources:")
    for ref in sorted({r["source"] for r in rows}):
        print(f"  [{ref}] {db.references[ref]['citation']}")


def _cmd_constants(a) -> int:
    from .constants import database
    from .reagents import catalogue
    db = database()
    cat = catalogue()
    if a.name is None:
        _print_catalogue(db, cat)
        return 0
    key = _constants_key(a.name, db, cat)
    ks = db.constants_for(key)
    rows = [{"reaction": k.reaction, "log_K": k.log_K, "temperature_C": k.temperature_C, "ionic_strength_M": k.ionic_strength_M,
             "medium": k.medium, "dH_kJ_mol": k.dH_kJ_mol, "source": k.ref, "from_memory": k.from_memory, "note": k.note,
             "uncertainty": k.uncertainty, "quality": k.quality}
            for k in ks]
    if a.json:
        from .results import dumps
        sys.stdout.write(dumps({"name": key, "constants": rows, "references": {k.ref: db.references[k.ref]["citation"] for k in ks}}))
    else:
        _print_constants(key, rows, db)
    return 0


def _load_scenario(path: str | None):
    from .scenario import demo, load
    return demo() if path is None else load(path)


def _solver_ready() -> None:
    """Compile (first run on a machine) or load the solver's kernel, saying so when that takes a while."""
    import threading

    from .equilibrium import warm_up

    def note():
        sys.stderr.write("preparing the equilibrium solver (compiled once per machine, about 10-15 s)...\n")
        sys.stderr.flush()
    timer = threading.Timer(1.0, note)
    timer.start()
    try:
        warm_up()
    finally:
        timer.cancel()
        timer.join()  # no thread left when the search forks its workers


def _simulate_buffer(a, pH: float):
    """The buffer of ``optimiser simulate`` and its total: as given, or the first that holds the pH."""
    from .reagents import catalogue
    from .search import buffers_for
    from .units import reagent_M
    cat = catalogue()
    if a.buffer:
        name, _, conc = a.buffer.partition("=")
        buf = cat.buffer(name.strip())
        return buf, (reagent_M(conc, f"--buffer {buf.id}", zero_ok=True) if conc.strip() else buf.default_total_M)
    fits = buffers_for(pH, list(cat.buffers))
    if not fits:
        raise InputError(f"no buffer in the database holds pH {pH:g}; give one with --buffer NAME=CONC "
                         f"(buffers: {', '.join(f'{b.id} pH {b.pH_range[0]:g}-{b.pH_range[1]:g}' for b in cat.buffers.values())})")
    buf = cat.buffer(fits[0])
    return buf, buf.default_total_M


def _simulate_method(a, sc):
    from .titration import Method
    from .units import in_range, molarity
    pH = _number(a.pH, "--pH", 0, 14)
    buf, total = _simulate_buffer(a, pH)
    cT = sc.titrant_conc_M
    if a.titrant_conc is not None:
        cT = in_range(molarity(a.titrant_conc, "--titrant-conc"), 1e-4, 1.0, "--titrant-conc", "mol/L")
    stage = None
    if getattr(a, "stage_pH", None) is not None:
        stage_pH = _number(a.stage_pH, "--stage-pH", 0, 14)
        sbuf, stotal = _simulate_buffer(argparse.Namespace(buffer=a.stage_buffer), stage_pH)
        stage = Method(pH=stage_pH, buffer=sbuf.id, buffer_total_M=stotal, titrant=a.titrant, titrant_conc_M=cT,
                       indicator=a.stage_indicator or a.indicator)
    co = tuple(m for m in (getattr(a, "co", "") or "").split("+") if m.strip())
    return Method(pH=pH, buffer=buf.id, buffer_total_M=total, titrant=a.titrant, titrant_conc_M=cT,
                  masking=tuple(_pair(x, "--masking") for x in a.masking), indicator=a.indicator, mode=a.mode,
                  back_metal=a.back_metal, stage=stage, co_analytes=co)


def _method_line(sc, method) -> str:
    """One line naming a simulated method: titrant, pH, buffer, indicator, masking, and its standard if it needs one."""
    buf, s = method.buffer_info, method.strategy
    masking = f", masking {', '.join(f'{m} {c:g} M' for m, c in method.masking)}" if method.masking else ""
    how = f", {s.describe(method)}" if s.family is not None else ""
    return (f"{sc.name}: {method.titrant} {method.titrant_conc_M:g} M at pH {method.pH:g} "
            f"({buf.name}{f', {method.buffer_total_M:g} M' if buf.ligand else ''}), {method.indicator_info.name}{masking}{how}")


def _endpoint_lines(t) -> list[str]:
    from .report.text import fmt, signed_fixed
    if t.endpoint_mL is None:
        return ["  end point: none (the indicator does not turn)"]
    b = t.indicator_blank_percent
    blank = f"  (of which {signed_fixed(b)} % is analyte held by the indicator)" if b and signed_fixed(b) != "0.000" else ""
    return [f"  end point:   {t.endpoint_mL:.3f} mL, colour {t.colour_change[0]} -> {t.colour_change[1]}",
            f"  error:       {signed_fixed(t.error_percent)} %{blank}",
            f"  sharpness:   {fmt(t.sharpness_mL)} mL ({fmt(t.sharpness_drops)} drops of 0.05 mL)"
            + ("  too gradual" if t.too_gradual else "")]


def _step_lines(t) -> list[str]:
    """A multi-step strategy's end points, one line each (none for a single titration)."""
    if len(t.endpoints) < 2:
        return []
    out = []
    for ep in t.endpoints:
        vol = "none" if ep.volume_mL is None else f"{ep.volume_mL:.3f} mL"
        err = "-" if ep.error_percent is None else f"{ep.error_percent:+.3f} %"
        std = "" if ep.standardised_percent is None else f" ({ep.standardised_percent:+.3f} % after standardisation)"
        out.append(f"  {printable(ep.step)}: {printable(ep.label)} {vol}, error {err}{std}, colour "
                   f"{ep.colour_change[0]} -> {ep.colour_change[1]}")
    return out


def _titration_lines(t) -> list[str]:
    """What ``optimiser simulate`` prints about a simulated titration, after the method's line."""
    lines = [f"  equivalence: {t.equivalence_mL:.3f} mL" + (f"  (after {t.excess_mL:.3f} mL titrant excess)" if t.excess_mL else "")]
    lines += _step_lines(t)
    lines += _endpoint_lines(t)
    lines += _budget_lines(t)
    if t.cotitrated:
        lines.append("  co-titrated at the end point: " + ", ".join(f"{m} {100 * v:.2f} %" for m, v in t.cotitrated.items()))
    if t.pM_eq:
        lines.append("  pM at equivalence: " + ", ".join(f"{m} {v:.2f}" for m, v in t.pM_eq.items()))
    if t.precipitates_start or t.precipitates_end:
        lines.append(f"  solids: at the start {', '.join(t.precipitates_start) or 'none'}; at the end point "
                     f"{', '.join(t.precipitates_end) or 'none'}")
    if t.pH_drift is not None:
        lines.append(f"  pH drift to the end point with the pH free: {t.pH_drift:+.2f}")
    return lines + [f"  warning: {w}" for w in t.warnings] + [f"  assumption: {x}" for x in t.assumptions]


def _cmd_simulate(a) -> int:
    from .results import dumps, titration_json
    from .titration import simulate
    sc = _load_scenario(a.scenario)
    method = _simulate_method(a, sc)  # every input checked before the solver is loaded
    _solver_ready()
    t = simulate(sc.sample, method, pH_drift=True, standardise=True)
    if a.json:
        sys.stdout.write(dumps(titration_json(t)))
        return 0
    print(_method_line(sc, method))
    print("\n".join(_titration_lines(t)))
    return 0


SEARCH_STEPS = ("enumeration and survey", "refinement", "polishing", "recommendation")  # run_search's progress steps


def _cmd_run(a) -> int:
    from . import report
    from .analysis import analyse
    from .report.text import signed_fixed
    from .results import dumps, to_json, writable_folder
    from .search import run_search
    from .strategies import strategy
    seed = _integer(a.seed, "--seed", 0, 2 ** 31 - 1)
    if a.jobs is not None:  # for this command only (main restores the default)
        parallel.set_workers(_integer(a.jobs, "--jobs", 1, 256))
    formats = report.parse_formats(a.format or [report.DEFAULT_FORMAT])
    writable_folder(Path(a.out), "--out")  # before the search, not after it
    report.prepare(formats)  # the figures' libraries load meanwhile, in a process of their own
    sc = _load_scenario(a.scenario)
    tty = sys.stderr.isatty()
    _solver_ready()
    name = printable(sc.name)

    def progress(step, n_steps, evals):
        msg = f"searching {name}: step {step}/{n_steps} ({SEARCH_STEPS[step - 1]}), {evals} evaluations"
        sys.stderr.write(("\r" + msg) if tty else (msg + "\n"))
        sys.stderr.flush()
    result = run_search(sc, seed=seed, progress=progress)
    if tty:
        sys.stderr.write("\n")
    sys.stderr.write("writing the report...\n")
    report_path, json_path = report.write(result, Path(a.out), dumps(to_json(result)), report_format=formats,
                                          analysis=analyse(result))
    e = result.recommended
    print(f"{name}: {result.evaluations} evaluations in {result.wall_time_s:.1f} s (seed {seed})")
    st = result.stats
    print(f"  structures: {st.structures_considered} considered, {st.structures_considered - sum(n for _, n in st.structures_pruned)} "
          f"after the hard rules, {st.structures_simulated} simulated, {st.structures_feasible} feasible; "
          f"{st.candidates_simulated} candidates simulated, {st.candidates_prescreened} pre-screened")
    if not result.meets_criteria:
        print("  NO METHOD MEETS THE CRITERIA" + (": the closest compromise below is not a procedure to follow"
                                                  if e is not None else ""))
    for note in result.notes:
        print(f"  {note}")
    if e is not None:
        c = e.candidate
        print(f"  {'recommended' if result.meets_criteria else 'closest compromise'}: {c.titrant} {sc.titrant_conc_M:g} M, "
              f"pH {c.pH:.2f} ({c.buffer}), {c.indicator}, "
              + (", ".join(f"{m} {d * 1000:.3g} mM" for m, d in c.masking) or "no masking")
              + f", {strategy(c.mode).describe(c)}")
        t = result.recommended_titration
        print(f"  end point {t.endpoint_mL:.2f} mL, error after standardisation {signed_fixed(t.standardised_error_percent, 2)} %, "
              f"sharpness {t.sharpness_mL:.3f} mL, robust pH {result.robust_pH[0]:.2f}-{result.robust_pH[1]:.2f}" if result.robust_pH else
              f"  end point {t.endpoint_mL:.2f} mL, error after standardisation {signed_fixed(t.standardised_error_percent, 2)} %")
        print("\n".join(_budget_lines(t)))
    print("\n".join(_listed_lines(result)))
    for fmt in formats:
        print(f"  report: {printable(str(report_path.with_suffix('.' + fmt)))}")
    print(f"  data:   {printable(str(json_path))}")
    return 0 if result.meets_criteria else 1


def _listed_lines(result) -> list[str]:
    """One line per method the scenario lists: whether it meets the criteria and is dominated, its error and
    sharpness."""
    from .report.text import signed_fixed
    lines = []
    for o in getattr(result, "listed", ()):
        e = o.evaluation
        verdict = "meets the criteria" if o.meets_criteria else "fails the criteria"
        dominated = "dominated by the search's front" if o.dominated else "not dominated by the search's front"
        figures = (f"error after standardisation {signed_fixed(e.standardised_error_percent, 2)} %"
                   if e.standardised_error_percent is not None else "no end point")
        if e.sharpness_mL is not None:
            figures += f", sharpness {e.sharpness_mL:.3f} mL"
        lines.append(f"  listed {printable(o.listed.name, 80)}: {verdict}, {dominated}; {figures}")
    return lines


def _budget_lines(t) -> list[str]:
    """The error budget by cause, as simulated and after standardisation, largest first."""
    from .readout import budget_label
    from .report.text import signed_fixed
    if not t.budget:
        return []
    std = t.standardised_budget
    lines = [f"  error after standardisation {signed_fixed(t.standardised_error_percent)} % (as simulated "
             f"{signed_fixed(t.error_percent)} %); its causes added by magnitude {t.error_by_cause_percent:.3f} %; "
             "by cause, as simulated / after standardisation:"]
    for k in sorted(std, key=lambda k: -abs(std[k])):
        if max(abs(std[k]), abs(t.budget.get(k, 0.0))) >= 5e-4:
            lines.append(f"    {printable(budget_label(k))}: {signed_fixed(t.budget.get(k, 0.0))} % / {signed_fixed(std[k])} %")
    return lines


def _cmd_check(a) -> int:
    """Every file is checked and reported (ok on stdout, each error on its own line on stderr); 2 if any is bad."""
    from .findings import count
    from .scenario import load
    bad = 0
    for p in a.scenarios:
        try:
            sc = load(p)
        except InputError as exc:
            bad += 1
            print(f"{PROG}: error: {printable(str(exc))}", file=sys.stderr)
            continue
        listed = f"; {len(sc.methods)} listed method{'s' if len(sc.methods) > 1 else ''}" if sc.methods else ""
        print(f"{printable(p)}: ok ({printable(sc.name)}; analyte {printable(sc.analyte_label)}; "
              f"{count(len(sc.sample.interferents), 'interferent')}{listed})")
    return 2 if bad else 0


def _cmd_batch(a) -> int:
    from .batch import run_batch
    from .results import writable_folder
    from .scenario import find_scenarios
    from .report import DEFAULT_FORMAT, parse_formats
    jobs = _integer(a.jobs, "--jobs", 1, 256) if a.jobs is not None else None
    seed = _integer(a.seed, "--seed", 0, 2 ** 31 - 1)
    formats = parse_formats(a.format or [DEFAULT_FORMAT])
    paths = find_scenarios(a.paths)
    missing = [printable(str(p)) for p in paths if not p.exists()]
    if missing:
        raise InputError(f"no such file or folder: {', '.join(missing)}")
    if not paths:
        raise InputError("no scenario files (*.yaml, *.yml) in the paths given")
    writable_folder(Path(a.out), "--out")
    _solver_ready()
    rows = run_batch(paths, Path(a.out), jobs=jobs, seed=seed, progress=True, report_format=formats)
    for r in rows:
        print(f"{r.status.upper():<9} {printable(r.name)}: {printable(r.method if r.ok else r.message)} ({r.seconds:.1f} s)")
    print(f"index: {printable(str(Path(a.out) / 'index.html'))}")
    print(f"summary: {printable(str(Path(a.out) / 'summary.csv'))}")
    return 0 if all(r.status == "ok" for r in rows) else 1


COMMANDS = {"conditional": _cmd_conditional, "constants": _cmd_constants, "simulate": _cmd_simulate, "run": _cmd_run,
            "check": _cmd_check, "batch": _cmd_batch}


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point: parse, dispatch, map errors to exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if args.command is None:
            parser.print_help(sys.stderr)
            return 2
        return COMMANDS[args.command](args)
    except OptimiserError as exc:
        print(f"{PROG}: error: {printable(str(exc))}", file=sys.stderr)
        return exc.exit_status
    except BrokenPipeError:  # output piped into head and the like
        try:
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        return 0
    except KeyboardInterrupt:
        print(f"{PROG}: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:
        if os.environ.get("OPTIMISER_DEBUG"):
            raise
        print(f"{PROG}: internal error ({type(exc).__name__}: {printable(str(exc), 300)}); set OPTIMISER_DEBUG=1 for the "
              "traceback", file=sys.stderr)
        return 1
    finally:
        parallel.dismiss()
        parallel.set_workers(None)


# The cyclic garbage collector is off for the console command: a search keeps a large heap and makes many short-lived
# objects beside it, which the collector scanned again and again (the demo's run: 5.61 s with the thresholds raised to
# 10000/10/10, 5.38 s with it off, medians of 7 alternating runs). What it would free is small: the largest example
# (the nickel bath) peaked at 327 MB against 301 MB with it on, the demo at 297 against 279 MB. A batch collects once
# after each scenario (optimiser.batch.run_one).


def command() -> NoReturn:
    """The console command: :func:`main` (the cyclic garbage collector off, see the note above), then out at once
    with its exit status.

    By then its output is flushed here and every file it wrote is closed, so the interpreter's teardown (freeing the
    compiled solver, matplotlib and the rest one object at a time: about 1 s after a run of the demo, measured) is
    skipped (``os._exit``). An exception that escapes :func:`main` (``OPTIMISER_DEBUG``) leaves the usual way.
    """
    import gc
    gc.disable()
    status = main()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a closed or broken pipe: nothing more can reach it
            pass
    os._exit(status)


if __name__ == "__main__":  # pragma: no cover
    command()
