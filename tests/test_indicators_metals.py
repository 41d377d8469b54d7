"""Indicator constants against published values at more than one pH, the iron(III) indicator and its working
temperature, and the tin(II) and chromium(III) data.

The transition pM of a metal indicator is log K'(MIn) = log beta(MHhIn) - h pH - log alpha_In(H) - log alpha_M(OH)
(concentration pH scale). Each expected value below is recomputed by hand from the published constants named beside
it, never fitted to the check.
"""
import pytest

from optimiser.conditional import Conditions, conditional_constant, log_alpha_ligand_H, log_alpha_M_OH
from optimiser.constants import H, database
from optimiser.method import Method, Sample, as_titrated
from optimiser.objectives import acceptance_violations, titration_violations
from optimiser.candidate import Candidate
from optimiser.procedure import bench_method
from optimiser.scenario import load, parse
from optimiser.search import run_search
from optimiser.titration import simulate


def _transition_pM(metal: str, dye: str, pH: float, cond: Conditions) -> float:
    """log K'(M-dye) of the dye's 1:1 complex (with or without bound protons) at a pH, as the model holds it."""
    k = next(k for k in database().complexes[(metal, dye)] if k.stoichiometry[dye] == 1)
    h = k.stoichiometry.get(H, 0)
    return float(cond.log_K([k])[0] - h * pH - log_alpha_ligand_H(dye, pH, cond) - log_alpha_M_OH(metal, pH, cond))


# Eriochrome Black T and magnesium: log K(MgIn) 7.0 (Schwarzenbach and Biedermann 1948, 18 degC, 0.08 M, via the
# IUPAC SC-Database) with pKa 6.3 and 11.55 (Harris, as quoted; conditions not stated, stored at an assumed 0.1 M), all
# at the MgIn constant's 0.08 M and 18 degC: the pKa moved from 0.1 M by Davies (11.59, 6.33) and MgOH+ (MINTEQA2)
# included: 7.0 - log(1 + 10^(11.59 - pH) + 10^(17.92 - 2 pH)) - log alpha_Mg(OH) = 4.41, 5.39, 6.26 at pH 9, 10, 11
# (recomputed by hand; at pH 10 the same as the 5.44 of reference/indicators.md section 9 less those two corrections).
@pytest.mark.parametrize("pH,expected", [(9.0, 4.41), (10.0, 5.39), (11.0, 6.26)],
                         ids=["EBT-pMg-pH9-SB1948", "EBT-pMg-pH10-SB1948", "EBT-pMg-pH11-SB1948"])
def test_EBT_magnesium_transition_at_three_pH(pH, expected):
    cond = Conditions(ionic_strength_M=0.08, temperature_C=18.0, pH_scale="concentration")
    assert _transition_pM("Mg", "EBT", pH, cond) == pytest.approx(expected, abs=0.02)


# Xylenol orange and bismuth: K(Bi + H3L) 9.80 (Kantcheva, Nenova and Karadakov, Talanta 19 (1972) 1450, 1.0 M NaClO4,
# via the IUPAC SC-Database). At the source's medium the transition pBi' is 9.80 + log x(H3L) - log alpha_Bi(OH), with
# x(H3L) from the dye's acid constants (from memory: pKa 2.32, 2.85, 6.70, 10.47, 12.23 at 0.2 M, moved to 1 M by
# Davies) and alpha_Bi(OH) from Brown and Ekberg (2016): 6.84 at pH 1.5 and 7.15 at pH 2.0 (recomputed by hand).
@pytest.mark.parametrize("pH,expected", [(1.5, 6.84), (2.0, 7.15)], ids=["XO-pBi-pH1.5-Kantcheva1972",
                                                                         "XO-pBi-pH2.0-Kantcheva1972"])
def test_xylenol_orange_bismuth_transition_from_the_published_constant(pH, expected):
    cond = Conditions(ionic_strength_M=1.0, temperature_C=25.0, pH_scale="concentration")
    assert _transition_pM("Bi", "xylenol_orange", pH, cond) == pytest.approx(expected, abs=0.02)


def test_xylenol_orange_bismuth_is_the_published_constant_not_the_fitted_one():
    """The stored BiH3L row, with the dye's stored log beta3, gives back K(Bi + H3L) = 9.80 at 1.0 M (Kantcheva et al.
    1972); the value fitted to a practical transition pBi is gone."""
    db = database()
    cond = Conditions(ionic_strength_M=1.0, temperature_C=25.0)
    (k,) = db.complexes[("Bi", "xylenol_orange")]
    beta3 = next(p for p in db.protonation["xylenol_orange"] if p.stoichiometry[H] == 3)
    assert float(cond.log_K([k])[0] - cond.log_K([beta3])[0]) == pytest.approx(9.80, abs=0.01)
    assert k.quality == "published" and k.ref == "scdb_1972kna"


