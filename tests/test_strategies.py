"""The strategy seam: the registry, each strategy's own definitions, and that a new strategy needs no other change."""
import pickle

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from optimiser import findings as fd
from optimiser.errors import InputError, UnknownNameError
from optimiser.method import Method, Sample
from optimiser.strategies import REGISTRY, strategy, strategy_ids
from optimiser.strategies.direct import DirectTitration
from optimiser.titration import simulate

HARDNESS = Sample(50, {"Ca": 0.0015, "Mg": 0.0005}, ("Ca", "Mg"))


def test_registry_names_every_strategy_and_refuses_others():
    """Every registered strategy is found by its id; an unknown id names the allowed ones."""
    assert strategy_ids() == tuple(REGISTRY)
    assert {"direct", "back", "displacement", "sequential", "difference", "demasking"} <= set(strategy_ids())
    for sid in strategy_ids():
        assert strategy(sid).id == sid
    with pytest.raises(UnknownNameError, match="known modes: back, demasking, difference, direct, displacement, sequential"):
        strategy("sideways")


def test_method_resolves_its_strategy_and_reagents():
    m = Method(10.0, "ammonia", "EDTA", 0.01, "EBT")
    assert m.strategy is REGISTRY["direct"]
    assert m.titrant_info.id == "EDTA" and m.buffer_info.ligand == "NH3" and m.indicator_info.id == "EBT"
    assert m.ligand_totals() == {"NH3": 0.1}


def test_back_strategy_checks_its_own_fields():
    with pytest.raises(InputError, match="standard must be"):
        Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="back", back_metal="Cu")
    with pytest.raises(InputError, match="excess ratio"):
        Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="back", excess_ratio=0.9)


def test_direct_error_is_endpoint_against_equivalence():
    """Direct titration: error = (V_ep - V_eq) / V_eq (the definition printed in the report)."""
    t = simulate(HARDNESS, Method(10.0, "ammonia", "EDTA", 0.01, "EBT"))
    assert len(t.endpoints) == 1
    assert t.equivalence_mL == pytest.approx(10.0)
    assert t.error_percent == pytest.approx((t.endpoint_mL - 10.0) / 10.0 * 100, rel=1e-12)
    assert t.titre_mL == t.endpoint_mL


def test_back_titration_error_counts_the_excess():
    """Back-titration: n found = c_Y V_x - c_Zn V_ep; the error is its difference from the analyte (common practice),
    and the burette must deliver the excess as well."""
    s = Sample(50, {"Ca": 0.002}, ("Ca",))
    t = simulate(s, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="back", back_metal="Mg"))
    n_found = 0.01 * t.excess_mL - 0.01 * t.endpoint_mL
    assert t.error_percent == pytest.approx((n_found - 0.1) / 0.1 * 100, rel=1e-9)
    assert t.excess_mL == pytest.approx(1.5 * 10.0)
    assert t.titre_mL == max(t.excess_mL, t.endpoint_mL)
    assert abs(t.error_percent) < 1.0
    assert t.colour_change == ("blue", "wine-red")  # free dye first: the standard binds the indicator at the end


def test_a_new_strategy_is_one_class_and_one_registry_line(monkeypatch):
    """A strategy added to the registry runs through the whole simulation with no other change."""

    class Twice(DirectTitration):
        id = "twice"
        label = "direct titration, error doubled"

        def error_percent(self, plan, V_ep):
            return 2 * super().error_percent(plan, V_ep)

    monkeypatch.setitem(REGISTRY, "twice", Twice())
    plain = simulate(HARDNESS, Method(10.0, "ammonia", "EDTA", 0.01, "EBT"))
    twice = simulate(HARDNESS, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="twice"))
    assert twice.endpoint_mL == pytest.approx(plain.endpoint_mL, rel=1e-12)
    assert twice.error_percent == pytest.approx(2 * plain.error_percent, rel=1e-12)


