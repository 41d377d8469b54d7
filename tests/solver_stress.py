"""Stress run of the equilibrium solver over its documented domain, printing the counts.

    python tests/solver_stress.py --points 100000 --seed 1

Points are drawn at random over: pH 0-14 (fixed), or the pH left free with a proton excess of -0.05 to 0.05 M;
temperature 0-90 degC; the ionic strength fixed (0-1 M) or computed from the species; component totals from 1e-12 to
1 M (a tenth of them absent), in systems that together hold every metal and ligand of the data. The documented domain
is the ionic strength and temperature ranges of ``optimiser.constants`` (Davies and van 't Hoff) and pH 0-14: a point
whose computed ionic strength or free pH falls outside it is counted as flagged (``Equilibrium.outside_domain``), not as
a failure. A failure is a point that does not converge to the solver's tolerance, or a non-finite result.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from optimiser.constants import IONIC_STRENGTH_MAX_M, TEMPERATURE_RANGE_C  # noqa: E402
from optimiser.equilibrium import build_system, solve  # noqa: E402
from optimiser.errors import ConvergenceError  # noqa: E402

SYSTEMS = [(("Ca", "Mg", "Fe(III)", "Al"), ("EDTA", "NH3", "EBT")),
           (("Zn", "Cu", "Ni"), ("EDTA", "cyanide", "xylenol_orange")),
           (("Ca", "Mg", "Sr", "Ba"), ("EGTA", "fluoride", "murexide")),
           (("Bi", "Pb", "Hg"), ("CDTA", "iodide", "acetate")),
           (("Cu(I)", "Zn", "Cd"), ("DTPA", "thiosulfate", "citrate", "PAN")),
           (("Mn", "Fe(II)", "Co"), ("EDTA", "tartrate", "TEA", "calmagite")),
           (("Ni", "Cu", "Zn"), ("EDTA", "phen", "thiourea", "hexamine", "methylthymol_blue")),
           (("Ca", "Mg"), ("EDTA", "calcon_carboxylic"))]
CHUNK = 1000


def _draw(rng, s, n: int, free_pH: bool):
    T = 10 ** rng.uniform(-12, 0, size=(n, len(s.components)))
    T[rng.random(T.shape) < 0.1] = 0.0
    T[:, -1] = rng.uniform(-0.05, 0.05, n) if free_pH else 0.0
    temp = rng.uniform(*TEMPERATURE_RANGE_C, n)
    fixed_I = rng.random(n) < 0.5
    I = np.where(fixed_I, rng.uniform(0.0, IONIC_STRENGTH_MAX_M, n), np.nan)
    pH = None if free_pH else rng.uniform(0.0, 14.0, n)
    return T, temp, I, pH


def _solve_points(s, T, temp, I, pH):
    """Solve one chunk; where it fails, each point alone. Returns (failures, flagged, solved)."""
    kw = dict(temperature_C=temp)
    try:
        fixed = ~np.isnan(I)
        outs = []
        for mask in (fixed, ~fixed):
            if mask.any():
                eq = solve(s, T[mask], pH=None if pH is None else pH[mask],
                           ionic_strength_M=I[mask] if mask is fixed else None, temperature_C=temp[mask])
                outs.append(eq)
        bad = sum(int((~np.isfinite(eq.c).all(axis=1)).sum()) for eq in outs)
        flagged = sum(int(eq.outside_domain().sum()) for eq in outs)
        return bad, flagged, len(T)
    except ConvergenceError:
        bad = flagged = 0
        for k in range(len(T)):
            try:
                eq = solve(s, T[k:k + 1], pH=None if pH is None else pH[k:k + 1],
                           ionic_strength_M=None if np.isnan(I[k]) else I[k:k + 1], temperature_C=temp[k:k + 1])
                flagged += int(eq.outside_domain().sum())
                bad += int(not np.isfinite(eq.c).all())
            except ConvergenceError as exc:
                if exc.outside_domain:  # said why: the point lies outside the documented domain
                    flagged += 1
                    continue
                bad += 1
                print(f"  failed: {s.components} pH {None if pH is None else pH[k]:.4g}, T {temp[k]:.4g} degC, "
                      f"I {'computed' if np.isnan(I[k]) else f'{I[k]:.4g} M'}: {exc}"[:600])
        return bad, flagged, len(T)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--points", type=int, default=100_000)
    p.add_argument("--seed", type=int, default=1)
    a = p.parse_args(argv)
    rng = np.random.default_rng(a.seed)
    t0 = time.perf_counter()
    totals = {"points": 0, "failures": 0, "flagged outside the domain": 0}
    per = a.points // (2 * len(SYSTEMS))
    for metals, ligands in SYSTEMS:
        s = build_system(metals, ligands)
        for free_pH in (False, True):
            for start in range(0, per, CHUNK):
                n = min(CHUNK, per - start)
                bad, flagged, done = _solve_points(s, *_draw(rng, s, n, free_pH))
                totals["points"] += done
                totals["failures"] += bad
                totals["flagged outside the domain"] += flagged
    print(", ".join(f"{k}: {v}" for k, v in totals.items()) + f" ({time.perf_counter() - t0:.0f} s)")
    return 0 if totals["failures"] == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
