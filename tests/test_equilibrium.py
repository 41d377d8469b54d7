"""Properties of the full equilibrium solver: mass balances, robustness over pH 0-14 and 1e-10-1 M, phases."""
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from optimiser import equilibrium
from optimiser.constants import H
from optimiser.equilibrium import build_system, solve
from optimiser.errors import ConvergenceError, InputError

SYSTEMS = [(("Ca", "Mg", "Fe(III)", "Al"), ("EDTA", "NH3", "EBT")), (("Zn", "Cu", "Ni"), ("EDTA", "cyanide", "xylenol_orange")),
           (("Ca", "Mg"), ("EGTA", "fluoride", "murexide")), (("Bi", "Pb", "Hg"), ("CDTA", "iodide", "acetate")),
           (("Cu(I)", "Zn", "Cd"), ("DTPA", "thiosulfate", "citrate", "PAN"))]


def mass_balance_error(eq):
    s = eq.system
    worst = 0.0
    for i, c in enumerate(s.components):
        if c == H:
            continue
        tot = eq.c @ s.nu[:, i] + (eq.solid_amount @ s.nu_solid[:, i] if s.solids else 0.0)
        m = eq.totals[:, i] > 0
        if m.any():
            worst = max(worst, float(np.max(np.abs(tot[m] - eq.totals[m, i]) / eq.totals[m, i])))
    return worst


@pytest.mark.parametrize("metals,ligands", SYSTEMS, ids=["hardness", "cyanide", "EGTA", "acid", "copper(I)"])
def test_random_batch_converges_everywhere(metals, ligands):
    """2000 random points (pH 0-14, totals 1e-10 to 1 M, some absent): every mass balance to 1e-10, no NaN."""
    rng = np.random.default_rng(7)
    s = build_system(metals, ligands)
    B = 2000
    T = 10 ** rng.uniform(-10, 0, size=(B, len(s.components)))
    T[:, -1] = 0.0
    T[rng.random(T.shape) < 0.1] = 0.0
    eq = solve(s, T, pH=rng.uniform(0, 14, B), ionic_strength_M=0.1)
    assert np.isfinite(eq.c).all() and np.isfinite(eq.solid_amount).all()
    assert mass_balance_error(eq) <= 1.0001e-10
    assert (eq.solid_amount >= 0).all()
    assert (eq.saturation_index <= 1e-6).all()  # no solid left supersaturated


@pytest.mark.parametrize("metals,ligands", SYSTEMS, ids=["hardness", "cyanide", "EGTA", "acid", "copper(I)"])
def test_random_batch_with_free_pH_and_computed_ionic_strength(metals, ligands):
    """1000 random points with the pH free (proton excess -0.05 to 0.05 M) and the ionic strength from the species.

    Regression: hardness and EGTA failed here (stalled near 1e-9) while the solid amounts came from the normal
    equations, which lose precision when a trace metal and a major one precipitate together.
    """
    rng = np.random.default_rng(11)
    s = build_system(metals, ligands)
    B = 1000
    T = 10 ** rng.uniform(-10, 0, size=(B, len(s.components)))
    T[rng.random(T.shape) < 0.1] = 0.0
    T[:, -1] = rng.uniform(-0.05, 0.05, B)
    eq = solve(s, T, pH=None, ionic_strength_M=None)
    assert np.isfinite(eq.c).all() and np.isfinite(eq.pH).all()
    assert mass_balance_error(eq) <= 1.0001e-10
    assert (eq.solid_amount >= 0).all() and (eq.saturation_index <= 1e-6).all()
    I = 0.5 * eq.c @ s.charge.astype(float) ** 2
    assert eq.ionic_strength_M == pytest.approx(I, rel=1e-10)


