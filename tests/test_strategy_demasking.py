"""Demasking: zinc beside copper in ammonia, both masked by cyanide, zinc released by formaldehyde and titrated
with EBT (common practice; /work/shared/DOMAIN.md)."""
import textwrap

import pytest

from optimiser.analysis import safety
from optimiser.candidate import Candidate
from optimiser.errors import InputError
from optimiser.evaluation import Evaluator
from optimiser.method import Method, Sample
from optimiser.scenario import parse
from optimiser.strategies import REGISTRY
from optimiser.titration import simulate

ZN_CU = Sample(50, {"Zn": 0.001, "Cu": 0.001}, ("Zn",))


def test_cyanide_masks_zinc_and_formaldehyde_releases_it():
    """With cyanide alone zinc is masked (no end point); after formaldehyde it titrates to within 0.5 % after
    standardisation, with a sharp EBT change, copper staying masked."""
    masked = simulate(ZN_CU, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", masking=(("cyanide", 0.02),)))
    assert masked.endpoint_mL is None
    t = simulate(ZN_CU, Method(10.0, "ammonia", "EDTA", 0.01, "EBT", masking=(("cyanide", 0.02),), mode="demasking"),
                 standardise=True)
    assert t.endpoint_mL == pytest.approx(5.0, rel=0.02)
    assert abs(t.standardised_error_percent) < 0.5
    assert t.sharpness_mL < 0.5
    assert t.colour_change == ("wine-red", "blue")
    assert "demasking" in {f.kind for f in t.findings}
    assert sum(t.budget.values()) == pytest.approx(t.error_percent, abs=1e-6)


def test_demasking_carries_its_cautions_and_hazard():
    """Formaldehyde is a carcinogen; cyanide's cautions stay (the report defers to the SDS and the safety officer)."""
    m = Method(10.0, "ammonia", "EDTA", 0.01, "EBT", masking=(("cyanide", 0.02),), mode="demasking")
    items = safety(m)
    text = " ".join(c for i in items for c in i.cautions)
    assert "carcinogen" in text and "cyanide" in text.lower()
    assert any(i.name.startswith("formaldehyde") for i in items)
    assert m.hazard == 4


def test_demasking_needs_a_masking_agent_it_undoes():
    with pytest.raises(InputError, match="demasking needs a masking agent"):
        Method(10.0, "ammonia", "EDTA", 0.01, "EBT", mode="demasking")


def test_the_search_offers_demasking_for_zinc_beside_copper():
    """The strategy applies to this sample (cyanide in the search, zinc-cyanide constants), adds cyanide where the
    candidate lacks it, and its candidate is evaluated feasible at a 0.5 % target."""
    sc = parse(textwrap.dedent("""
        name: zinc beside copper (an invented demo)
        sample: {volume: 50 mL}
        analyte: {metals: {Zn: 1 mmol/L}}
        interferents: {Cu: 1 mmol/L}
        titrant: {concentration: 0.01 M}
    """))
    s = REGISTRY["demasking"]
    assert s.applies(sc.sample, sc.search)
    c = Candidate(10.0, "ammonia", -1.0, "EDTA", (), "EBT", "demasking", "Zn", extra=(("co", "none"),))
    assert dict(c.method(sc).masking)["cyanide"] > 0
    e = Evaluator(sc).evaluate([c])[0]
    assert e.feasible, e.violations
    assert e.hazard == 4


def test_a_search_puts_demasking_among_the_alternatives():
    """Zinc beside copper, the search limited to ammonia, EBT and cyanide (so that it is quick): cyanide alone masks
    the zinc too, and the demasking method is found, with formaldehyde's cautions in its safety list."""
    from optimiser.search import run_search

    sc = parse(textwrap.dedent("""
        name: zinc beside copper, narrow search (an invented demo)
        sample: {volume: 50 mL}
        analyte: {metals: {Zn: 1 mmol/L}}
        interferents: {Cu: 1 mmol/L}
        titrant: {concentration: 0.01 M}
        search: {pH: [9.0, 10.5], buffers: [ammonia], indicators: [EBT], masking: [cyanide], titrants: [EDTA],
                 modes: [direct, demasking], max_masking_agents: 1}
    """))
    r = run_search(sc, seed=1, pop_size=16, n_gen=6, with_robustness=False)
    demasked = [a.evaluation for a in r.front if a.strategy == "demasking"]
    assert demasked and any(e.feasible for e in demasked)
    cautions = " ".join(c for item in safety(demasked[0].candidate.method(sc)) for c in item.cautions)
    assert "carcinogen" in cautions
