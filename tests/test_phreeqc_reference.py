"""Independent checks against the `phreeqc` reference library (IPhreeqc 3.8 bindings from PyPI).

(a) PHREEQC is given *our* constants as a custom database (tests/phreeqc_bridge.py) and the free
    concentrations must agree to 1e-5 relative, with no activity corrections and with Davies (A taken
    from PHREEQC's own DH_A, and PHREEQC's water activity passed on as a shift of log Kw).
(b) Loose comparison with shipped databases as they are (minteq.v4.dat, llnl.dat): a few tenths of a log unit.
"""
import numpy as np
import pytest

phreeqc = pytest.importorskip("phreeqc", reason="the phreeqc reference library is not installed")

import phreeqc_bridge as pb  # noqa: E402

from optimiser.constants import H, database  # noqa: E402
from optimiser.equilibrium import build_system, solve  # noqa: E402

CASES = [
    ("Ca-EDTA pH 10", ("Ca",), ("EDTA",), {"Ca": 0.01, "EDTA": 0.01}, 10.0, False),
    ("Mg-EDTA pH 10", ("Mg",), ("EDTA",), {"Mg": 0.01, "EDTA": 0.01}, 10.0, False),
    ("Zn-NH3 pH 10", ("Zn",), ("NH3",), {"Zn": 0.001, "NH3": 0.1}, 10.0, False),
    ("Zn-EDTA-NH3 pH 10", ("Zn",), ("EDTA", "NH3"), {"Zn": 0.001, "EDTA": 0.001, "NH3": 0.1}, 10.0, False),
    ("Ca+Mg+EDTA+EBT pH 10", ("Ca", "Mg"), ("EDTA", "EBT"), {"Ca": 0.002, "Mg": 0.001, "EDTA": 0.0025, "EBT": 2e-5}, 10.0, False),
    ("Cu-EDTA pH 4", ("Cu",), ("EDTA", "acetate"), {"Cu": 0.005, "EDTA": 0.004, "acetate": 0.1}, 4.5, False),
    ("Mg(OH)2 precipitate pH 11", ("Mg",), (), {"Mg": 0.01}, 11.0, True),
    ("Ca beside Mg(OH)2 pH 12.5", ("Ca", "Mg"), ("EDTA",), {"Ca": 0.002, "Mg": 0.002, "EDTA": 0.001}, 12.5, True),
    # the sample's anions: carbonate and sulfate complexes, CaCO3 and the sulfate solids, the calcium phosphates
    ("CaCO3 from a hard water's carbonate pH 10", ("Ca", "Mg"), ("EDTA", "carbonate", "sulfate"),
     {"Ca": 0.002, "Mg": 0.001, "EDTA": 0.0005, "carbonate": 0.005, "sulfate": 0.001}, 10.0, True),
    ("BaSO4 and PbSO4 pH 5", ("Ba", "Pb"), ("sulfate", "chloride", "acetate"),
     {"Ba": 0.001, "Pb": 0.002, "sulfate": 0.005, "chloride": 0.01, "acetate": 0.05}, 5.0, True),
    ("calcium phosphate pH 12.5", ("Ca",), ("phosphate", "carbonate"), {"Ca": 0.002, "phosphate": 0.001, "carbonate": 1e-4},
     12.5, True),
    # the medium's Na+ and K+ as components (their pairs NaY3-, KY3-): the disodium titrant's Na+ past equivalence
    ("Ca-EDTA with Na+ and K+ pH 10", ("Ca", "Na", "K"), ("EDTA",), {"Ca": 0.01, "Na": 0.024, "K": 0.05, "EDTA": 0.012},
     10.0, False),
    ("Mg-EDTA with Na+ pH 12", ("Mg", "Na"), ("EDTA",), {"Mg": 0.002, "Na": 0.03, "EDTA": 0.003}, 12.0, False),
]


