"""Run the `phreeqc` reference library (IPhreeqc bindings, PyPI) on one of our chemical systems.

The database given to PHREEQC is written from *our* constants (moved to I = 0, 25 degC), so that a
comparison checks the solver, the activity model and the bookkeeping, not the choice of constants.
Components get neutral element names (Ma, Mb, ... for metals; La, Lb, ... for ligands) so that no
species of a shipped database can sneak in. Activity models:

- ``"ideal"``: every species ``-gamma 1e10 0`` (log gamma ~ 0); PHREEQC's water activity remains and is
  passed back so the caller can apply it (``log_Kw_shift``);
- ``"davies"``: ions without ``-gamma`` (PHREEQC's Davies, A read back with ``DH_A``), neutral species
  ``-gamma 1e10 0`` (gamma = 1, as in our model).
"""
from __future__ import annotations

import string

import numpy as np

from optimiser.constants import H, corrected
from optimiser.equilibrium import ChemicalSystem

phreeqc = __import__("pytest").importorskip("phreeqc", reason="the phreeqc reference library is not installed")


def zstr(z: int) -> str:
    """PHREEQC's charge suffix: '', '+', '-', '+2', '-3'."""
    return "" if z == 0 else ("+" if z == 1 else "-" if z == -1 else f"{z:+d}")


def _names(system: ChemicalSystem, db_metals) -> dict[str, str]:
    out, im, il = {}, 0, 0
    for c in system.components:
        if c == H:
            continue
        if c in db_metals:
            out[c] = "M" + string.ascii_lowercase[im]
            im += 1
        else:
            out[c] = "L" + string.ascii_lowercase[il]
            il += 1
    return out


def _formula(system: ChemicalSystem, row: np.ndarray, names: dict[str, str], charge: int) -> str:
    parts = []
    for c, v in zip(system.components, row):
        if c == H or v == 0:
            continue
        parts.append(names[c] + (str(v) if v != 1 else ""))
    h = row[system.index(H)]
    if h > 0:
        parts.append("H" + (str(h) if h != 1 else ""))
    elif h < 0:
        parts.append(f"(OH){-h}" if h < -1 else "OH")
    return "".join(parts) + zstr(charge)


def _reaction(system, row, names, product, charges) -> str:
    left = []
    for c, v in zip(system.components, row):
        if c == H or v == 0:
            continue
        left.append((f"{v} " if v != 1 else "") + names[c] + zstr(charges[c]))
    h = row[system.index(H)]
    right = ""
    if h > 0:
        left.append((f"{h} " if h != 1 else "") + "H+")
    elif h < 0:
        left.append((f"{-h} " if h != -1 else "") + "H2O")
        right = " + " + (f"{-h} " if h != -1 else "") + "H+"
    return " + ".join(left) + " = " + product + right


