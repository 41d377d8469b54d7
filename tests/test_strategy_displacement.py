"""Displacement: magnesium-EDTA added so that a calcium indicator responds (its own module, its own tests)."""
import pytest

from optimiser.errors import InputError
from optimiser.method import Method, Sample
from optimiser.strategies import REGISTRY
from optimiser.titration import DROP_mL, simulate

CALCIUM = Sample(50, {"Ca": 0.002}, ("Ca",))


@pytest.mark.parametrize("indicator", ["EBT", "calmagite"])
def test_calcium_alone_needs_the_magnesium_complex(indicator):
    """Standard Methods 2340 C: calcium alone gives no sharp end point with EBT or calmagite; the buffer carries
    Mg-EDTA so that it does (/work/shared/reference/standards.md). The plain titration turns over more than 20
    drops; with the complex added it turns within 10 drops (the readable limit of the search), at the same
    equivalence."""
    plain = simulate(CALCIUM, Method(10.0, "ammonia", "EDTA", 0.01, indicator))
    displaced = simulate(CALCIUM, Method(10.0, "ammonia", "EDTA", 0.01, indicator, mode="displacement", back_metal="Mg"))
    assert plain.sharpness_mL > 20 * DROP_mL
    assert "needs_magnesium" in {f.kind for f in plain.findings}
    assert displaced.sharpness_mL < 10 * DROP_mL
    assert "needs_magnesium" not in {f.kind for f in displaced.findings}
    assert displaced.equivalence_mL == pytest.approx(plain.equivalence_mL)
    assert abs(displaced.error_percent) < 1.0 < abs(plain.error_percent)
    assert displaced.colour_change == ("wine-red", "blue")


def test_the_added_complex_cancels_and_the_budget_shows_it():
    """Equal amounts of Mg and EDTA are added, so the error keeps the direct definition against n(Ca) alone; the
    budget's parts add up to it, with the added magnesium not back on the titrant as its own part."""
    t = simulate(CALCIUM, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="displacement", back_metal="Mg"),
                 standardise=True)
    assert t.error_percent == pytest.approx((t.endpoint_mL - 10.0) / 10.0 * 100, rel=1e-12)
    assert sum(t.budget.values()) == pytest.approx(t.error_percent, abs=1e-6)
    assert "added_complex" in t.budget and "cotitration:Mg" not in t.budget
    # the titrant standardised by the same method on calcium carbonate (Standard Methods 2340 C) takes it out
    assert abs(t.standardised_error_percent) < 0.05


def test_sample_magnesium_and_added_magnesium_are_told_apart():
    """Hardness (Ca + Mg) with Mg-EDTA added: the budget still adds up, the sample's Mg is part of the analyte."""
    s = Sample(50, {"Ca": 0.0015, "Mg": 0.0005}, ("Ca", "Mg"))
    t = simulate(s, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="displacement", back_metal="Mg"))
    assert sum(t.budget.values()) == pytest.approx(t.error_percent, abs=1e-6)
    assert abs(t.error_percent) < 1.0


def test_displacement_checks_its_metal():
    with pytest.raises(InputError, match="displacement complex's metal must be"):
        Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="displacement", back_metal="Cu")
    assert REGISTRY["displacement"].complexity > REGISTRY["direct"].complexity