@settings(max_examples=40, deadline=None)
@given(st.floats(0, 14), st.floats(-10, 0), st.floats(-10, 0), st.floats(-6, 0))
def test_mass_balances_hold(pH, log_m, log_y, log_l):
    s = build_system(("Zn",), ("EDTA", "NH3"))
    eq = solve(s, [10 ** log_m, 10 ** log_y, 10 ** log_l, 0.0], pH=pH, ionic_strength_M=0.1)
    assert mass_balance_error(eq) <= 1.0001e-10


def test_hydroxide_appears_and_dissolves_with_pH():
    """Mg(OH)2 (active, log Ksp -9.2) is absent at pH 9, present at pH 11; with excess EDTA it dissolves again."""
    s = build_system(("Mg",), ("EDTA",))
    eq = solve(s, [[0.01, 0.0, 0.0]] * 3, pH=[9.0, 10.0, 11.0], ionic_strength_M=0.0)
    assert eq.solid_amount[0, 0] == 0.0 and eq.solid_amount[2, 0] > 0.009
    with_edta = solve(s, [0.01, 0.012, 0.0], pH=11.0, ionic_strength_M=0.0)
    assert with_edta.solid_amount[0, 0] == 0.0
    assert with_edta.saturation_index[0, 0] < 0


def test_free_pH_follows_the_proton_balance():
    """An ammonia buffer (0.1 M NH3 + 0.1 M NH4+) sits at about pH 9.2; adding 2 H+ per EDTA as Na2H2Y lowers it."""
    s = build_system(("Ca",), ("EDTA", "NH3"))
    buffer_only = solve(s, [0.0, 0.0, 0.2, 0.1], pH=None, ionic_strength_M=0.1)
    assert buffer_only.pH[0] == pytest.approx(9.244 + 0.2, abs=0.15)  # pKa 9.244 at I = 0 (MINTEQA2), moved by Davies
    acidified = solve(s, [0.0, 0.01, 0.2, 0.12], pH=None, ionic_strength_M=0.1)
    assert acidified.pH[0] < buffer_only.pH[0]
    assert mass_balance_error(acidified) <= 1.0001e-10


def test_fixed_and_free_pH_agree():
    """Solving at fixed pH, then giving the resulting proton total back with the pH free, returns the same pH."""
    s = build_system(("Zn",), ("EDTA", "acetate"))
    fixed = solve(s, [0.001, 0.0012, 0.1, 0.0], pH=5.3, ionic_strength_M=0.1)
    T_H = float(fixed.c[0] @ s.nu[:, s.index(H)])
    free = solve(s, [0.001, 0.0012, 0.1, T_H], pH=None, ionic_strength_M=0.1)
    assert free.pH[0] == pytest.approx(5.3, abs=1e-8)


def test_results_change_continuously_with_the_inputs():
    s = build_system(("Ca", "Mg"), ("EDTA", "EBT"))
    pH = np.linspace(9.9, 10.1, 21)
    eq = solve(s, np.tile([0.002, 0.001, 0.0029, 2e-5, 0.0], (21, 1)), pH=pH, ionic_strength_M=0.1)
    pCa = -np.log10(eq.free("Ca"))
    assert np.max(np.abs(np.diff(pCa))) < 0.05


def test_failure_names_the_point(monkeypatch):
    """With too few iterations allowed the solver raises, naming the point; it never returns NaN."""
    s = build_system(("Cu",), ("EDTA",))
    monkeypatch.setattr(equilibrium, "MAX_ITER", 1)
    with pytest.raises(ConvergenceError, match="titrant volume 3.0000 mL"):
        solve(s, [0.01, 0.0099999, 0.0], pH=4.0, point_labels=["titrant volume 3.0000 mL"])


def test_bad_totals_are_refused():
    s = build_system(("Ca",), ("EDTA",))
    with pytest.raises(InputError):
        solve(s, [-1.0, 0.01, 0.0], pH=10.0)
    with pytest.raises(InputError):
        solve(s, [0.01, 0.01], pH=10.0)
    with pytest.raises(InputError):
        solve(s, [0.01, 0.01, 0.0], pH=15.0)
    with pytest.raises(InputError, match="one flag per point"):
        solve(s, [[0.01, 0.01, 0.0]] * 3, pH=10.0, restart=[True, False])


