"""The solver over its documented domain: it converges or says why, and flags results outside the domain."""
import numpy as np
import pytest
import solver_stress

from optimiser.equilibrium import build_system, solve
from optimiser.errors import ConvergenceError


def test_bounded_stress_run_has_no_failure(capsys):
    """4,000 random points over the domain (the script runs 100,000: python tests/solver_stress.py)."""
    assert solver_stress.main(["--points", "4000", "--seed", "3"]) == 0
    assert "failures: 0" in capsys.readouterr().out


def test_a_point_beyond_the_davies_range_says_why():
    """0.38 M of a hexa-anionic dye with the ionic strength computed from the species (found by the stress run): the
    ionic strength passes 1 M, where the Davies equation no longer holds; the error says so instead of only that it
    did not converge."""
    s = build_system(("Ni", "Cu", "Zn"), ("EDTA", "phen", "thiourea", "hexamine", "methylthymol_blue"))
    T = np.array([[0.010978517197107693, 4.891033222503711e-12, 0.000299379853551654, 1.6079520893884065e-12,
                   6.858820323228261e-12, 3.980949620687604e-08, 9.416580277474217e-05, 0.37803082067532595, 0.0]])
    with pytest.raises(ConvergenceError) as exc:
        solve(s, T, pH=[3.078], ionic_strength_M=None, temperature_C=[71.16])
    assert exc.value.outside_domain and "outside the model's domain" in str(exc.value)


def test_results_beyond_1_M_are_flagged():
    """A converged point whose computed ionic strength passes 1 M is flagged, one within it is not."""
    s = build_system(("Ca",), ("EDTA",))
    eq = solve(s, [[0.001, 0.001, 0.0], [0.6, 0.0, 0.0]], pH=[10.0, 7.0], ionic_strength_M=None)
    assert eq.outside_domain().tolist() == [False, True]