# Sulfosalicylic acid and iron(III): log K1 14.60 (Perrin, Nature 182 (1958) 741; 20 degC, 0.1 M KCl, via the IUPAC
# SC-Database), pKa 2.48 and 11.85 (NIST SRD 46, 25 degC, 0.1 M, as listed in a tool log; low confidence) and the
# MINTEQA2 hydrolysis of Fe3+ at 0.1 M by Davies: 14.60 - 11.37 - 0.03 = 3.19 at pH 1.5, 14.60 - 10.45 - 0.11 = 4.03 at
# pH 2.0 (recomputed by hand).
@pytest.mark.parametrize("pH,expected", [(1.5, 3.19), (2.0, 4.03)], ids=["SSA-pFe-pH1.5-Perrin1958",
                                                                         "SSA-pFe-pH2.0-Perrin1958"])
def test_sulfosalicylic_acid_iron_transition_from_published_constants(pH, expected):
    cond = Conditions(ionic_strength_M=0.1, temperature_C=25.0, pH_scale="concentration")
    assert _transition_pM("Fe(III)", "sulfosalicylic_acid", pH, cond) == pytest.approx(expected, abs=0.02)


TARGET_1 = parse("name: criteria\nsample: {volume: 50 mL}\nanalyte: {metals: {Fe(III): 1 mmol/L}}\n"
                 "titrant: {concentration: 0.01 M}\ntargets: {max_error_percent: 1.0}\n")


@pytest.mark.parametrize("pH", [1.5, 2.0], ids=["pH1.5-EN196-2", "pH2.0"])
def test_iron_with_sulfosalicylic_acid_at_its_working_temperature(pH):
    """Iron(III) at pH 1.5 (EN 196-2: pH 1.5, about 50 degC, sulfosalicylic acid) and at pH 2: titrated at the dye's
    working temperature, read where the violet vanishes, and every acceptance criterion is met."""
    t = simulate(Sample(50, {"Fe(III)": 1e-3}, ("Fe(III)",)), Method(pH, "nitric_acid", "EDTA", 0.01, "sulfosalicylic_acid"),
                 standardise=True, pH_drift=True)
    assert t.sample.temperature_C == 50.0
    assert t.colour_change == ("violet", "colourless")
    assert any("Titrated at 50 degC" in a for a in t.assumptions)
    assert acceptance_violations(TARGET_1, t) == []
    assert abs(t.error_percent) < 1.0


def test_the_indicator_temperature_leaves_other_methods_at_the_sample_temperature():
    s = Sample(50, {"Bi": 2e-3}, ("Bi",), temperature_C=20.0)
    assert as_titrated(s, Method(1.8, "nitric_acid", "EDTA", 0.01, "xylenol_orange")) is s
    assert simulate(s, Method(1.8, "nitric_acid", "EDTA", 0.01, "xylenol_orange")).sample.temperature_C == 20.0


def test_search_designs_iron_beside_aluminium_and_calcium():
    """Our own cement-like digest (Fe(III) beside Al and Ca): the search proposes a feasible direct iron titration at
    pH about 1.5-2 with sulfosalicylic acid, warmed to 50 degC, as published practice does (EN 196-2: pH 1.5, about
    50 degC, sulfosalicylic acid; the conditions as stated in issue 11, the standard's text not read). It failed while
    the search read this digest's end points on curves too coarse for iron beside much calcium (aluminium then seemed
    0.7 % co-titrated at pH 3)."""
    sc = load("scenarios/cement_iron.yaml")
    r = run_search(sc, seed=1, pop_size=24, n_gen=6, with_robustness=False)
    c, t = r.recommended.candidate, r.recommended_titration
    assert r.meets_criteria and r.recommended.feasible
    assert c.indicator == "sulfosalicylic_acid" and 1.3 <= c.pH <= 2.5
    assert t.sample.temperature_C == 50.0 and abs(t.standardised_error_percent) <= 1.0
    steps = bench_method(sc, t.method, t, r.recommended.margin).procedure
    assert any(s.startswith("Warm the solution to 50 degC") for s in steps)


