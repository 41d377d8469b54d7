"""The sample's own anions (issue 11): scenario input, their constants and solids in the equilibrium, and the
procedure's answer to them.

Published values used (each named beside its check):
- NIST SRD 46 as stored in MINTEQA2 v4 (minteq.v4.dat, I = 0, 25 degC): HCO3- 10.329, H2CO3 16.681, CaCO3(aq) 3.2,
  CaHCO3+ 11.599, CaOH+ 1.30 (OH- form), log Kw -13.997; calcite log Ksp -8.48, barite -9.98, anglesite -7.79.
- Plummer and Busenberg, Geochim. Cosmochim. Acta 46 (1982) 1011: calcite log Ksp -8.48 and log K2 -10.329 at 25 degC
  (from memory), the values the compilation above adopted.
- Standard Methods 2320 B: alkalinity [mg CaCO3/L] = meq/L x 50.04.
- AOAC 973.52 and Standard Methods 2340 C: CaCO3 precipitates above pH 10; the titration is finished within 5 minutes
  of adding the buffer.
"""
from pathlib import Path

import numpy as np
import pytest

from optimiser.candidate import Candidate
from optimiser.equilibrium import build_system, solve
from optimiser.errors import ScenarioError
from optimiser.objectives import titration_violations
from optimiser.procedure import bench_method
from optimiser.results import titration_json
from optimiser.scenario import demo, load, parse
from optimiser.titration import Method, Sample, plan, simulate, standard_sample

A_DAVIES = 0.5091  # passed to the model too, so that the check below isolates the constants and the bookkeeping
I = 0.1


def _log_gamma(z: int) -> float:
    """Davies (1962): log10 gamma = -A z^2 (sqrt I / (1 + sqrt I) - 0.3 I)."""
    s = np.sqrt(I)
    return -A_DAVIES * z * z * (s / (1 + s) - 0.3 * I)


def _calcite_SI(Ca_T: float, C_T: float, pH: float) -> float:
    """log10(IAP / Ksp) of calcite in a solution of Ca_T and C_T [mol/L] at pH (activity scale), computed here from
    the published constants (NIST SRD 46 via minteq.v4.dat, I = 0, 25 degC) with Davies at I = 0.1 M, by a fixed-point
    iteration on the two mass balances (no solid)."""
    g1, g2 = 10 ** _log_gamma(1), 10 ** _log_gamma(2)
    aH = 10.0 ** -pH
    aOH = 10.0 ** -13.997 / aH
    Ca, CO3 = Ca_T, C_T
    for _ in range(200):
        # carbonate: CO3 2-, HCO3-, H2CO3, CaCO3(aq), CaHCO3+
        CO3 = C_T / (1 + 10 ** 10.329 * aH * g2 / g1 + 10 ** 16.681 * aH ** 2 * g2
                     + 10 ** 3.2 * g2 * g2 * Ca + 10 ** 11.599 * g2 * g2 * aH * Ca / g1)
        # calcium: Ca2+, CaOH+, CaCO3(aq), CaHCO3+
        Ca = Ca_T / (1 + 10 ** 1.30 * g2 * aOH / g1 + 10 ** 3.2 * g2 * g2 * CO3 + 10 ** 11.599 * g2 * g2 * aH * CO3 / g1)
    return float(np.log10(g2 * Ca * g2 * CO3) + 8.48)


def test_stored_carbonate_constants_are_the_published_ones():
    """Calcite log Ksp -8.48 and log K2 10.329 (Plummer and Busenberg 1982, from memory; NIST SRD 46)."""
    from optimiser.constants import database
    db = database()
    calcite = next(s for s in db.solids["Ca"] if s.name == "CaCO3").constant
    assert -calcite.log_K == pytest.approx(-8.48, abs=0.005)
    assert db.protonation["carbonate"][0].log_K == pytest.approx(10.329, abs=0.005)


@pytest.mark.parametrize("pH", [7.5, 8.3, 10.0, 12.5])
def test_calcite_saturation_matches_the_published_constants(pH):
    """The model's calcite saturation index in 2 mM Ca + 5 mM carbonate (no solid allowed) equals the one computed
    here from the published constants (NIST SRD 46, Davies at I = 0.1 M)."""
    system = build_system(("Ca",), ("carbonate",))
    eq = solve(system, [2e-3, 5e-3, 0.0], pH=pH, ionic_strength_M=I, A=A_DAVIES, include_solids=False)
    si = eq.saturation_index[0, system.solids.index("CaCO3")]
    assert si == pytest.approx(_calcite_SI(2e-3, 5e-3, pH), abs=1e-4)


