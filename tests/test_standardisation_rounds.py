"""The primary standard is simulated only where the sample's titration shows an end point.

With ``standardise=True`` each method is also titrated on the primary standard (the analyte alone), one round of
batched solves behind the sample (``curves.read_rounds``). Where the sample's coarse curve shows no end point there is
nothing to standardise: no standard is set up or solved, ``Titration.standardisation`` is None, and every figure read
from it (error and budget after standardisation, error by cause, JSON) is what the former path gave, whose standard of
such a sample was never refined and so carried no end point either. These are checks of our own pipeline; the
chemistry of the cases is common practice (Eriochrome Black T shows no colour change with metals at pH 1.8, where
its complexes do not form; copper blocks xylenol orange unless thiosulfate reduces and masks it).
"""
from dataclasses import fields, replace

import numpy as np
import pytest

from optimiser import curves
from optimiser.results import titration_json
from optimiser.titration import EndPoint, Method, Sample, simulate, standard_sample, standardised

ZN_CU = Sample(25, {"Zn": 0.002, "Cu": 0.001}, ("Zn",))
NO_END_POINT = Method(1.8, "nitric_acid", "EDTA", 0.01, "EBT")  # EBT does not turn at pH 1.8 (common practice)
WITH_END_POINT = Method(5.5, "acetate", "EDTA", 0.01, "xylenol_orange", masking=(("thiosulfate", 0.01),))


@pytest.fixture
def solved(monkeypatch):
    """Every curve handed to the batched solves: (the titrated sample's metals, number of points)."""
    out: list[tuple[frozenset, int]] = []
    solve_batch = curves.solve_batch

    def counting(plans, grids, starts=None):
        out.extend((frozenset(p.sample.metals), len(g))
                   for p, g in zip(plans, grids, strict=True) if g is not None and len(g))
        return solve_batch(plans, grids, starts)

    monkeypatch.setattr(curves, "solve_batch", counting)
    return out


def _equal(a, b) -> bool:
    """Two values equal, numpy arrays element by element (NaN equal to NaN), dataclasses field by field."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return np.array_equal(np.asarray(a), np.asarray(b), equal_nan=True)
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_equal(a[k], b[k]) for k in a)
    if isinstance(a, (tuple, list)) and isinstance(b, (tuple, list)):
        return len(a) == len(b) and all(_equal(x, y) for x, y in zip(a, b, strict=True))
    if hasattr(a, "__dataclass_fields__") and type(a) is type(b):
        return all(_equal(getattr(a, f.name), getattr(b, f.name)) for f in fields(a))
    return a == b


def test_a_sample_without_end_point_gets_no_standard_solved(solved):
    """The sample shows no end point: with standardisation asked for, the very same curves are solved as without
    (none of them the standard's, the analyte alone), and the titration is equal, field by field, to the one
    simulated without standardisation."""
    plain = simulate(ZN_CU, NO_END_POINT, n_points=41)
    without = list(solved)
    solved.clear()
    t = simulate(ZN_CU, NO_END_POINT, n_points=41, standardise=True)
    assert t.endpoint_mL is None and plain.endpoint_mL is None
    assert without and solved == without
    assert not [c for c in solved if c[0] == frozenset({"Zn"})]  # no curve of the primary standard
    assert t.standardisation is None
    assert _equal(t, plain)


def test_a_sample_without_end_point_reads_as_the_former_full_path():
    """The former path solved the standard's coarse curve and probe but, the sample showing no end point, never
    refined it: its standardisation was an end point with no volume, error, sharpness or budget. Every figure read
    from the standardisation (error and budget after it, error by cause, largest part, the JSON document) is the
    same with it as with None."""
    t = simulate(ZN_CU, NO_END_POINT, n_points=41, standardise=True, pH_drift=True)
    unrefined = EndPoint(label="Zn", volume_mL=None, error_percent=None, sharpness_mL=None,
                         colour_change=t.colour_change, pM={}, budget={})
    former = replace(t, standardisation=unrefined)
    for name in ("standardised_error_percent", "standardised_budget", "error_by_cause_percent", "largest_part",
                 "error_percent", "budget"):
        assert _equal(getattr(t, name), getattr(former, name)), name
    assert titration_json(t) == titration_json(former)


def test_a_sample_with_end_point_still_gets_its_standardisation(solved):
    """The sample shows an end point: its standard (zinc alone, same method) is solved, coarse curve and refined
    region, and its end point is the one the standard simulated on its own gives; the error after standardisation
    is (1 + e) / (1 + e_std) - 1."""
    t = simulate(ZN_CU, WITH_END_POINT, n_points=41, standardise=True)
    std_curves = [n for metals, n in solved if metals == frozenset({"Zn"})]
    assert len(std_curves) >= 3 and 41 in std_curves  # coarse, refined region, probes
    own = simulate(standard_sample(ZN_CU), WITH_END_POINT, n_points=41)
    assert t.endpoint_mL is not None and t.standardisation is not None
    assert t.standardisation.error_percent == own.error_percent
    assert t.standardisation.budget == own.budget
    assert t.standardised_error_percent == standardised(t.error_percent, own.error_percent)


def test_a_multi_step_method_standardises_only_the_step_with_an_end_point(solved):
    """A sequential titration whose first step (bismuth, EBT at pH 1.8) shows no end point and whose second (lead,
    xylenol orange at pH 6) does: no curve of bismuth alone is solved, lead alone is, and only the second step
    carries a standardisation and an error after it."""
    stage = Method(1.8, "nitric_acid", "EDTA", 0.01, "EBT", buffer_total_M=0.0)
    method = Method(6.0, "hexamine", "EDTA", 0.01, "xylenol_orange", mode="sequential", stage=stage,
                    co_analytes=("Bi",))
    t = simulate(Sample(50, {"Bi": 0.002, "Pb": 0.002}, ("Pb",)), method, n_points=41, standardise=True)
    first, second = t.steps
    assert first.endpoint_mL is None and first.standardisation is None
    assert second.endpoint_mL is not None and second.standardisation is not None
    assert not [c for c in solved if c[0] == frozenset({"Bi"})]
    assert [c for c in solved if c[0] == frozenset({"Pb"})]
    bi, pb = t.endpoints[:2]
    assert bi.standardised_percent is None
    assert pb.standardised_percent == standardised(pb.error_percent, second.standardisation.error_percent)
