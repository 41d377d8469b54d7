"""Determination by difference: calcium + magnesium at pH 10 (EBT), calcium alone at pH 12-13 (a calcon-type dye),
magnesium from the difference (Standard Methods 2340 C and 3500-Ca B; /work/shared/reference/standards.md)."""
import textwrap

import pytest

from optimiser.analysis import safety
from optimiser.candidate import Candidate
from optimiser.evaluation import Evaluator
from optimiser.scenario import parse

SCENARIO = textwrap.dedent("""
    name: magnesium beside more calcium (an invented demo)
    sample: {volume: 50 mL}
    analyte:
      - {metals: {Mg: 0.8 mmol/L}}
      - {metals: {Ca: 1.6 mmol/L}}
    titrant: {concentration: 0.01 M}
    targets: {max_error_percent: 1.0}
""")


def _candidate(pH=13.0, indicator="calcon_carboxylic"):
    return Candidate(10.0, "ammonia", -0.5, "EDTA", (), "EBT", "difference", "Zn",
                     extra=(("co", "Ca"), ("stage_buffer", 0), ("stage_indicator", indicator), ("stage_pH", pH)))


@pytest.fixture(scope="module")
def evaluated():
    sc = parse(SCENARIO)
    return sc, Evaluator(sc).evaluate([_candidate()])[0]


def test_magnesium_by_difference_is_feasible_with_its_error_stated(evaluated):
    """Ca + Mg at pH 10 with EBT, Ca at pH 13 with calconcarboxylic acid: the magnesium result (by difference) meets
    the 1 % target; its error is the governing figure and is stated."""
    sc, e = evaluated
    t = e.titration
    labels = [ep.label for ep in t.endpoints]
    assert labels == ["Mg, Ca", "Ca", "Mg (by difference)"]
    mg = t.endpoints[2]
    assert mg.derived and t.result is mg
    assert e.feasible, e.violations
    assert abs(e.standardised_error_percent) < sc.targets.max_error_percent
    assert e.standardised_error_percent == mg.standardised_percent


def test_the_error_propagates_from_both_aliquots(evaluated):
    """n_Mg = n_1 - n_2, so e_Mg = (n_1 e_1 - n_2 e_2) / n_Mg, and the budget (each aliquot's parts scaled by its
    share) adds up to it, before and after standardisation."""
    _, e = evaluated
    t = e.titration
    one, two, mg = t.endpoints
    n1, n2, nMg = 0.05 * 2.4e-3, 0.05 * 1.6e-3, 0.05 * 0.8e-3
    assert mg.error_percent == pytest.approx((n1 * one.error_percent - n2 * two.error_percent) / nMg, rel=1e-9)
    assert mg.standardised_percent == pytest.approx((n1 * one.standardised_percent - n2 * two.standardised_percent)
                                                    / nMg, rel=1e-9)
    assert sum(mg.budget.values()) == pytest.approx(mg.error_percent, abs=1e-6)
    assert sum(mg.standardised_parts.values()) == pytest.approx(mg.standardised_percent, abs=1e-6)
    assert mg.volume_mL == pytest.approx(one.volume_mL - two.volume_mL)
    assert any(k.startswith("step 2: ") for k in mg.budget)


def test_two_aliquots_do_not_carry_over_and_cost_more(evaluated):
    sc, e = evaluated
    t = e.titration
    assert t.endpoints[1].start_mL >= t.steps[0].volume_mL[-1] - 1e-9  # drawn after the first curve
    assert "second_aliquot" in {f.kind for f in t.findings}
    assert t.titre_mL == pytest.approx(max(t.steps[0].titre_mL, t.steps[1].titre_mL))
    assert e.F[sc.objectives.index("complexity")] >= 1.5
    names = [item.name for item in safety(e.candidate.method(sc))]
    assert any("sodium hydroxide" in n for n in names)  # the second aliquot's alkali and its cautions


def test_the_search_proposes_the_difference_with_the_magnesium_error():
    """Magnesium beside twice as much calcium, the search limited to EDTA, EBT or calconcarboxylic acid, ammonia or
    NaOH (so that it is quick): a single titration cannot give magnesium alone, the difference can; the recommended
    method is the difference, its magnesium error stated and within the 1 % target."""
    from optimiser.search import run_search

    sc = parse(SCENARIO.replace("targets:", "search: {pH: [9.0, 13.2], buffers: [ammonia, NaOH], indicators: [EBT, "
                                "calcon_carboxylic], titrants: [EDTA], masking: [], max_masking_agents: 0, modes: "
                                "[direct, difference]}\ntargets:"))
    r = run_search(sc, seed=1, pop_size=24, n_gen=10, with_robustness=False)
    assert r.meets_criteria
    rec = r.recommended
    assert rec.candidate.mode == "difference"
    t = r.recommended_titration
    assert t.result.derived and t.result.label.startswith("Mg")
    assert abs(rec.standardised_error_percent) < 1.0
    assert dict(rec.candidate.extra)["stage_pH"] >= 12.0  # calcium alone where Mg(OH)2 has precipitated
