"""Benchmarks: print figures and ratios against baselines measured in the same run (no timed assertions anywhere).

    python benchmarks/bench.py solver   # 500-point curve: our solver vs scipy point by point vs phreeqc
    python benchmarks/bench.py search   # the search vs the exhaustive grid and random sampling, seeds 1-10
    python benchmarks/bench.py seeds    # seeds 1-10 on every example scenario: the same structure, pH spread
    python benchmarks/bench.py seeds DIR  # ... and on every scenario the tests searched (recorded by a test run with
                                          # OPTIMISER_RECORD_SCENARIOS=DIR, tests/conftest.py)
    python benchmarks/bench.py run      # the whole `optimiser run` on the demo vs the bare import of its libraries
    python benchmarks/bench.py batch    # batch --jobs 2 vs --jobs 1 over the example scenarios
    python benchmarks/bench.py generated [N] [SEEDS]  # N generated scenarios (200): grid feasible => search feasible
    python benchmarks/bench.py all      # everything but `generated` (slow)
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
    t_ours, eq = median_of(lambda: solve(s, T, pH=pH, ionic_strength_M=0.0), repeat=5)
    # the same curve with the harder options on: Davies activities with the ionic strength computed from the
    # species (on 0.1 M background electrolyte) and the hydroxide solids allowed
    s_solid = build_system(metals, ligands, solids=True)
    t_full, eq_full = median_of(lambda: solve(s_solid, T, pH=pH, ionic_strength_M=None, background_ionic_strength_M=0.1), repeat=5)
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
    t_scipy, (free_scipy, fails) = median_of(scipy_curve, repeat=5)
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
        t_davies, eq_davies = median_of(lambda: solve(s, T, **kw), repeat=5)
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
    t, out = median_of(run, repeat=5)
    return {"time": t, "free": np.array([out[f"f{i}"] for i in range(len(comps))], dtype=float).T,
            **{k: np.asarray(out[k], dtype=float) for k in ("aw", "mu", "dha")}}


def median_of(fn, repeat=3):
    """Median wall time of several runs (not the fastest) and the last result."""
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), out


def example_scenarios():
    """(name, scenario) of every example scenario, the built-in demo and the scenarios the tests use."""
    import conftest
    from optimiser.scenario import demo, find_scenarios, load, parse
    out = [("demo", demo())] + [(p.stem, load(p)) for p in find_scenarios([ROOT / "scenarios"])]
    out.append(("zinc_small (tests)", parse(ZINC_SMALL, "zinc-small.yaml")))
    out.append(("tiny (tests)", parse(conftest.TINY_SCENARIO, "tiny.yaml")))
    out.append(("al-back (tests)", parse(conftest.AL_BACK, "al-back.yaml")))
    return out


def structure_of(r):
    """What must not change with the seed: titrant, indicator, buffer, masking agents, strategy and standard."""
    if r.recommended is None:
        return None
    c = r.recommended.candidate
    return (c.titrant, c.indicator, c.buffer, tuple(a for a, _ in c.masking), c.strategy.describe(c))


def recorded_scenarios(folder):
    """(name, scenario) of every scenario the tests searched, as recorded by a test run with
    OPTIMISER_RECORD_SCENARIOS=<folder> (tests/conftest.py), in a stable order."""
    import pickle
    out = []
    for p in sorted(Path(folder).glob("*.pkl")):
        sc = pickle.loads(p.read_bytes())
        out.append((f"{sc.name} (tests, {p.stem[:6]})", sc))
    return sorted(out, key=lambda x: x[0])


def bench_seeds(seeds=range(1, 11), folder=None):
    """Seeds 1-10 on every example scenario (and, with ``folder``, every scenario the tests searched): the same
    structure, and the spread of the recommended pH."""
    from optimiser.search import run_search
    print("seed independence: the recommended structure and pH over seeds " + f"{min(seeds)}-{max(seeds)}")
    found = differs = 0
    for name, sc in example_scenarios() + (recorded_scenarios(folder) if folder else []):
        rs = [run_search(sc, seed=s, with_robustness=False) for s in seeds]
        kinds = {structure_of(r) for r in rs}
        pHs = [r.recommended.candidate.pH for r in rs if r.recommended is not None]
        spread = max(pHs) - min(pHs) if pHs else 0.0
        ok = len(kinds) == 1 and spread <= 0.15
        print(f"  {name}: {'same' if len(kinds) == 1 else f'{len(kinds)} different'} structure(s) "
              f"{sorted(kinds, key=str)[0]}; pH {min(pHs, default=float('nan')):.2f}-{max(pHs, default=float('nan')):.2f} "
              f"(spread {spread:.2f}) {'OK' if ok else 'DIFFERS'}", flush=True)
        found += 1
        differs += not ok
    print(f"seed independence: {found} scenarios, {found - differs} with the same structure and a pH spread of at most "
          f"0.15 over seeds {min(seeds)}-{max(seeds)}, {differs} not")


def restricted_demo():
    """The demo's space restricted so that an exhaustive grid stays affordable (EDTA, TEA or cyanide, 3 indicators,
    direct)."""
    from dataclasses import replace

    from optimiser.scenario import demo
    sc = demo()
    return replace(sc, search=replace(sc.search, masking=("TEA", "cyanide"), titrants=("EDTA",), modes=("direct",),
                                      indicators=("EBT", "calmagite", "murexide")))


def bench_search(seeds=range(1, 11)):
    """The search against the exhaustive grid at equal resolution and against uniform random sampling at the same
    simulation budget, over seeds: hypervolume ratios (median, worst) and the share of the grid's simulations."""
    from optimiser.scenario import parse
    from optimiser.search import run_search
    from grid import front_hypervolumes, grid_candidates, grid_search, random_search

    for name, sc in (("demo space restricted to EDTA, TEA or cyanide, 3 indicators, direct", restricted_demo()),
                     ("zinc beside copper (small)", parse(ZINC_SMALL, "zinc-small.yaml"))):
        grid = grid_candidates(sc, pH_step=0.05, buffer_levels=3, dose_levels=5)
        t0 = time.perf_counter()
        g_evals, _ = grid_search(sc, grid)
        t_grid = time.perf_counter() - t0
        g_sim = sum(e.simulated for e in g_evals)
        rows = []
        for seed in seeds:
            t0 = time.perf_counter()
            r = run_search(sc, seed=seed, with_robustness=False)
            t_s = time.perf_counter() - t0
            n_sim = r.stats.candidates_simulated
            rnd, _ = random_search(sc, n_sim, seed)
            hv_s, hv_g = front_hypervolumes([a.evaluation for a in r.front], g_evals)
            hv_r, hv_g2 = front_hypervolumes(rnd, g_evals)
            rows.append((hv_s / hv_g, hv_r / hv_g2 if hv_g2 else 0.0, n_sim / g_sim, r.stats.candidates_prescreened, t_s))
        a = np.array(rows)
        print(f"  {name}: grid {len(grid)} candidates, {g_sim} simulated, {t_grid:.1f} s")
        print(f"    search / grid hypervolume over seeds {min(seeds)}-{max(seeds)}: median {100 * np.median(a[:, 0]):.1f} %, "
              f"worst {100 * a[:, 0].min():.1f} %; random sampling at the same budget: median {100 * np.median(a[:, 1]):.1f} %, "
              f"best {100 * a[:, 1].max():.1f} %")
        print(f"    simulations: search {np.median(a[:, 2]) * g_sim:.0f} (median; {100 * np.median(a[:, 2]):.1f} % of the grid's, "
              f"worst {100 * a[:, 2].max():.1f} %), pre-screened {np.median(a[:, 3]):.0f}; search time median "
              f"{np.median(a[:, 4]):.1f} s ({np.median(a[:, 4]) / t_grid:.3f} of the grid's)", flush=True)


