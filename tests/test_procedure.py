"""The bench procedure: buffer recipes from the reagent data, hydroxide and acid at the sample's conditions, and steps
decided on the simulated facts (slow analytes, the strategy's second standard), not on names or prose."""
import dataclasses
import math
import re

import pytest

from optimiser.method import Method, Sample
from optimiser.procedure import (ACID_SALT_AND_BASE_SOLUTION, BASE_AND_STRONG_ACID, BASE_SALT_AND_ACID_SOLUTION,
                                 STRONG_ACID, STRONG_BASE, buffer_recipe, free_hydrogen_M, free_hydroxide_M,
                                 masking_doses, recipe_kind, result_formula)
from optimiser.bench_steps import written_method
from optimiser.quantities import pipette_mL
from optimiser.reagents import catalogue
from optimiser.scenario import parse
from optimiser.titration import simulate

AL_BACK = """
name: al-back
sample: {volume: 25 mL}
analyte: {metals: {Al: 2 mmol/L}}
titrant: {concentration: 0.02 M}
"""


@pytest.mark.parametrize("buffer,kind", [
    ("ammonia", ACID_SALT_AND_BASE_SOLUTION),  # NH4Cl weighed, ammonia solution measured
    ("acetate", BASE_SALT_AND_ACID_SOLUTION),  # sodium acetate weighed, acetic acid measured
    ("hexamine", BASE_AND_STRONG_ACID),  # hexamine weighed, partly protonated by HCl
    ("NaOH", STRONG_BASE),
    ("nitric_acid", STRONG_ACID),
])
def test_recipe_kind_of_each_buffer(buffer, kind):
    """Each buffer of the data gets the recipe its declared solutions and salts call for."""
    assert recipe_kind(catalogue().buffer(buffer)) == kind


@pytest.mark.parametrize("buffer", ["ammonia", "acetate", "hexamine", "NaOH", "nitric_acid"])
def test_recipe_kind_does_not_read_the_id(buffer):
    """The same entry under another id is made up the same way."""
    b = catalogue().buffer(buffer)
    renamed = dataclasses.replace(b, id="renamed")
    assert recipe_kind(renamed) == recipe_kind(b)


def test_free_hydroxide_at_25C_and_0_1M():
    """[OH-] = 10**(pH - pKw) / gamma with pKw 13.997 (water.csv) and gamma 0.781 (Davies, A 0.5108, I 0.1 M)."""
    gamma = 10 ** (-0.5108 * (math.sqrt(0.1) / (1 + math.sqrt(0.1)) - 0.03))
    assert gamma == pytest.approx(0.781, abs=0.001)
    assert free_hydroxide_M(12.5, 0.1, 25.0) == pytest.approx(10 ** (12.5 - 13.997) / gamma, rel=1e-3)
    assert free_hydrogen_M(2.0, 0.1, 25.0) == pytest.approx(0.01 / gamma, rel=1e-3)


def test_water_ionisation_moves_with_temperature():
    """pKw 13.26 at 50 degC (common tables, from memory; van 't Hoff with a constant enthalpy gives about 13.24);
    at I = 0 gamma is 1, so [H+][OH-] is Kw itself."""
    pKw_50 = -math.log10(free_hydroxide_M(7.0, 0.0, 50.0) * free_hydrogen_M(7.0, 0.0, 50.0))
    assert pKw_50 == pytest.approx(13.26, abs=0.04)
    assert -math.log10(free_hydroxide_M(7.0, 0.0, 25.0) * 1e-7) == pytest.approx(13.997, abs=1e-6)


def test_strong_base_recipe_counts_free_hydroxide_and_precipitates():
    """mL of 1 M NaOH = aliquot x [OH-] at the sample's conditions + the hydroxide the solids take up."""
    naoh = catalogue().buffer("NaOH")
    steps = buffer_recipe(naoh, 0.0, 12.5, 50.0, 0.05, 22.0, extra_OH_mmol=0.2)
    expected = 50.0 * free_hydroxide_M(12.5, 0.05, 22.0) + 0.2
    assert f"about {expected:.2f} mL sodium hydroxide 1 M" in steps[0]
    assert steps[-1] == "adjust to pH 12.50 with a calibrated pH meter"
    assert expected != pytest.approx(50.0 * 10 ** (12.5 - 14.0) / 0.78 + 0.2, rel=0.02)  # the old fixed pKw and gamma


def test_ammonia_recipe_splits_the_total_between_its_forms():
    """At any pH the NH4Cl and NH3 amounts add up to the total in the aliquot; NH4Cl is weighed (53.49 g/mol)."""
    steps = buffer_recipe(catalogue().buffer("ammonia"), 0.1, 9.3, 50.0, 0.1, 25.0)
    n_acid, mg, v_base, n_base = map(float, re.match(
        r"([\d.]+) mmol NH4Cl \((\d+) mg\) and ([\d.]+) mL .*\(([\d.]+) mmol NH3\)", steps[0]).groups())
    assert n_acid + n_base == pytest.approx(5.0, rel=2e-3)
    assert mg == pytest.approx(n_acid * 53.49, abs=0.6)
    assert v_base == pytest.approx(n_base / 13.4, abs=0.006)
    assert 0.3 < n_base / 5.0 < 0.7  # pH close to the pKa of NH4+ (about 9.3 at I = 0.1 M)


def test_masking_dose_in_mg_and_uL():
    m = Method(pH=10.0, buffer="ammonia", titrant="EDTA", titrant_conc_M=0.01, indicator="EBT", masking=(("TEA", 0.01),))
    (dose,) = masking_doses(m, 50.0)
    assert dose.mmol_per_aliquot == pytest.approx(0.5)
    assert dose.grams_per_aliquot == pytest.approx(0.5 * 149.19 / 1000, rel=1e-3)  # C6H15NO3