def test_batch_as_long_as_the_species_list():
    """Regression: a batch with exactly as many points as the system has species (no (B, S) shape mix-up)."""
    s = build_system(("Ca", "Mg", "Zn"), ("EDTA", "NH3", "EBT"))
    B = len(s.species)
    assert B >= 32  # long enough for the continuation path
    T = np.tile([0.001, 0.0005, 0.0002, 0.0, 0.1, 2e-5, 0.0], (B, 1))
    T[:, 3] = np.linspace(0, 0.003, B)
    eq = solve(s, T, pH=10.0, ionic_strength_M=0.1)
    assert mass_balance_error(eq) <= 1.0001e-10


def _mg_edta_curve(n):
    """Mg 0.01 M at pH 11 titrated with EDTA: Mg(OH)2 present at the start, dissolved past equivalence."""
    T = np.zeros((n, 3))
    T[:, 0] = 0.01
    T[:, 1] = np.linspace(0.0, 0.015, n)
    return T


def test_a_curve_in_one_call_agrees_with_each_point_alone():
    """Continuation along the batch (extrapolated starts) reaches the same solution as a start from the totals."""
    s = build_system(("Mg",), ("EDTA",))
    T = _mg_edta_curve(120)
    curve = solve(s, T, pH=11.0, ionic_strength_M=0.1)
    alone = [solve(s, T[k], pH=11.0, ionic_strength_M=0.1) for k in range(0, 120, 7)]
    for k, eq in zip(range(0, 120, 7), alone):
        assert curve.c[k] == pytest.approx(eq.c[0], rel=1e-8, abs=1e-30)
        assert curve.solids_present(k) == eq.solids_present(0)
    present = curve.solid_amount[:, 0] > 0
    assert present[0] and not present[-1]  # Mg(OH)2 dissolves along the curve
    assert mass_balance_error(curve) <= 1.0001e-10


def test_order_of_the_batch_does_not_change_the_answer():
    """Shuffled, the points no longer continue one another (unrelated guesses are replaced); same solution."""
    s = build_system(("Mg",), ("EDTA",))
    T = _mg_edta_curve(80)
    order = np.random.default_rng(3).permutation(80)
    ordered = solve(s, T, pH=11.0, ionic_strength_M=0.1)
    shuffled = solve(s, T[order], pH=11.0, ionic_strength_M=0.1)
    assert shuffled.c == pytest.approx(ordered.c[order], rel=1e-8, abs=1e-30)
    assert (shuffled.solid_amount > 0).tolist() == (ordered.solid_amount[order] > 0).tolist()


def test_restart_marks_independent_curves():
    """Two curves in one batch, the second marked as a restart: each agrees with its own solve."""
    s = build_system(("Mg",), ("EDTA",))
    a, b = _mg_edta_curve(40), _mg_edta_curve(40)[::-1] * 0.5
    both = solve(s, np.vstack([a, b]), pH=np.r_[np.full(40, 11.0), np.full(40, 10.0)], ionic_strength_M=0.1,
                 restart=np.arange(80) == 40)
    second = solve(s, b, pH=10.0, ionic_strength_M=0.1)
    assert both.c[40:] == pytest.approx(second.c, rel=1e-8, abs=1e-30)


def test_the_kernel_is_compiled_once_for_every_kind_of_call():
    """One numba specialisation serves fixed and free pH, fixed and computed I, with and without solids, one point
    or many (each extra one would cost the first run on a machine another full compile)."""
    from optimiser import kernel
    if not hasattr(kernel.solve_points, "signatures"):
        pytest.skip("numba's JIT is disabled")
    s = build_system(("Ca", "Mg"), ("EDTA", "NH3"))
    T = np.tile([0.002, 0.001, 0.0, 0.1, 0.0], (50, 1))
    T[:, 2] = np.linspace(0, 0.004, 50)
    solve(s, T[0], pH=10.0)
    solve(s, T, pH=np.linspace(9, 11, 50), ionic_strength_M=None, background_ionic_strength_M=0.05)
    solve(s, T, pH=None, ionic_strength_M=0.1, include_solids=False)
    solve(s, T[:, [0, 1, 2, 3, 4]], pH=10.0, A=0.51, log_Kw_shift=np.full(50, -0.001))
    assert len(kernel.solve_points.signatures) == 1