# Tin(II) and chromium(III) with EDTA: the NIST SRD 46 values at I = 0 (MINTEQA2) go back by the model's Davies
# correction to the measurements they came from, plus the 0.292 that moves NIST's EDTA constants to the basis of the
# NEA acid constants (data/README.md): Sn(II) 18.3 at 1.0 M NaClO4, 20 degC (Bottari, Liberti and Rufolo 1968);
# Cr(III) 23.40 at 0.1 M KCl, 20 degC (Pecsok, Shields and Schaefer 1964); both via the IUPAC SC-Database.
@pytest.mark.parametrize("metal,I,published", [("Sn(II)", 1.0, 18.3), ("Cr(III)", 0.1, 23.40)],
                         ids=["SnY-Bottari1968", "CrY-Pecsok1964"])
def test_tin_and_chromium_EDTA_constants_return_to_their_measurements(metal, I, published):
    cond = Conditions(ionic_strength_M=I, temperature_C=20.0)
    k = conditional_constant(metal, "EDTA", 7.0, cond=cond).log_K
    assert float(k) == pytest.approx(published + 0.292, abs=0.05)


def test_chromium_is_slow_direct_and_titrated_back_after_heating():
    """Cr(III) forms its EDTA complex slowly at room temperature (common practice): a direct titration is ruled out
    with a warning; a back-titration with zinc after boiling with the excess meets the criteria."""
    s = Sample(50, {"Cr(III)": 1e-3}, ("Cr(III)",))
    sc = parse("name: chromium\nsample: {volume: 50 mL}\nanalyte: {metals: {Cr(III): 1 mmol/L}}\n"
               "titrant: {concentration: 0.01 M}\ntargets: {max_error_percent: 1.0}\n")
    direct = Method(5.5, "acetate", "EDTA", 0.01, "xylenol_orange")
    t = simulate(s, direct)
    assert t.slow_analytes == ("Cr(III)",) and any("reacts too slowly" in w for w in t.warnings)
    cand = Candidate(pH=5.5, buffer="acetate", log_buffer=-1.0, titrant="EDTA", masking=(), indicator="xylenol_orange",
                     mode="direct", back_metal="Zn")
    assert "slow" in [k for k, _ in titration_violations(sc, cand, t)]
    back = simulate(s, Method(5.5, "acetate", "EDTA", 0.01, "xylenol_orange", mode="back", back_metal="Zn"),
                    standardise=True)
    assert any("only on heating" in a for a in back.assumptions)
    assert acceptance_violations(sc, back) == [] and abs(back.error_percent) < 2.0


def test_new_metals_have_their_solids_and_hydrolysis():
    """Sn(II) and Cr(III) carry hydrolysis constants and a hydroxide or oxide solid with sources (MINTEQA2 / NIST)."""
    db = database()
    for m, solid in (("Sn(II)", "SnO"), ("Cr(III)", "Cr(OH)3")):
        assert len(db.hydrolysis[m]) >= 3 and all(k.ref == "nist46_minteq4" for k in db.hydrolysis[m])
        assert solid in {s.name for s in db.solids[m]} and all(s.constant.ref == "nist46_minteq4" for s in db.solids[m])



def test_report_of_a_chromium_back_titration_renders(tmp_path):
    """Chromium(III) boiled with the excess can be held inert entirely through the back-titration (at pH 8.79 with
    ammonia and PAN, as a full search recommended), so it has no free-ion curve: the report leaves that line out
    instead of failing (regression: matplotlib failed on an all-NaN marked line)."""
    from dataclasses import replace

    import numpy as np

    from optimiser import report
    from optimiser.analysis import analyse
    sc = parse("name: chromium-back\nsample: {volume: 50 mL}\nanalyte: {metals: {Cr(III): 1 mmol/L}}\n"
               "titrant: {concentration: 0.01 M}\ntargets: {max_error_percent: 2.0}\n"
               "search: {pH: [8.7, 8.9], titrants: [EDTA], buffers: [ammonia], indicators: [PAN], modes: [back],"
               " back_metals: [Zn], max_masking_agents: 0}\n")
    r = run_search(sc, seed=1, pop_size=12, n_gen=2, with_robustness=False)
    t = simulate(sc.sample, Method(8.79, "ammonia", "EDTA", 0.01, "PAN", buffer_total_M=10 ** -0.904, mode="back",
                                   back_metal="Zn"), pH_drift=True, standardise=True)
    # the case the renderer must take: chromium held inert entirely, no free-ion curve (with the medium's Na+ pair a
    # trace of free Cr(III), pM 26-36, now remains at this point, so the all-NaN line is set here)
    t = replace(t, pM={**t.pM, "Cr(III)": np.full_like(t.pM["Cr(III)"], np.nan)})
    assert not np.isfinite(t.pM["Cr(III)"]).any()
    out = tmp_path / "cr.html"
    report.FORMATS["html"](analyse(replace(r, recommended_titration=t)), out)
    assert "<svg" in out.read_text()
