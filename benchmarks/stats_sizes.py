"""Null rejection rates (size at α = 5 %) of the tests changed for issue 10, three plot shapes.

Run: ``python benchmarks/stats_sizes.py [--replicates R] [--n N]``

For a 50 m square, a 60 m L-shape with an 8 m square hole, and a 400 m × 5 m strip, R random
patterns of N points (complete spatial randomness given N) are tested with:

* the Monte Carlo NN test with sequential stopping (199 simulations, h = 20);
* the guard-zone test: normal approximation (before) and rank among simulations (after);
* the quadrat chi-square p with the former default cells √(2A/N) and the fitted default grid;
* |standardised Morisita| ≥ 0.5 with chi-square limits on the former cells (before) and with
  the exact simulated limits on the fitted grid (after).

A correct test's rate lies in 0.05 ± 3·√(0.05·0.95/R) with probability about 0.997 (printed).
The validity table for every test is ``benchmarks/validity.py``; this script only covers
the issue 10 changes, before against after, in the same process.
"""

from __future__ import annotations

import argparse

import numpy as np
import shapely

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.montecarlo import monte_carlo_nn
from ecoscan.stats.nearest import default_guard_m, guard_zone
from ecoscan.stats.quadrat import quadrat_null, quadrat_test

SHAPES = {
    "square 50 m": shapely.box(0, 0, 50, 50),
    "L-shape with hole": shapely.Polygon(
        [(0, 0), (60, 0), (60, 25), (25, 25), (25, 60), (0, 60)],
        [[(8, 8), (16, 8), (16, 16), (8, 16)]],
    ),
    "strip 400 x 5 m": shapely.box(0, 0, 400, 5),
}


def sizes(poly, n: int, replicates: int, seed: int) -> dict[str, float]:
    """Rejection rates at α = 5 % for one shape."""
    rng = np.random.default_rng(seed)
    pats = uniform_in_polygon(poly, n, size=replicates, rng=rng)
    w = default_guard_m(n, poly.area)
    inner = poly.buffer(-w)
    old_cell = float(np.sqrt(2 * poly.area / n))
    out: dict[str, list[bool]] = {k: [] for k in (
        "p_mc sequential", "guard normal", "guard MC", "quadrat_p old grid",
        "quadrat_p fitted grid", "|Ip|>=0.5 chi2 limits", "|Ip|>=0.5 exact limits",
    )}  # fmt: skip
    for xy in pats:
        mc = monte_carlo_nn(
            xy, poly, simulations=199, rng=rng, guard_region=inner, stop_after=20, workers=1
        )
        out["p_mc sequential"].append(mc.pvalue <= 0.05)
        gz = guard_zone(xy, poly, w)
        if gz.n_focal >= 2:
            out["guard normal"].append(gz.pvalue < 0.05)
            out["guard MC"].append(mc.guard_pvalue <= 0.05)
        q_old = quadrat_test(xy, poly, old_cell)
        q_new = quadrat_test(xy, poly)
        out["quadrat_p old grid"].append(q_old.pvalue < 0.05)
        out["quadrat_p fitted grid"].append(q_new.pvalue < 0.05)
        out["|Ip|>=0.5 chi2 limits"].append(abs(q_old.morisita_std) >= 0.5)
        exact = quadrat_null(q_new, 199, rng=rng).morisita_std
        out["|Ip|>=0.5 exact limits"].append(abs(exact) >= 0.5)
    return {k: (float(np.mean(v)) if v else float("nan")) for k, v in out.items()}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=400)
    ap.add_argument("--n", type=int, default=100)
    a = ap.parse_args()
    half = 3 * np.sqrt(0.05 * 0.95 / a.replicates)
    print(f"n = {a.n}, {a.replicates} patterns per shape; band {0.05 - half:.3f}-{0.05 + half:.3f}")
    res = {name: sizes(poly, a.n, a.replicates, 2026) for name, poly in SHAPES.items()}
    keys = list(next(iter(res.values())))
    print(f"{'test':26s}" + "".join(f"{name:>20s}" for name in res))
    for k in keys:
        print(f"{k:26s}" + "".join(f"{res[name][k]:20.3f}" for name in res))


if __name__ == "__main__":
    main()
