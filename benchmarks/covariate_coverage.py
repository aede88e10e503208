"""Coverage of the covariate effect intervals, and the size of the habitat and mark tests.

Run: ``nice python benchmarks/covariate_coverage.py [--replicates 200] [--simulations 99]
[--only coverage|habitat|marks]``

1. **Coverage.** Inhomogeneous Poisson patterns with λ(u) = exp(β₀ + β₁ z(u)), z a known
   planar "elevation" (0.4 m per m east, 0.1 m per m north) and β₁ = −0.05 per m, about 150
   plants per plot, in a 60 × 40 m square and an L-shaped plot with a hole. Each pattern is
   fitted by :func:`ecoscan.stats.intensity.fit_intensity` (statsmodels' Poisson GLM on the
   Berman–Turner quadrature); the share of 95% intervals holding the true β₁ should be near
   0.95, and the mean standard error near the standard deviation of the estimates. As a
   baseline in the same process, the same patterns are fitted by the exact conditional
   likelihood on a very fine grid (0.25 m spacing): the ratio of the two estimates' spread
   shows what the default quadrature costs.
2. **Size of "clustering beyond habitat".** The same process (no interaction): how often the
   verdict says "beyond what elevation explains" at α = 5%, with the envelopes of
   :func:`ecoscan.analysis.habitat.habitat_analysis` (model refitted to each simulated pattern), in
   three plot shapes (square, L with hole, narrow 100 × 12 m strip).
3. **Size of the mark test.** Random labelling of independent marks on clustered (Thomas)
   patterns: how often k_mm's permutation test rejects at α = 5%.

The figures printed are quoted in docs/methods-covariates.md.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from functools import lru_cache
from pathlib import Path

import numpy as np
import shapely

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from ecoscan.analysis.habitat import habitat_analysis
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.intensity import (
    CovariateSurface,
    fit_intensity,
    quadrature,
    simulate_inhomogeneous,
)
from ecoscan.stats.marks import mark_test

BETA = -0.05
SHAPES = {
    "square 60 x 40 m": shapely.box(0, 0, 60, 40),
    "L-shape with hole": shapely.Polygon(
        [(0, 0), (60, 0), (60, 20), (25, 20), (25, 45), (0, 45)],
        [[(30, 5), (40, 5), (40, 12), (30, 12)]],
    ),
    "strip 100 x 12 m": shapely.box(0, 0, 100, 12),
}


def elevation(p: np.ndarray) -> np.ndarray:
    return 300.0 + 0.4 * p[:, 0] + 0.1 * p[:, 1]


def surface(poly) -> CovariateSurface:
    x0, y0, x1, y1 = poly.bounds
    xs = np.arange(x0 - 2, x1 + 2, 0.5) + 0.25
    ys = np.arange(y1 + 2, y0 - 2, -0.5) - 0.25
    gx, gy = np.meshgrid(xs, ys)
    return CovariateSurface(
        "elevation",
        "m",
        elevation(np.column_stack([gx.ravel(), gy.ravel()])).reshape(gx.shape),
        xs[0],
        ys[0],
        0.5,
    )


def _lam0(p: np.ndarray) -> np.ndarray:
    return np.exp(BETA * (elevation(p) - 300.0))


@lru_cache(maxsize=8)
def _scaling(wkb: bytes, mean_n: int) -> tuple[float, float]:
    poly = shapely.from_wkb(wkb)
    q = quadrature(np.empty((0, 2)), poly, 0.5)
    scale = mean_n / float(np.sum(q.weights_m2 * _lam0(q.xy)))
    lam_max = scale * float(_lam0(np.array([[poly.bounds[0], poly.bounds[1]]]))[0]) * 1.01
    return scale, lam_max


def pattern(poly, rng, mean_n=150):
    """Inhomogeneous Poisson with about mean_n plants (Poisson count)."""
    lam0 = _lam0
    scale, lam_max = _scaling(shapely.to_wkb(poly), mean_n)
    n = rng.poisson(mean_n)
    return simulate_inhomogeneous(poly, n, lambda p: scale * lam0(p), lam_max, rng=rng)[0]


def coverage(reps: int, seed: int) -> None:
    print("1. coverage of the 95% interval of the elevation coefficient (true -0.05 per m)")
    print(
        f"{'shape':<20} {'reps':>5} {'coverage':>9} {'mean est':>9} {'mean SE':>8} "
        f"{'SD est':>7} {'SD fine/default':>16} {'s/fit':>6}"
    )
    for name, poly in list(SHAPES.items())[:2]:
        rng = np.random.default_rng(seed)
        hit, est, se, fine = 0, [], [], []
        t0 = time.perf_counter()
        for _ in range(reps):
            xy = pattern(poly, rng)
            q = quadrature(xy, poly)
            e = fit_intensity(q, elevation(q.xy)[:, None], ["elevation"]).effects[0]
            hit += e.ci_low <= BETA <= e.ci_high
            est.append(e.coefficient)
            se.append(e.std_error)
        secs = (time.perf_counter() - t0) / reps
        rng = np.random.default_rng(seed)
        for _ in range(min(reps, 50)):  # baseline: the same patterns on a 0.25 m grid
            xy = pattern(poly, rng)
            q = quadrature(xy, poly, 0.25)
            fine.append(fit_intensity(q, elevation(q.xy)[:, None], ["e"]).effects[0].coefficient)
        ratio = np.std(fine) / np.std(est[: len(fine)])
        lo, hi = _wilson(hit, reps)
        print(
            f"{name:<20} {reps:>5} {hit / reps:>9.3f} {np.mean(est):>9.4f} "
            f"{np.mean(se):>8.4f} {np.std(est):>7.4f} {ratio:>16.3f} {secs:>6.3f}"
            f"   (95% Wilson interval of the coverage {lo:.3f}-{hi:.3f})"
        )


def _wilson(k: int, n: int, z: float = 1.959964) -> tuple[float, float]:
    p = k / n
    c = (p + z * z / (2 * n)) / (1 + z * z / n)
    h = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return c - h, c + h


def habitat_size(reps: int, sims: int, seed: int) -> None:
    print(
        f"\n2. size of 'clustering beyond what elevation explains' (alpha 0.05, {sims} "
        "simulations, model refitted to each)"
    )
    print(
        f"{'shape':<20} {'reps':>5} {'rejected':>8} {'rate':>6} {'95% interval':>13} "
        f"{'clustered':>9} {'s/rep':>6}"
    )
    for name, poly in SHAPES.items():
        rng = np.random.default_rng(seed)
        surf = surface(poly)
        beyond = rejected = 0
        t0 = time.perf_counter()
        for _ in range(reps):
            xy = pattern(poly, rng)
            h = habitat_analysis(
                xy,
                poly,
                "p",
                surfaces=[surf],
                covariates=[("elevation", "-")],
                clustered_without=True,
                max_distance_m=3.0 if "strip" in name else 8.0,
                steps=50,
                simulations=sims,
                rng=rng,
            )
            rejected += h.test.pvalue <= 0.05
            beyond += "clustering beyond" in h.verdict
        lo, hi = _wilson(rejected, reps)
        print(
            f"{name:<20} {reps:>5} {rejected:>8} {rejected / reps:>6.3f} {lo:>6.3f}-{hi:.3f} "
            f"{beyond / reps:>9.3f} {(time.perf_counter() - t0) / reps:>6.2f}"
        )


def marks_size(reps: int, sims: int, seed: int) -> None:
    print(
        f"\n3. size of the mark correlation test under random labelling (alpha 0.05, {sims} "
        "permutations)"
    )
    print(f"{'shape':<20} {'pattern':<10} {'reps':>5} {'rejected':>8} {'rate':>6}")
    for name, poly in SHAPES.items():
        rng = np.random.default_rng(seed)
        rej = 0
        for _ in range(reps):
            parents = uniform_in_polygon(poly, 30, rng=rng)
            kids = parents[rng.integers(0, 30, 300)] + rng.normal(0, 1.0, (300, 2))
            xy = kids[shapely.contains_xy(poly, kids[:, 0], kids[:, 1])][:150]
            m = rng.lognormal(0.0, 0.3, len(xy))
            res = mark_test(
                xy, m, poly, 3.0 if "strip" in name else 8.0, steps=50, permutations=sims, rng=rng
            )
            rej += res.pvalue <= 0.05
        lo, hi = _wilson(rej, reps)
        print(
            f"{name:<20} {'Thomas':<10} {reps:>5} {rej:>8} {rej / reps:>6.3f}  ({lo:.3f}-{hi:.3f})"
        )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=200)
    ap.add_argument("--simulations", type=int, default=99)
    ap.add_argument("--seed", type=int, default=20261204)
    ap.add_argument("--only", choices=("coverage", "habitat", "marks"))
    a = ap.parse_args()
    if a.only in (None, "coverage"):
        coverage(a.replicates, a.seed)
    if a.only in (None, "habitat"):
        habitat_size(a.replicates, a.simulations, a.seed)
    if a.only in (None, "marks"):
        marks_size(a.replicates, a.simulations, a.seed)


if __name__ == "__main__":
    main()