def _ours(system, ref, model, phases):
    tot = []
    for c in system.components:
        if c == H:
            tot.append(0.0)
            continue
        t = ref["total"][c]
        for name, row in zip(system.solids, system.nu_solid):
            t += ref["solids"].get(name, 0.0) * row[system.index(c)]
        tot.append(t)
    kw = {"log_Kw_shift": float(np.log10(ref["a_w"])), "include_solids": phases}
    if model == "ideal":
        kw.update(ionic_strength_M=0.0)
    else:
        # the inert Xx+ that PHREEQC adds to hold the pH (Fix_H+ with XxOH) counts in the ionic strength
        kw.update(ionic_strength_M=None, A=ref["A"], background_ionic_strength_M=0.5 * ref["inert_ions"])
    return solve(system, tot, pH=ref["pH"], **kw)


@pytest.mark.parametrize("model", ["ideal", "davies"])
@pytest.mark.parametrize("label,metals,ligands,totals,pH,phases", CASES, ids=[c[0] for c in CASES])
def test_free_concentrations_match_phreeqc_with_our_constants(label, metals, ligands, totals, pH, phases, model):
    """Free concentration of every component within 1e-5 relative of PHREEQC run on the same constants."""
    db = database()
    system = build_system(metals, ligands)
    ref = pb.speciate(system, db, totals, pH, model=model, phases=phases)
    eq = _ours(system, ref, model, phases)
    for c in system.components:
        if c == H or ref["free"][c] == 0:
            continue
        assert eq.free(c)[0] == pytest.approx(ref["free"][c], rel=1e-5), c
    if model == "davies":
        assert eq.ionic_strength_M[0] == pytest.approx(ref["ionic_strength"], rel=1e-5)
    for name, amount in ref["solids"].items():
        j = system.solids.index(name)
        assert eq.solid_amount[0, j] == pytest.approx(amount, rel=1e-5, abs=1e-12), name


def _shipped(db_name, text):
    p = phreeqc.Phreeqc()
    assert p.LoadBuiltInDatabase(db_name) == 0
    assert p.RunString(text) == 0, p.GetErrorString()
    return {k: v[-1] for k, v in p.GetSelectedOutput().items()}


@pytest.mark.parametrize("metal", ["Ca", "Mg"])
def test_free_metal_loosely_matches_shipped_minteq_v4(metal):
    """minteq.v4.dat as shipped (NIST 46 constants; its own mixed activity model, Na/K ion pairs): free M within
    0.3 log units of ours at pH 10, 0.01 m M + 0.01 m EDTA."""
    out = _shipped("minteq.v4.dat", f"""SOLUTION 1
  units mol/kgw
  pH 10
  {metal} 0.01
  Edta 0.01
SELECTED_OUTPUT 1
  -reset false
USER_PUNCH 1
  -headings free mu
  10 PUNCH MOL("{metal}+2"), MU
END
""")
    eq = solve(build_system((metal,), ("EDTA",)), [0.01, 0.01, 0.0], pH=10.0, ionic_strength_M=None)
    assert abs(np.log10(eq.free(metal)[0]) - np.log10(out["free"])) < 0.3


def test_zinc_ammonia_loosely_matches_shipped_llnl():
    """llnl.dat as shipped (its own Zn-ammine constants, b-dot activities): the free Zn fraction at pH 10 in 0.1 m total
    ammonia within 0.6 log units of ours (Harvey's constants; the two sets differ by about 0.5 in log beta4)."""
    out = _shipped("llnl.dat", """SOLUTION 1
  units mol/kgw
  pH 10.0
  Zn 0.001
  N(-3) 0.1
SELECTED_OUTPUT 1
  -reset false
USER_PUNCH 1
  -headings frac
  10 PUNCH MOL("Zn+2")/TOT("Zn")
END
""")
    eq = solve(build_system(("Zn",), ("NH3",)), [0.001, 0.1, 0.0], pH=10.0, ionic_strength_M=None, include_solids=False)
    ours = eq.free("Zn")[0] / 0.001
    assert abs(np.log10(ours) - np.log10(out["frac"])) < 0.6