@pytest.fixture(scope="module")
def al_back():
    sc = parse(AL_BACK, "al.yaml")
    method = Method(pH=5.5, buffer="acetate", buffer_total_M=0.1, titrant="EDTA", titrant_conc_M=0.02,
                    indicator="xylenol_orange", mode="back", back_metal="Zn")
    return sc, method, simulate(sc.sample, method)


def _written(sc, method, t):
    return written_method(sc, method, t, result_formula(sc, method))


def _steps(sc, method, t):
    return list(_written(sc, method, t).procedure)


def _index(steps, needle):
    return next(k for k, x in enumerate(steps) if needle in x)


def test_slow_analyte_gets_its_excess_and_boil_before_the_buffer(al_back):
    sc, method, t = al_back
    assert t.slow_analytes == ("Al",)
    steps = _steps(sc, method, t)
    boil, buffer = _index(steps, "boil"), _index(steps, "adjust to pH")
    assert boil < buffer and "(an excess)" in steps[boil] and "Zn standard" in steps[-3]
    # the excess is a volumetric pipette's volume, at least the simulated excess (common practice)
    assert f"Pipette {pipette_mL(t.excess_mL, at_least=True):g} mL of EDTA 0.02 mol/L (an excess)" in steps[boil]
    assert pipette_mL(t.excess_mL, at_least=True) >= t.excess_mL


def test_the_procedure_reads_the_fact_not_the_assumption_text(al_back):
    """Without the worded assumptions the boil stays; without the slow analyte it goes."""
    sc, method, t = al_back
    assert any("boil" in x for x in _steps(sc, method, dataclasses.replace(t, findings=())))
    quick = _steps(sc, method, dataclasses.replace(t, slow_analytes=()))
    assert not any("boil" in x for x in quick)
    assert _index(quick, "adjust to pH") < _index(quick, "(an excess) into the flask")  # then after the buffer


def test_direct_titration_steps_and_formula():
    sc = parse(AL_BACK.replace("Al: 2 mmol/L", "Zn: 2 mmol/L"), "zn.yaml")
    method = Method(pH=5.5, buffer="acetate", buffer_total_M=0.1, titrant="EDTA", titrant_conc_M=0.02, indicator="xylenol_orange")
    t = simulate(Sample(25.0, {"Zn": 0.002}, ("Zn",)), method)
    w = _written(sc, method, t)
    steps = w.procedure
    assert steps[-3].startswith("Add Xylenol orange") and "titrate with EDTA 0.02 mol/L" in steps[-3]
    assert "back-titration" not in " ".join(steps) and "boil" not in " ".join(steps)
    # the standard at the sample's level (2 mmol/L): 2 mmol/L x 65.38 g/mol = 131 mg zinc per litre, pipetted as the sample
    assert w.standardisation[0].startswith("Primary standard: dissolve about 131 mg zinc metal")
    assert w.standardisation[1].startswith("Pipette 25 mL of the primary standard into a titration flask and carry it")
    assert steps[-2].startswith("Reagent blank")
    assert result_formula(sc, method).startswith("c(Zn) [mmol/L] = 0.02 mol/L x V(titrant) [mL] / 25 mL x 1000")
    assert w.calculation[0].startswith("c(Zn) [mmol/L] = c(titrant) [mol/L] x (V - Vb) [mL] / 25 mL x 1000")


def test_an_acid_preserved_sample_is_neutralised_before_the_buffer():
    """A sample preserved with acid (20 mmol/L H+) has it neutralised before the buffer goes in, so that the buffer
    keeps the capacity that holds the pH (common practice; the water standards' samples are acidified at sampling)."""
    sc = parse(AL_BACK.replace("Al: 2 mmol/L", "Zn: 2 mmol/L"), "zn.yaml")
    sc = dataclasses.replace(sc, sample=dataclasses.replace(sc.sample, acid_M=0.02))
    method = Method(pH=5.5, buffer="acetate", buffer_total_M=0.1, titrant="EDTA", titrant_conc_M=0.02, indicator="xylenol_orange")
    t = simulate(sc.sample, method)
    steps = _steps(sc, method, t)
    neutral = _index(steps, "Neutralise the sample's own acid (0.50 mmol H+ in the aliquot)")
    assert neutral < _index(steps, "adjust to pH") and "add 0.50 mL of sodium hydroxide (1 mol/L" in steps[neutral]


def test_the_buffer_comes_from_its_stock_in_a_measurable_volume():
    """The acetate stock (2 mol/L total) for 0.1 mol/L in 25 mL: 1.25 mL, measured as 1.2 or 1.3 mL (two significant
    figures); its per-litre recipe splits the total as the acetate fractions at pH 5.5 give it."""
    sc = parse(AL_BACK.replace("Al: 2 mmol/L", "Zn: 2 mmol/L"), "zn.yaml")
    method = Method(pH=5.5, buffer="acetate", buffer_total_M=0.1, titrant="EDTA", titrant_conc_M=0.02, indicator="xylenol_orange")
    w = _written(sc, method, simulate(sc.sample, method))
    buffer = next(a for a in w.additions if "acetate buffer" in a.what)
    assert buffer.volume_mL in (1.2, 1.3)
    row = next(s for s in w.stocks if s.role == "buffer")
    grams, acid_mL = map(float, re.match(r"per litre: (\d+) g C2H3NaO2·3H2O and (\d+) mL glacial", row.per_litre).groups())
    assert 150 < grams < 272 and 5 < acid_mL < 60  # between all-base (2 x 136.08 g) and half (pKa about 4.6)