_PLAIN_PYTHON_SOLVE = """
import json, os, sys
import numpy as np
from optimiser import kernel
from optimiser.equilibrium import build_system, solve
assert not hasattr(kernel.solve_points, "signatures"), "compiled although NUMBA_DISABLE_JIT=1"
T = np.array(json.loads(sys.argv[1]))
eq = solve(build_system(("Mg",), ("EDTA",)), T, pH=11.0, ionic_strength_M=None, background_ionic_strength_M=0.1)
print(json.dumps([eq.c.tolist(), eq.solid_amount.tolist(), eq.ionic_strength_M.tolist()]))
"""


def test_the_kernel_runs_as_plain_python_with_the_jit_disabled():
    """NUMBA_DISABLE_JIT=1 (the way to step through the kernel in a debugger) runs the same code across the kernel's
    modules as Python: a curve through Mg(OH)2 precipitation, the ionic strength computed, gives the compiled answer."""
    import json
    import os
    import subprocess
    import sys
    from pathlib import Path
    T = _mg_edta_curve(12)
    root = Path(equilibrium.__file__).resolve().parent.parent
    env = {**os.environ, "NUMBA_DISABLE_JIT": "1", "PYTHONPATH": str(root)}
    run = subprocess.run([sys.executable, "-c", _PLAIN_PYTHON_SOLVE, json.dumps(T.tolist())], env=env, cwd=root,
                         capture_output=True, text=True, timeout=600, check=False)
    assert run.returncode == 0, run.stderr
    c, solid, I = (np.array(a) for a in json.loads(run.stdout))
    eq = solve(build_system(("Mg",), ("EDTA",)), T, pH=11.0, ionic_strength_M=None, background_ionic_strength_M=0.1)
    assert (solid > 0).any() and (solid > 0).tolist() == (eq.solid_amount > 0).tolist()
    assert c == pytest.approx(eq.c, rel=1e-9, abs=1e-30)
    assert solid == pytest.approx(eq.solid_amount, rel=1e-9, abs=1e-20)
    assert I == pytest.approx(eq.ionic_strength_M, rel=1e-12)


def test_an_edited_kernel_module_drops_the_compiled_cache(tmp_path):
    """numba checks a cached function against its own file only, and the entry holds code from every kernel module:
    the cache goes when any of them changes, and stays while none does."""
    from optimiser import kernel
    for name in ("kernel.py", "kernel_newton.py"):
        (tmp_path / name).write_text(f"# {name}\n")
    cache = tmp_path / "__pycache__"
    cache.mkdir()
    files = ["kernel.solve_points-1.py311.nbi", "kernel.solve_points-1.py311.1.nbc", "kernel_newton._newton-9.py311.nbi"]

    def fill():
        for f in files:
            (cache / f).write_bytes(b"compiled")
    fill()
    other = cache / "titration.cpython-311.pyc"
    other.write_bytes(b"bytecode")
    assert kernel._drop_stale_cache(tmp_path)  # no digest yet: whatever is there may be stale
    assert not any((cache / f).exists() for f in files) and other.exists()
    fill()
    assert not kernel._drop_stale_cache(tmp_path)  # nothing changed: the cache stays
    assert all((cache / f).exists() for f in files)
    (tmp_path / "kernel_newton.py").write_text("# kernel_newton.py, edited\n")
    assert kernel._drop_stale_cache(tmp_path)
    assert not any((cache / f).exists() for f in files) and other.exists()