def generated_scenarios(n, seed=0):
    """``n`` small random scenarios for the feasibility check against the grid: an analyte that a buffer-indicator
    pair is used for in practice (common practice), one or two interferents at 1-30 % of it, up to two masking
    agents, EDTA, a direct titration."""
    from optimiser.scenario import parse
    rng = np.random.default_rng(seed)
    metals = ["Mg", "Ca", "Mn", "Co", "Ni", "Cu", "Zn", "Cd", "Pb", "Al", "Bi", "Fe(III)"]
    pairs = [("ammonia", "EBT", (8.5, 10.5), ("Mg", "Zn", "Cd")), ("ammonia", "PAN", (8.0, 10.0), ("Cu", "Ni", "Zn")),
             ("hexamine", "xylenol_orange", (4.5, 6.3), ("Zn", "Pb", "Cd")), ("acetate", "PAN", (3.8, 5.8), ("Cu", "Zn")),
             ("NaOH", "murexide", (11.8, 13.0), ("Ca",)), ("nitric_acid", "xylenol_orange", (1.0, 3.2), ("Bi",))]
    out = []
    for k in range(n):
        buf, ind, (lo, hi), analytes = pairs[int(rng.integers(len(pairs)))]
        analyte = analytes[int(rng.integers(len(analytes)))]
        others = [m for m in metals if m != analyte]
        ms = [analyte] + list(rng.choice(others, size=int(rng.integers(1, 3)), replace=False))
        conc = 10 ** rng.uniform(-3.3, -2.5)
        lines = [f"name: gen-{k}", "sample: {volume: 25 mL}", "analyte:", "  metals:", f"    {ms[0]}: {conc:.3g} M",
                 "interferents:"] + [f"  {m}: {conc * 10 ** rng.uniform(-2, -0.5):.3g} M" for m in ms[1:]]
        masks = [m for m in ("TEA", "fluoride", "thiosulfate", "citrate") if rng.random() < 0.3][:2]
        lines += ["titrant: {concentration: 0.01 M}",
                  f"search: {{pH: [{lo}, {hi}], titrants: [EDTA], buffers: [{buf}], indicators: [{ind}], "
                  f"masking: [{', '.join(masks)}], max_masking_agents: {1 if masks else 0}, modes: [direct]}}",
                  "targets: {max_error_percent: 1.0}"]
        out.append(parse("\n".join(lines) + "\n", f"gen-{k}.yaml"))
    return out