def database_text(system: ChemicalSystem, db, model: str) -> tuple[str, dict[str, str]]:
    names = _names(system, db.metals)
    charges = db.charges
    g_ion = "  -gamma 1e10 0\n" if model == "ideal" else ""
    g_neu = "  -gamma 1e10 0\n"
    lines = ["SOLUTION_MASTER_SPECIES", "H H+ -1 H 1.008", "H(0) H2 0 H", "H(1) H+ -1 H", "E e- 0 0 0",
             "O H2O 0 O 16.00", "O(0) O2 0 O", "O(-2) H2O 0 O", "Xx Xx+ 0 Xx 1.0", "Yy Yy- 0 Yy 1.0"]
    for c, nm in names.items():
        z = charges[c]
        lines.append(f"{nm} {nm}{zstr(z)} 0 {nm} 100.0")
    lines.append("SOLUTION_SPECIES")
    master = [("H+ = H+", 1), ("e- = e-", 0), ("H2O = H2O", 0), ("Xx+ = Xx+", 1), ("Yy- = Yy-", 1)]
    for c, nm in names.items():
        z = charges[c]
        master.append((f"{nm}{zstr(z)} = {nm}{zstr(z)}", z))
    for eq, z in master:
        lines += [eq, "  log_k 0", (g_ion if z else g_neu).rstrip("\n")]
    lines += ["H2O = OH- + H+", f"  log_k {corrected([db.water], 0.0, 25.0)[0]:.10f}", g_ion.rstrip("\n"),
              "2 H2O = O2 + 4 H+ + 4 e-", "  log_k -86.08", g_neu.rstrip("\n"),
              "2 H+ + 2 e- = H2", "  log_k -3.15", g_neu.rstrip("\n")]
    n_comp = len(system.components)
    for sp, row, z, k in zip(system.species[n_comp + 1:], system.nu[n_comp + 1:], system.charge[n_comp + 1:],
                             system.constants[n_comp + 1:]):
        product = _formula(system, row, names, int(z))
        lines += [_reaction(system, row, names, product, charges), f"  log_k {corrected([k], 0.0, 25.0)[0]:.10f}",
                  (g_ion if z else g_neu).rstrip("\n")]
    lines += ["PHASES", "Fix_H+", "  H+ = H+", "  log_k 0"]
    for j, (name, row, k) in enumerate(zip(system.solids, system.nu_solid, system.solid_constants)):
        metal = [c for c, v in zip(system.components, row) if v > 0 and c in db.metals][0]
        pname = "P" + names[metal].lower() + str(j)
        formula = _formula(system, row, names, 0)
        # dissolution: solid [+ n H+] = m M + n L [+ h H+] [+ n H2O] (hydroxides and basic salts take up H+, acid
        # salts such as MHPO4 release it)
        h = row[system.index(H)]
        diss = [(f"{v} " if v != 1 else "") + names[c] + zstr(charges[c])
                for c, v in zip(system.components, row) if c != H and v]
        if h > 0:
            diss.append((f"{h} " if h != 1 else "") + "H+")
        lhs = formula + (f" + {-h} H+" if h < 0 else "")
        rhs = " + ".join(diss) + (f" + {-h} H2O" if h < 0 else "")
        lines += [pname, f"  {lhs} = {rhs}", f"  log_k {-corrected([k], 0.0, 25.0)[0]:.10f}"]
        names[name] = pname
    lines.append("END")
    return "\n".join(l for l in lines if l != "") + "\n", names


def speciate(system: ChemicalSystem, db, totals: dict[str, float], pH: float, model: str = "ideal",
             phases: bool = False) -> dict:
    """Free molalities of every component, ionic strength, DH_A, water activity and solid amounts."""
    text, names = database_text(system, db, model)
    p = phreeqc.Phreeqc()
    assert p.LoadDatabaseString(text) == 0, p.GetErrorString()
    comps = [c for c in system.components if c != H]
    sol = "\n".join(f"  {names[c]} {totals[c]:.15e}" for c in comps if totals[c] > 0)
    heads = " ".join(f"f{i}" for i in range(len(comps))) + " t" + " t".join(str(i) for i in range(len(comps)))
    punch = []
    line = 10
    for i, c in enumerate(comps):
        z = db.charges[c]
        punch.append(f"{line} PUNCH MOL(\"{names[c]}{zstr(z)}\")")
        line += 10
    for i, c in enumerate(comps):
        punch.append(f"{line} PUNCH TOT(\"{names[c]}\")")
        line += 10
    punch.append(f"{line} PUNCH MU, DH_A, ACT(\"H2O\"), -LA(\"H+\"), TOT(\"water\"), TOT(\"Xx\"), TOT(\"Yy\")")
    line += 10
    solid_names = [names[s] for s in system.solids]
    for s in solid_names:
        punch.append(f"{line} PUNCH EQUI(\"{s}\")")
        line += 10
    heads += " mu dha aw ph mw xx yy " + " ".join(f"s{i}" for i in range(len(solid_names)))
    eqp = ""
    if phases:
        eqp = "EQUILIBRIUM_PHASES 1\n  Fix_H+ -%.6f XxOH 10.0\n" % pH + "".join(f"  {s} 0 0\n" for s in solid_names)
    text_in = f"""SOLUTION 1
  units mol/kgw
  pH {pH}
{sol}
{eqp}SELECTED_OUTPUT 1
  -reset false
USER_PUNCH 1
  -headings {heads}
""" + "\n".join("  " + x for x in punch) + "\nEND\n"
    assert p.RunString(text_in) == 0, p.GetErrorString()
    out = {k: v[-1] for k, v in p.GetSelectedOutput().items()}
    keys = list(out)
    vals = [out[k] for k in keys]
    n = len(comps)
    res = {"free": dict(zip(comps, vals[:n])), "total": dict(zip(comps, vals[n:2 * n]))}
    mu, dha, aw, ph, mw, xx, yy = vals[2 * n:2 * n + 7]
    res.update(ionic_strength=mu, A=dha, a_w=aw, pH=ph, mass_water=mw, inert_ions=xx + yy)
    res["solids"] = dict(zip(system.solids, [v / mw for v in vals[2 * n + 7:]])) if phases else {}
    return res