@pytest.mark.parametrize("metal,log_Ksp", [("Ba", -9.98), ("Pb", -7.79)], ids=["barite-NIST46", "anglesite-NIST46"])
def test_sulfate_solid_holds_its_published_solubility_product(metal, log_Ksp):
    """With the sulfate solid present, the free metal and sulfate satisfy {M}{SO4} = Ksp (NIST SRD 46: barite -9.98,
    anglesite -7.79), activities by Davies at I = 0.1 M; 1 mM metal in 5 mM sulfate at pH 5 precipitates."""
    system = build_system((metal,), ("sulfate",))
    eq = solve(system, [1e-3, 5e-3, 0.0], pH=5.0, ionic_strength_M=I, A=A_DAVIES)
    name = f"{metal}SO4"
    assert name in eq.solids_present(0)
    g2 = 10 ** _log_gamma(2)
    assert np.log10(g2 * eq.free(metal)[0] * g2 * eq.free("sulfate")[0]) == pytest.approx(log_Ksp, abs=1e-6)


def test_alkalinity_as_CaCO3_is_two_equivalents():
    """250 mg/L alkalinity as CaCO3 is 250 / 50.04 = 4.996 meq/L (Standard Methods 2320 B), taken as HCO3-."""
    s = parse(_scenario("    alkalinity: 250 mg/L as CaCO3\n"))
    assert s.sample.anions == {"carbonate": pytest.approx(250 / 50.04 / 1000, rel=2e-4)}
    assert any("hydrogencarbonate" in n for n in s.sample.anion_notes)


@pytest.mark.parametrize("text,ligand,mol_L", [
    ("    sulfate: 96.06 mg/L\n", "sulfate", 1e-3),            # SO4 = 96.06 g/mol (common practice)
    ("    sulphate: 2 mmol/L\n", "sulfate", 2e-3),
    ("    phosphate: 0.3097 mg/L as P\n", "phosphate", 1e-5),  # P = 30.97 g/mol
    ("    chloride: 35.45 mg/L\n", "chloride", 1e-3),          # Cl = 35.45 g/mol
    ("    bicarbonate: 61.02 mg/L\n", "carbonate", 1e-3),      # HCO3 = 61.02 g/mol
    ("    carbonate: 12.01 mg/L as C\n", "carbonate", 1e-3),
], ids=["sulfate-mass", "sulphate-alias", "phosphate-as-P", "chloride", "bicarbonate", "carbonate-as-C"])
def test_anions_read_as_analysts_write_them(text, ligand, mol_L):
    assert parse(_scenario(text)).sample.anions == {ligand: pytest.approx(mol_L, rel=1e-3)}


@pytest.mark.parametrize("text,message,line", [
    ("    sulphat: 1 mmol/L\n", "unknown sample anion 'sulphat'; did you mean sulfate?", 6),
    ("    carbonate: 2 mmol/L\n    alkalinity: 100 mg/L as CaCO3\n", "both give the sample's carbonate", 7),
    ("    sulfate: 40 mg/L as Ca\n", "sulfate may be given 'as' SO4 or S", 6),
    ("    sulfate: 40\n", "give a unit", 6),
    ("    chloride: -3 mmol/L\n", "cannot be negative", 6),
    ("    chloride: .nan mmol/L\n", "cannot read", 6),
    ("    chloride: 20 mol/L\n", "must be between 1e-12 and 10 mol/L", 6),
], ids=["did-you-mean", "twice", "as-formula", "no-unit", "negative", "nan", "range"])
def test_bad_anions_are_refused_where_they_stand(text, message, line):
    with pytest.raises(ScenarioError) as exc:
        parse(_scenario(text))
    assert message in str(exc.value)
    assert exc.value.line == line


def test_anions_must_be_a_mapping():
    with pytest.raises(ScenarioError, match="sample.anions must be a mapping"):
        parse(_scenario("").replace("  anions:\n", "  anions: [carbonate]\n"))


def test_old_scenarios_stay_valid_and_hold_no_anions():
    """Every shipped scenario (none gives anions, except where its file says so) and the built-in demo still load."""
    for path in sorted(Path(__file__).parents[1].joinpath("scenarios").glob("*.yaml")):
        s = load(path)
        assert set(s.sample.anions) <= {"carbonate", "sulfate", "phosphate", "chloride"}, path
    assert demo().sample.anions == {}


