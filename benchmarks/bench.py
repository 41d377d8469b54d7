"""Benchmarks: print figures and ratios against baselines measured in the same run (no timed assertions anywhere).

    python benchmarks/bench.py solver   # 500-point curve: our solver vs scipy point by point vs phreeqc
    python benchmarks/bench.py search   # search on the demo scenario vs an exhaustive grid at equal hypervolume
    python benchmarks/bench.py batch    # batch --jobs 2 vs --jobs 1 over the example scenarios
    python benchmarks/bench.py all
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "benchmarks"))


def best_of(fn, repeat=3):
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def bench_solver(n=500):
    from scipy.optimize import root

    from optimiser.constants import H
    from optimiser.equilibrium import build_system, solve
    metals, ligands = ("Ca", "Mg", "Zn"), ("EDTA", "NH3", "EBT")
    s = build_system(metals, ligands, solids=False)
    V0, c = 50.0, {"Ca": 0.002, "Mg": 0.001, "Zn": 0.0005}
    V = np.linspace(0, 1.5 * sum(c.values()) * V0 / 0.01, n)
    d = V0 / (V0 + V)
    T = np.zeros((n, len(s.components)))
    for m, x in c.items():
        T[:, s.index(m)] = x * d
    T[:, s.index("EDTA")] = 0.01 * V / (V0 + V)
    T[:, s.index("NH3")] = 0.1 * d
    T[:, s.index("EBT")] = 2e-5 * d
    pH = 10.0
    print(f"solver: {n}-point titration curve, metals {metals}, ligands {ligands}, {len(s.species)} species, pH {pH}, ideal")

    t0 = time.perf_counter()
    solve(s, T, pH=pH, ionic_strength_M=0.0)
    t_first = time.perf_counter() - t0
    t_ours, eq = best_of(lambda: solve(s, T, pH=pH, ionic_strength_M=0.0), repeat=5)
    # the same curve with the harder options on: Davies activities with the ionic strength computed from the
    # species (on 0.1 M background electrolyte) and the hydroxide solids allowed
    s_solid = build_system(metals, ligands, solids=True)
    t_full, eq_full = best_of(lambda: solve(s_solid, T, pH=pH, ionic_strength_M=None, background_ionic_strength_M=0.1), repeat=5)
    free_ours = eq.c[:, :len(s.components) - 1]

    # scipy, point by point, as a careful user would write it: unknowns log10 of the free concentrations,
    # residuals log10(computed total / given total) (absent components dropped), analytic Jacobian, hybr root
    # finder, each point started from the previous point's solution (continuation along the curve)
    iH = s.index(H)
    logK, _ = s.log_K(np.array([0.0]), np.array([25.0]))
    K = logK[0] + s.nu[:, iH] * (-pH)
    nu_all = s.nu[:, :iH].astype(float)

    def scipy_curve():
        out, fails = np.zeros((n, iH)), 0
        x_prev = None
        for k in range(n):
            act = T[k, :iH] > 0
            nu = nu_all[:, act]
            tot = T[k, :iH][act]
            rows = np.all(nu_all[:, ~act] == 0, axis=1)  # species made only of present components
            nu, Kk = nu[rows], K[rows]

            def f(x, Kk=Kk, nu=nu, tot=tot):
                cs = 10.0 ** np.minimum(Kk + nu @ x, 300)
                return np.log10(cs @ nu) - np.log10(tot)

            def jac(x, Kk=Kk, nu=nu):
                cs = 10.0 ** np.minimum(Kk + nu @ x, 300)
                return ((nu.T * cs) @ nu) / (cs @ nu)[:, None]
            x0 = np.log10(tot) if x_prev is None or x_prev.shape != tot.shape else x_prev
            r = root(f, x0, jac=jac, method="hybr", options={"xtol": 1e-14})
            cs = 10.0 ** (Kk + nu @ r.x)
            if np.max(np.abs(cs @ nu / tot - 1)) > 1e-10:
                fails += 1
            x_prev = r.x
            out[k, act] = 10.0 ** r.x
        return out, fails
    t_scipy, (free_scipy, fails) = best_of(scipy_curve, repeat=5)
    mask = T[:, :iH] > 0
    dev_scipy = np.max(np.abs(free_scipy[mask] / free_ours[mask] - 1))

    ref = {}
    try:
        import phreeqc  # noqa: F401
        for model in ("ideal", "davies"):
            ref[model] = phreeqc_curve(s, T, pH, model)
    except ImportError:
        pass
    if ref:
        # phreeqc keeps the water activity (a_w < 1) in the hydroxo species: ours is run at the same a_w
        r = ref["ideal"]
        same = solve(s, T, pH=pH, ionic_strength_M=0.0, log_Kw_shift=np.log10(r["aw"])).c[:, :iH]
        m2 = mask & (r["free"] > 1e-90)
        dev_ideal = np.max(np.abs(r["free"][m2] / same[m2] - 1))
        # with activities both compute the ionic strength from the species (ours with phreeqc's Davies A)
        d = ref["davies"]
        # phreeqc's Davies A varies by 4e-10 (relative) over the points; its median moves log gamma by < 1e-9
        kw = dict(pH=pH, ionic_strength_M=None, A=float(np.median(d["dha"])), log_Kw_shift=np.log10(d["aw"]))
        solve(s, T, **kw)
        t_davies, eq_davies = best_of(lambda: solve(s, T, **kw), repeat=5)
        m3 = mask & (d["free"] > 1e-90)
        dev_davies = np.max(np.abs(d["free"][m3] / eq_davies.c[:, :iH][m3] - 1))
        dev_mu = np.max(np.abs(d["mu"] / eq_davies.ionic_strength_M - 1))
    print(f"  ours, first call in this process (compiled kernel loaded or compiled): {t_first * 1000:.0f} ms")
    print(f"  ours (one call):               {t_ours * 1000:8.1f} ms  (largest relative mass-balance residual "
          f"{eq.max_residual:.1e}, most Newton iterations at a point {eq.iterations})")
    print(f"  ours with Davies, I computed, {len(s_solid.solids)} solids allowed: {t_full * 1000:5.1f} ms  (residual "
          f"{eq_full.max_residual:.1e}; ionic strength {eq_full.ionic_strength_M.min():.3f}-{eq_full.ionic_strength_M.max():.3f} M)")
    print(f"  scipy root, point by point:    {t_scipy * 1000:8.1f} ms  ({fails} points not converged; "
          f"max rel. difference from ours {dev_scipy:.1e})  ratio {t_scipy / t_ours:6.1f} x")
    if ref:
        r, d = ref["ideal"], ref["davies"]
        print(f"  phreeqc, {n} solutions, 1 run:     {r['time'] * 1000:8.1f} ms  (max rel. difference from ours {dev_ideal:.1e} with "
              f"phreeqc's water activity, a_w {r['aw'].min():.5f}-{r['aw'].max():.5f})  ratio {r['time'] / t_ours:6.1f} x")
        print(f"  with Davies activities and the ionic strength computed by each: ours {t_davies * 1000:.1f} ms, phreeqc "
              f"{d['time'] * 1000:.1f} ms, ratio {d['time'] / t_davies:.1f} x (free concentrations agree to {dev_davies:.1e}, "
              f"ionic strength to {dev_mu:.1e}; I {d['mu'].min():.4f}-{d['mu'].max():.4f} M)")


def phreeqc_curve(s, T, pH, model):
    """One phreeqc run over every point (500 SOLUTIONs), on our constants: free molalities, a_w, I, Davies A."""
    import phreeqc
    import phreeqc_bridge as pb

    from optimiser.constants import H, database
    text, names = pb.database_text(s, database(), model)
    p = phreeqc.Phreeqc()
    assert p.LoadDatabaseString(text) == 0
    comps = [x for x in s.components if x != H]
    blocks = []
    for k in range(len(T)):
        sol = "\n".join(f"  {names[x]} {T[k, s.index(x)]:.15e}" for x in comps if T[k, s.index(x)] > 0)
        blocks.append(f"SOLUTION {k + 1}\n  units mol/kgw\n  pH {pH}\n{sol}\n")
    punch = " ".join(f'MOL("{names[x]}{pb.zstr(database().charges[x])}"),' for x in comps) + ' ACT("H2O"), MU, DH_A'
    heads = " ".join(f"f{i}" for i in range(len(comps))) + " aw mu dha"
    # SELECTED_OUTPUT must come before the solutions to punch each one
    inp = (f"SELECTED_OUTPUT 1\n  -reset false\nUSER_PUNCH 1\n  -headings {heads}\n  10 PUNCH {punch}\n"
           + "".join(blocks) + "END\n")

    def run():
        assert p.RunString(inp) == 0, p.GetErrorString()
        return p.GetSelectedOutput()
    t, out = best_of(run, repeat=5)
    return {"time": t, "free": np.array([out[f"f{i}"] for i in range(len(comps))], dtype=float).T,
            **{k: np.asarray(out[k], dtype=float) for k in ("aw", "mu", "dha")}}


def bench_search():
    from optimiser.report import write
    from optimiser.results import dumps, to_json
    from optimiser.scenario import demo, parse
    from grid import front_hypervolumes, grid_candidates, grid_search

    from optimiser.search import run_search
    sc = demo()
    t0 = time.perf_counter()
    r = run_search(sc, seed=1)
    t_search = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as d:
        t1 = time.perf_counter()
        write(r, Path(d), dumps(to_json(r)))
        t_report = time.perf_counter() - t1
    print(f"search on the demo scenario: {r.evaluations} evaluations, {t_search:.1f} s search (incl. robustness), "
          f"{t_report:.1f} s report, front {len(r.front)}")
    for name, text in (("demo space restricted to EDTA, TEA or cyanide, 3 indicators, direct", None),
                       ("zinc beside copper (small)", ZINC_SMALL)):
        sc2 = demo() if text is None else parse(text, "zinc-small.yaml")
        if text is None:  # a grid over the full demo space has ~10^6 points; restrict masking to keep it exhaustive here
            from dataclasses import replace
            sc2 = replace(sc2, search=replace(sc2.search, masking=("TEA", "cyanide"), titrants=("EDTA",), modes=("direct",),
                                              indicators=("EBT", "calmagite", "murexide")))
        grid = grid_candidates(sc2, pH_step=0.05, buffer_levels=3, dose_levels=5)
        g_evals, t_grid = grid_search(sc2, grid)
        # search budgets growing until 99 % of the grid's hypervolume is reached
        for n_gen in (2, 3, 5, 10, 15, 25, 40):
            t0 = time.perf_counter()
            rr = run_search(sc2, seed=1, n_gen=n_gen, with_robustness=False)
            t_s = time.perf_counter() - t0
            hv_s, hv_g = front_hypervolumes([a.evaluation for a in rr.front], g_evals)
            if hv_s >= 0.99 * hv_g:
                break
        print(f"  {name}: grid {len(grid)} evaluations in {t_grid:.1f} s; search {rr.evaluations} evaluations in {t_s:.1f} s "
              f"reaches {100 * hv_s / hv_g:.1f} % of the grid hypervolume: evaluation ratio {rr.evaluations / len(grid):.3f}, "
              f"time ratio {t_s / t_grid:.3f}")


ZINC_SMALL = (ROOT / "tests" / "fixtures" / "zinc_small.yaml").read_text()


def bench_batch():
    from optimiser.batch import run_batch
    from optimiser.scenario import find_scenarios
    paths = find_scenarios([ROOT / "scenarios"])
    times = {}
    for jobs in (1, 2):
        with tempfile.TemporaryDirectory() as d:
            t0 = time.perf_counter()
            rows = run_batch(paths, Path(d), jobs=jobs, progress=False)
            times[jobs] = time.perf_counter() - t0
            assert all(r.ok for r in rows)
    print(f"batch over {len(paths)} example scenarios: --jobs 1 {times[1]:.1f} s, --jobs 2 {times[2]:.1f} s, "
          f"speed-up {times[1] / times[2]:.2f} x")


if __name__ == "__main__":
    which = sys.argv[1] if len(sys.argv) > 1 else "all"
    for name, fn in (("solver", bench_solver), ("search", bench_search), ("batch", bench_batch)):
        if which in (name, "all"):
            fn()
