"""The command line: a thin ``main(argv) -> int`` over the package.

Exit status: 0 on success, 2 on bad input (one line on stderr that says what is wrong and what is
allowed; no traceback), 1 when a run fails.
"""
from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InputError, OptimiserError

PROG = "optimiser"


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one line, exit status 2, through main's handler
        raise InputError(f"{message} (see '{self.prog} --help')")


def _pair(text: str, what: str) -> tuple[str, float]:
    from .units import molarity
    if "=" not in text:
        raise InputError(f"{what} must be NAME=CONCENTRATION, e.g. NH3=0.1M; got {text!r}")
    name, conc = text.split("=", 1)
    return name.strip(), molarity(conc.strip(), f"concentration of {name.strip()}")


def _number(text: str, what: str, lo: float | None = None, hi: float | None = None) -> float:
    try:
        v = float(text)
    except ValueError:
        raise InputError(f"{what} must be a number; got {text!r}") from None
    if not np.isfinite(v) or (lo is not None and v < lo) or (hi is not None and v > hi):
        raise InputError(f"{what} must be between {lo} and {hi}; got {text!r}")
    return v


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog=PROG, description="Method-development optimiser for selective complexometric titrations.")
    p.add_argument("--version", action="version", version=f"{PROG} {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    c = sub.add_parser("conditional", help="log alpha and conditional constants of a metal across pH")
    c.add_argument("metal")
    c.add_argument("--titrant", default="EDTA")
    c.add_argument("--pH", nargs="+", required=True, metavar="PH")
    c.add_argument("--ligand", action="append", default=[], metavar="NAME=CONC", help="total (analytical) ligand concentration, e.g. NH3=0.1M")
    c.add_argument("--ionic-strength", default="0.1", metavar="M")
    c.add_argument("--temperature", default="25", metavar="DEGC")
    c.add_argument("--complex", metavar="CONC", help="total concentration of the complex MY; prints the free metal")
    c.add_argument("--pH-scale", default="activity", choices=("activity", "concentration"))
    c.add_argument("--json", action="store_true")

    k = sub.add_parser("constants", help="the constants held for a metal or reagent, with conditions and sources")
    k.add_argument("name", nargs="?")
    k.add_argument("--json", action="store_true")

    s = sub.add_parser("simulate", help="evaluate one given method on a scenario")
    s.add_argument("scenario")
    s.add_argument("--pH", required=True)
    s.add_argument("--titrant", required=True)
    s.add_argument("--indicator", required=True)
    s.add_argument("--masking", action="append", default=[], metavar="NAME=CONC")
    s.add_argument("--buffer", metavar="NAME[=CONC]", help="buffer and its total ligand concentration (default: one that holds the pH)")
    s.add_argument("--mode", default="direct", choices=("direct", "back"))
    s.add_argument("--back-metal", default="Zn", choices=("Zn", "Mg"))
    s.add_argument("--titrant-conc", metavar="M", help="override the scenario's titrant concentration")
    s.add_argument("--json", action="store_true")

    r = sub.add_parser("run", help="search a scenario (the built-in demo by default) and write its report")
    r.add_argument("scenario", nargs="?")
    r.add_argument("--out", default="reports", metavar="DIR")
    r.add_argument("--seed", default="1", metavar="N")

    ch = sub.add_parser("check", help="validate scenario files only")
    ch.add_argument("scenarios", nargs="+", metavar="SCENARIO")

    b = sub.add_parser("batch", help="run every scenario in files and folders, in parallel")
    b.add_argument("paths", nargs="+", metavar="PATH")
    b.add_argument("--out", default="reports", metavar="DIR")
    b.add_argument("--jobs", metavar="N")
    b.add_argument("--seed", default="1", metavar="N")
    return p


def _cmd_conditional(a) -> int:
    from .conditional import Conditions, check_pH, conditional_constant, free_metal_in_complex
    from .constants import database
    from .units import molarity, temperature_C
    db = database()
    metal = db.metal(a.metal)
    pH = check_pH([_number(x, "pH", 0, 14) for x in a.pH])
    ligands = dict(_pair(x, "--ligand") for x in a.ligand)
    for lig in ligands:
        if lig not in db.charges or lig in db.metals or lig == "H+":
            from .errors import UnknownNameError
            raise UnknownNameError("ligand", lig, [x for x in db.charges if x not in db.metals and x != "H+"])
    cond = Conditions(molarity(a.ionic_strength, "ionic strength"), temperature_C(a.temperature), a.pH_scale)
    cc = conditional_constant(metal, a.titrant.upper() if a.titrant.upper() in ("EDTA", "EGTA", "CDTA", "DTPA") else a.titrant,
                              pH, ligands, cond)
    free = None
    if a.complex is not None:
        C = molarity(a.complex, "--complex")
        free = free_metal_in_complex(cc.log_K_conditional, C) / 10 ** cc.log_alpha_M
    out = {"metal": metal, "titrant": cc.titrant, "pH": pH.tolist(), "log_alpha_Y": cc.log_alpha_Y.tolist(),
           "log_alpha_M": cc.log_alpha_M.tolist(), "log_K": np.broadcast_to(cc.log_K, pH.shape).tolist(),
           "log_K_conditional": cc.log_K_conditional.tolist(), "log_alpha_MY": cc.log_alpha_MY.tolist(),
           "ionic_strength_M": float(cond.ionic_strength_M), "temperature_C": float(cond.temperature_C),
           "ligands_total_M": ligands, "pH_scale": a.pH_scale}
    if free is not None:
        out["free_metal_M"] = free.tolist()
        out["complex_M"] = C
    if cc.uncorrected_temperature:
        out["kept_at_own_temperature"] = [k.species for k in cc.uncorrected_temperature]
    if a.json:
        from .results import dumps
        sys.stdout.write(dumps(out))
        return 0
    lig_text = ", ".join(f"{k} {v:g} M total" for k, v in ligands.items()) or "none"
    print(f"{metal} with {cc.titrant}: log K = {float(np.ravel(cc.log_K)[0]):.3f} at I = {cond.ionic_strength_M:g} M, "
          f"{cond.temperature_C:g} degC (source value {cc.constant.log_K:g} at I = {cc.constant.ionic_strength_M:g} M, "
          f"{cc.constant.temperature_C:g} degC; {cc.constant.ref}); ligands: {lig_text}; pH scale: {a.pH_scale}")
    head = f"{'pH':>6} {'log aY(H)':>10} {'log aM':>8} {'log aMY':>8} {'log K':>8} {'log K_cond':>10}"
    if free is not None:
        head += f" {'free ' + metal + ' / M':>16}"
    print(head)
    for i, p in enumerate(pH):
        line = (f"{p:6.2f} {cc.log_alpha_Y[i]:10.3f} {cc.log_alpha_M[i]:8.3f} {cc.log_alpha_MY[i]:8.3f} "
                f"{float(np.ravel(np.broadcast_to(cc.log_K, pH.shape))[i]):8.3f} {cc.log_K_conditional[i]:10.3f}")
        if free is not None:
            line += f" {free[i]:16.4e}"
        print(line)
    if cc.uncorrected_temperature:
        print("kept at their own temperature (no enthalpy known): " + ", ".join(k.species for k in cc.uncorrected_temperature))
    return 0


def _cmd_constants(a) -> int:
    from .constants import database
    from .reagents import catalogue
    db = database()
    cat = catalogue()
    if a.name is None:
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
        return 0
    name = a.name
    key = None
    try:
        key = db.metal(name)
    except InputError:
        for table, attr in ((cat.titrants, None), (cat.buffers, "ligand"), (cat.masking, "ligand")):
            for ident, obj in table.items():
                if ident.lower() == name.lower():
                    key = getattr(obj, attr) if attr else ident
        if key is None:
            try:
                key = cat.indicator(name).id
            except InputError:
                pass
        if key is None and name in db.charges:
            key = name
    if key is None:
        from .errors import UnknownNameError
        allowed = [m for m, r in db.metals.items() if not r.get("internal")] + list(cat.titrants) + list(cat.buffers) + \
            list(cat.masking) + list(cat.indicators)
        raise UnknownNameError("name", name, allowed)
    ks = db.constants_for(key)
    rows = [{"reaction": k.reaction, "log_K": k.log_K, "temperature_C": k.temperature_C, "ionic_strength_M": k.ionic_strength_M,
             "medium": k.medium, "dH_kJ_mol": k.dH_kJ_mol, "source": k.ref, "from_memory": k.from_memory, "note": k.note}
            for k in ks]
    if a.json:
        from .results import dumps
        sys.stdout.write(dumps({"name": key, "constants": rows, "references": {k.ref: db.references[k.ref]["citation"] for k in ks}}))
        return 0
    print(f"{key}: {len(rows)} constants (log K at the conditions of the source; the model corrects them to the sample)")
    for r in rows:
        dH = f"dH {r['dH_kJ_mol']:g} kJ/mol" if r["dH_kJ_mol"] is not None else "dH not known"
        flag = "  FROM MEMORY" if r["from_memory"] else ""
        print(f"  {r['reaction']:<44} log K {r['log_K']:8.3f}  {r['temperature_C']:g} degC  I {r['ionic_strength_M']:g} M "
              f"({r['medium'] or 'n/a'})  {dH}  [{r['source']}]{flag}")
    print("sources:")
    for ref in sorted({r["source"] for r in rows}):
        print(f"  [{ref}] {db.references[ref]['citation']}")
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


def _cmd_simulate(a) -> int:
    from .reagents import catalogue
    from .results import dumps, titration_json
    from .search import buffers_for
    from .titration import Method, simulate
    from .units import molarity
    sc = _load_scenario(a.scenario)
    _solver_ready()
    cat = catalogue()
    pH = _number(a.pH, "--pH", 0, 14)
    if a.buffer:
        name, _, conc = a.buffer.partition("=")
        buf = cat.buffer(name.strip())
        total = molarity(conc, "buffer concentration") if conc else buf.default_total_M
    else:
        fits = buffers_for(pH, list(cat.buffers))
        if not fits:
            raise InputError(f"no buffer in the database holds pH {pH:g}; give one with --buffer NAME=CONC "
                             f"(buffers: {', '.join(f'{b.id} pH {b.pH_range[0]:g}-{b.pH_range[1]:g}' for b in cat.buffers.values())})")
        buf = cat.buffer(fits[0])
        total = buf.default_total_M
    cT = molarity(a.titrant_conc, "--titrant-conc") if a.titrant_conc else sc.titrant_conc_M
    method = Method(pH=pH, buffer=buf.id, buffer_total_M=total, titrant=a.titrant, titrant_conc_M=cT,
                    masking=tuple(_pair(x, "--masking") for x in a.masking), indicator=a.indicator, mode=a.mode,
                    back_metal=a.back_metal)
    t = simulate(sc.sample, method, pH_drift=True)
    if a.json:
        sys.stdout.write(dumps(titration_json(t)))
        return 0
    from .report import fmt
    print(f"{sc.name}: {method.titrant} {cT:g} M at pH {pH:g} ({buf.name}{f', {total:g} M' if buf.ligand else ''}), "
          f"{cat.indicator(method.indicator).name}" + (f", masking {', '.join(f'{m} {c:g} M' for m, c in method.masking)}" if method.masking else "")
          + (f", back-titration with {a.back_metal}" if a.mode == "back" else ""))
    print(f"  equivalence: {t.equivalence_mL:.3f} mL" + (f"  (after {t.excess_mL:.3f} mL titrant excess)" if t.excess_mL else ""))
    if t.endpoint_mL is None:
        print("  end point: none (the indicator does not turn)")
    else:
        print(f"  end point:   {t.endpoint_mL:.3f} mL, colour {t.colour_change[0]} -> {t.colour_change[1]}")
        print(f"  error:       {t.error_percent:+.3f} %"
              + (f"  (of which {t.indicator_blank_percent:+.3f} % is analyte held by the indicator)" if t.indicator_blank_percent else ""))
        print(f"  sharpness:   {fmt(t.sharpness_mL)} mL ({fmt(t.sharpness_drops)} drops of 0.05 mL)"
              + ("  too gradual" if t.too_gradual else ""))
    if t.cotitrated:
        print("  co-titrated at the end point: " + ", ".join(f"{m} {100 * v:.2f} %" for m, v in t.cotitrated.items()))
    if t.pM_eq:
        print("  pM at equivalence: " + ", ".join(f"{m} {v:.2f}" for m, v in t.pM_eq.items()))
    if t.precipitates_start or t.precipitates_end:
        print(f"  solids: at the start {', '.join(t.precipitates_start) or 'none'}; at the end point {', '.join(t.precipitates_end) or 'none'}")
    if t.pH_drift is not None:
        print(f"  pH drift to the end point with the pH free: {t.pH_drift:+.2f}")
    for w in t.warnings:
        print(f"  warning: {w}")
    for x in t.assumptions:
        print(f"  assumption: {x}")
    return 0


def _cmd_run(a) -> int:
    from . import report
    from .results import dumps, to_json
    from .search import run_search
    sc = _load_scenario(a.scenario)
    seed = int(_number(a.seed, "--seed", 0, 2 ** 31 - 1))
    tty = sys.stderr.isatty()
    _solver_ready()

    def progress(gen, n_gen, evals):
        msg = f"searching {sc.name}: generation {gen}/{n_gen}, {evals} evaluations"
        sys.stderr.write(("\r" + msg) if tty else (msg + "\n" if gen in (1, n_gen) or gen % 5 == 0 else ""))
        sys.stderr.flush()
    result = run_search(sc, seed=seed, progress=progress)
    if tty:
        sys.stderr.write("\n")
    sys.stderr.write("writing the report...\n")
    html_path, json_path = report.write(result, Path(a.out), dumps(to_json(result)))
    e = result.recommended
    print(f"{sc.name}: {result.evaluations} evaluations in {result.wall_time_s:.1f} s (seed {seed})")
    for note in result.notes:
        print(f"  {note}")
    if e is not None:
        c = e.candidate
        print(f"  recommended: {c.titrant} {sc.titrant_conc_M:g} M, pH {c.pH:.2f} ({c.buffer}), {c.indicator}, "
              + (", ".join(f"{m} {d * 1000:.3g} mM" for m, d in c.masking) or "no masking")
              + (f", back-titration with {c.back_metal}" if c.mode == "back" else ", direct"))
        t = result.recommended_titration
        print(f"  end point {t.endpoint_mL:.2f} mL, error {t.error_percent:+.2f} %, sharpness {t.sharpness_mL:.3f} mL, "
              f"robust pH {result.robust_pH[0]:.2f}-{result.robust_pH[1]:.2f}" if result.robust_pH else
              f"  end point {t.endpoint_mL:.2f} mL, error {t.error_percent:+.2f} %")
    print(f"  report: {html_path}")
    print(f"  data:   {json_path}")
    return 0 if e is not None else 1


def _cmd_check(a) -> int:
    from .scenario import load
    for p in a.scenarios:
        sc = load(p)
        print(f"{p}: ok ({sc.name}; analyte {sc.analyte_label}; {len(sc.sample.interferents)} interferents)")
    return 0


def _cmd_batch(a) -> int:
    from .batch import run_batch
    from .scenario import find_scenarios
    paths = find_scenarios(a.paths)
    missing = [str(p) for p in paths if not p.exists()]
    if missing:
        raise InputError(f"no such file or folder: {', '.join(missing)}")
    if not paths:
        raise InputError("no scenario files (*.yaml, *.yml) in the paths given")
    jobs = int(_number(a.jobs, "--jobs", 1, 256)) if a.jobs else None
    seed = int(_number(a.seed, "--seed", 0, 2 ** 31 - 1))
    _solver_ready()
    rows = run_batch(paths, Path(a.out), jobs=jobs, seed=seed, progress=True)
    for r in rows:
        print(f"{'ok    ' if r.ok else 'FAILED'} {r.name}: {r.method if r.ok else r.message}")
    print(f"index: {Path(a.out) / 'index.html'}")
    print(f"summary: {Path(a.out) / 'summary.csv'}")
    return 0 if all(r.ok for r in rows) else 1


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
        print(f"{PROG}: error: {exc}", file=sys.stderr)
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
        print(f"{PROG}: internal error ({type(exc).__name__}: {exc}); set OPTIMISER_DEBUG=1 for the traceback", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