def test_anions_are_components_diluted_along_the_curve():
    """The anion's total follows V0 / (V0 + V), like the metals'; the primary standard holds no anions."""
    sample = Sample(50, {"Ca": 2e-3}, ("Ca",), anions={"carbonate": 5e-3, "sulfate": 1e-3})
    p = plan(sample, Method(10.0, "ammonia", "EDTA", 0.01, "EBT"), 11)
    V = np.array([0.0, 10.0, 25.0])
    T = p.totals(V)
    for anion, c in sample.anions.items():
        assert T[:, p.system.index(anion)] == pytest.approx(c * 50 / (50 + V))
    assert standard_sample(sample).anions == {}


def test_carbonate_at_pH_12_5_warns_about_CaCO3_with_the_remedies():
    """Calcium alone at pH 12.5 in a water with 300 mg/L alkalinity as CaCO3: CaCO3 is predicted before the titrant
    is added and gone at the end point; the method is not failed for it, and the bench procedure adds most of the
    titrant first, keeps the five-minute rule and offers to drive off CO2 (AOAC 973.52; Standard Methods 2340 C)."""
    scenario = parse(_scenario("    alkalinity: 300 mg/L as CaCO3\n", analyte="Ca: 80 mg/L", interferents="Mg: 12 mg/L"))
    method = Method(12.5, "NaOH", "EDTA", 0.01, "calcon_carboxylic")
    t = simulate(scenario.sample, method)
    assert "CaCO3" in t.precipitates_start and "CaCO3" not in t.precipitates_end
    facts = [f for f in t.findings if f.kind == "anion_solid_dissolves"]
    assert len(facts) == 1 and facts[0].values["solid"] == "CaCO3"
    # 2.0 mM Ca and 6.0 mM carbonate: nearly all the calcium is held as CaCO3 at equilibrium before the titrant
    assert facts[0].values["share"] > 90
    assert t.analyte_precipitates == ()
    candidate = Candidate(12.5, "NaOH", -1.0, "EDTA", (), "calcon_carboxylic", "direct", "Zn")
    assert "analyte_solid" not in {k for k, _ in titration_violations(scenario, candidate, t)}
    steps = " ".join(bench_method(scenario, method, t, None).procedure)
    assert "90 % of the expected titre" in steps and "5 minutes" in steps and "drive off CO2" in steps
    # the JSON names the solid with its amount before the titrant, in mmol/L
    doc = titration_json(t)
    assert doc["solids_start_mmol_L"]["CaCO3"] == pytest.approx(facts[0].values["amount_mM"], rel=1e-3)


def test_lead_sulfate_fails_a_direct_lead_titration_and_names_its_amount():
    """2 mM lead in 5 mM sulfate at pH 5.5: PbSO4 (NIST SRD 46 log Ksp -7.79) holds most of the lead before the
    titrant is added; sulfate cannot be driven off, so the direct method is failed for it."""
    sample = Sample(25, {"Pb": 2e-3}, ("Pb",), anions={"sulfate": 5e-3})
    t = simulate(sample, Method(5.5, "hexamine", "EDTA", 0.01, "xylenol_orange"))
    assert "PbSO4" in t.analyte_precipitates
    fact = next(f for f in t.findings if f.kind == "anion_solid" and f.values["solid"] == "PbSO4")
    assert fact.values["share"] > 50 and fact.values["amount_mM"] == pytest.approx(2 * fact.values["share"] / 100, rel=1e-6)
    assert "PbSO4 (Pb with the sample's sulfate) precipitates" in fact.text


def test_barium_sulfate_takes_barium_out_of_a_calcium_titration():
    """0.2 mM Ba beside 2 mM Ca with 1 mM sulfate at pH 12.5: BaSO4 holds more than 99 % of the barium (its
    solubility, NIST SRD 46 log Ksp -9.98, leaves well under 1 % in solution) and is named with its amount."""
    sample = Sample(50, {"Ca": 2e-3, "Ba": 0.2e-3}, ("Ca",), anions={"sulfate": 1e-3})
    t = simulate(sample, Method(12.5, "NaOH", "EDTA", 0.01, "calcon_carboxylic"))
    fact = next(f for f in t.findings if f.kind == "anion_solid" and f.values["solid"] == "BaSO4")
    assert fact.values["share"] > 99
    assert t.analyte_precipitates == ()


def _scenario(anions: str, analyte: str = "Ca: 64 mg/L", interferents: str = "Mg: 14 mg/L") -> str:
    return f"""name: anion test
sample:
  volume: 50 mL
  ionic_strength: 0.1 M
  anions:
{anions}analyte:
  metals: {{{analyte}}}
interferents: {{{interferents}}}
titrant: {{concentration: 0.01 M}}
"""