def bench_generated(n=200, seeds=range(1, 11), pH_step=0.1):
    """Whenever the exhaustive grid (pH step ``pH_step``, 3 buffer totals, 3 doses per agent) finds a feasible method
    on a generated scenario, the search must find one at every seed. Progress lines give the counts so far."""
    from optimiser.search import run_search
    from grid import grid_candidates, grid_search
    found = misses = grid_feasible = 0
    t0 = time.perf_counter()
    for k, sc in enumerate(generated_scenarios(n)):
        g, _ = grid_search(sc, grid_candidates(sc, pH_step=pH_step, buffer_levels=3, dose_levels=3))
        if (k + 1) % 10 == 0:
            print(f"  {k + 1}/{n} scenarios, {time.perf_counter() - t0:.0f} s: grid feasible on {grid_feasible}, "
                  f"search feasible in {found} of {found + misses} runs", flush=True)
        if not any(e.feasible for e in g):
            continue
        grid_feasible += 1
        for seed in seeds:
            r = run_search(sc, seed=seed, with_robustness=False)
            if any(a.evaluation.feasible for a in r.front):
                found += 1
            else:
                misses += 1
                print(f"  MISS: {sc.name} seed {seed}", flush=True)
    print(f"generated scenarios: {n} (grid pH step {pH_step}); the grid finds a feasible method on {grid_feasible}; the search finds one in "
          f"{found} of {found + misses} (scenario, seed) runs over seeds {min(seeds)}-{max(seeds)}; misses {misses}")


def bench_run(repeat=9):
    """The whole ``optimiser run`` on the demo (a fresh process each time) against the bare import of its libraries,
    alternating, in the same run: medians and the median ratio; the run as it is (its work split over the machine's
    cores, :mod:`optimiser.parallel`) and with ``--jobs 1`` (one process)."""
    import os
    import subprocess
    libs = "import numpy, scipy, numba, pymoo.optimize, pymoo.core.mixed, matplotlib.pyplot, yaml, jinja2, pint, periodictable"
    env = dict(os.environ, PYTHONPATH=str(ROOT))

    def t(cmd):
        t0 = time.perf_counter()
        subprocess.run(cmd, env=env, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
        return time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as d:
        run = [sys.executable, "-m", "optimiser.cli", "run", "--out", d]
        t(run)  # the compiled kernel's cache
        rows = [(t([sys.executable, "-c", libs]), t(run), t(run + ["--jobs", "1"])) for _ in range(repeat)]
    imp, rn, one = (np.median([r[k] for r in rows]) for k in range(3))
    from optimiser.parallel import workers
    print(f"optimiser run on the demo: median {rn:.2f} s ({workers()} processes), {one:.2f} s (--jobs 1); bare import "
          f"of its libraries median {imp:.2f} s; ratio median {np.median([r[1] / r[0] for r in rows]):.2f} x, "
          f"--jobs 1 {np.median([r[2] / r[0] for r in rows]):.2f} x ({repeat} triples, alternating)")


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
    if which == "seeds" and len(sys.argv) > 2:  # seeds FOLDER: also every scenario a recorded test run searched
        bench_seeds(folder=sys.argv[2])
        sys.exit(0)
    if which == "generated":
        bench_generated(int(sys.argv[2]) if len(sys.argv) > 2 else 200,
                        range(1, 1 + (int(sys.argv[3]) if len(sys.argv) > 3 else 10)))
    for name, fn in (("solver", bench_solver), ("run", bench_run), ("search", bench_search), ("seeds", bench_seeds),
                     ("batch", bench_batch)):
        if which in (name, "all"):
            fn()