def test_findings_are_worded_in_one_place():
    """Warnings and assumptions are the wording of structured findings, each kind with a sentence."""
    s = Sample(50, {"Ca": 0.002, "Al": 0.0005}, ("Ca",))
    t = simulate(s, Method(10.0, "ammonia", "EDTA", 0.01, "EBT"))
    kinds = {f.kind for f in t.findings}
    assert "blocked" in kinds
    assert t.warnings == fd.words(t.findings, fd.WARNING)
    blocked = next(f for f in t.findings if f.kind == "blocked")
    assert blocked.values["metals"] == ["Al"] and "Al blocks Eriochrome Black T" in blocked.text  # the verb agrees with one metal
    with pytest.raises(KeyError):
        fd.warning("no-such-kind")


def test_method_and_titration_pickle():
    """Batch workers send results between processes."""
    m = Method(10.0, "ammonia", "EDTA", 0.01, "EBT", masking=(("TEA", 0.01),))
    m2 = pickle.loads(pickle.dumps(m))
    assert m2 == m and m2.masking_agents[0].id == "TEA" and m2.strategy is REGISTRY["direct"]


@settings(max_examples=25, deadline=None)
@given(pH=st.floats(8.5, 10.5), mg=st.sampled_from([0.0, 1e-5, 5e-4, 2e-3]), fe=st.sampled_from([0.0, 1e-6, 2e-5, 5e-5]), back=st.booleans(),
       tea=st.floats(0.0, 0.05))
def test_error_budget_adds_up_to_the_error(pH, mg, fe, back, tea):
    """The error split by cause adds up to the simulated error (mass balance of the titrant and the analyte)."""
    metals = {"Ca": 1.5e-3, "Mg": mg, "Fe(III)": fe}
    s = Sample(50, {m: c for m, c in metals.items() if c > 0}, ("Ca",))
    masking = (("TEA", tea),) if tea > 1e-3 else ()
    t = simulate(s, Method(pH, "ammonia", "EDTA", 0.01, "EBT", masking=masking, mode="back" if back else "direct",
                           back_metal="Zn"), n_points=61)
    if t.error_percent is None:
        assert t.budget == {}
        return
    assert sum(t.budget.values()) == pytest.approx(t.error_percent, abs=1e-6)
    if mg > 0 and not back:
        assert t.budget["cotitration:Mg"] > 0


def test_budget_of_aluminium_back_titration_counts_the_inert_complex():
    """With a slow analyte held inert (aluminium, boiled with the excess), the parts still add up to the error."""
    s = Sample(50, {"Al": 1e-3}, ("Al",))
    t = simulate(s, Method(5.5, "acetate", "EDTA", 0.01, "xylenol_orange", mode="back", back_metal="Zn"))
    assert t.error_percent is not None
    assert sum(t.budget.values()) == pytest.approx(t.error_percent, abs=1e-6)
    assert abs(t.budget["analyte_unbound"]) < 0.5


def test_budget_splits_a_standard_metal_that_the_sample_also_holds():
    """A back-titration with a zinc standard of a sample that holds zinc: the titrant's zinc is shared between the
    standard and the sample's zinc in proportion, and the sample's part shows as co-titration."""
    s = Sample(25, {"Ni": 2.5e-3, "Zn": 0.1e-3}, ("Ni",))
    t = simulate(s, Method(8.3, "ammonia", "EDTA", 0.02, "PAN", mode="back", back_metal="Zn"))
    assert t.budget["cotitration:Zn"] > 0.5
    assert sum(t.budget.values()) == pytest.approx(t.error_percent, abs=1e-6)


def test_budget_of_a_back_titration_whose_standard_metal_is_an_analyte():
    """Total hardness (Ca + Mg) back-titrated with a magnesium standard: the standard's magnesium is not the
    sample's, so the analyte's parts count only the sample's share of the magnesium complexes; the parts add up to
    the error (mass balance) and none of them is the standard itself (regression: +50 % 'analyte not yet bound')."""
    s = Sample(50, {"Ca": 1.6e-3, "Mg": 0.6e-3}, ("Ca", "Mg"))
    t = simulate(s, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="back", back_metal="Mg"))
    assert t.error_percent is not None
    assert sum(t.budget.values()) == pytest.approx(t.error_percent, abs=1e-6)
    assert all(abs(v) < 5.0 for v in t.budget.values()), t.budget
