"""Measured size of the comparisons of nearest-neighbour distance distributions.

Under complete spatial randomness every plot of both groups is an independent random
pattern of the same intensity, so any test of "the two groups' NN-distance distributions
differ" should reject about α = 5% of the time. Compared here, at α = 5%:

* ``pooled MW`` and ``pooled KS``: Mann–Whitney U and two-sample Kolmogorov–Smirnov
  (scipy.stats) on all the groups' distances pooled as if independent (what ``compare``
  reported as the distance tests before the plot-permutation test);
* ``plot permutation``: :func:`ecoscan.stats.nn_distribution.nn_distribution_test`, the
  KS distance with the plots' group labels permuted.

Designs: one plot per group (two random plots) and four plots per group, in a 50 m
square, an L-shaped plot with a hole and a 250 × 10 m strip, 60 plants per plot.

Run: ``python benchmarks/nn_distribution_validity.py [--reps 1000]`` (about a minute).
Not run by the test suite. Prints rejection rates with their binomial 95% half-width.
"""

from __future__ import annotations

import argparse
import math

import numpy as np
import shapely
from scipy import stats as sps

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.nearest import nn_distances
from ecoscan.stats.nn_distribution import nn_distribution_test

SHAPES = {
    "square 50 m": shapely.box(0, 0, 50, 50),
    "L with hole": shapely.Polygon(
        [(0, 0), (60, 0), (60, 25), (25, 25), (25, 60), (0, 60)],
        [[(8, 8), (16, 8), (16, 16), (8, 16)]],
    ),
    "strip 250x10 m": shapely.box(0, 0, 250, 10),
}


def _rates(shape, plots_per_group: int, n: int, reps: int, seed: int) -> dict[str, float]:
    rng = np.random.default_rng(seed)
    hits = {"pooled MW": 0, "pooled KS": 0, "plot permutation": 0}
    runs = {"pooled MW": 0, "pooled KS": 0, "plot permutation": 0}
    for _ in range(reps):
        nn = [
            nn_distances(uniform_in_polygon(shape, n, rng=rng)) for _ in range(2 * plots_per_group)
        ]
        a, b = nn[:plots_per_group], nn[plots_per_group:]
        pa, pb = np.concatenate(a), np.concatenate(b)
        hits["pooled MW"] += sps.mannwhitneyu(pa, pb, alternative="two-sided").pvalue <= 0.05
        hits["pooled KS"] += sps.ks_2samp(pa, pb).pvalue <= 0.05
        runs["pooled MW"] += 1
        runs["pooled KS"] += 1
        res = nn_distribution_test(a, b, permutations=199, rng=rng)
        if math.isfinite(res.pvalue):
            hits["plot permutation"] += res.pvalue <= 0.05
            runs["plot permutation"] += 1
    return {k: (hits[k] / runs[k] if runs[k] else float("nan")) for k in hits}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--reps", type=int, default=1000)
    ap.add_argument("--n", type=int, default=60, help="plants per plot")
    args = ap.parse_args()
    half = 1.96 * math.sqrt(0.05 * 0.95 / args.reps)
    print(
        f"null rejection rates at alpha 0.05, {args.reps} replicates each (binomial 95% "
        f"half-width around 0.05: ±{half:.3f}); {args.n} plants per plot"
    )
    print(
        f"{'shape':<16} {'plots/group':>11} {'pooled MW':>10} {'pooled KS':>10} {'plot perm.':>10}"
    )
    for k, (name, shape) in enumerate(SHAPES.items()):
        for m in (1, 4):
            r = _rates(shape, m, args.n, args.reps, seed=100 * k + m)
            perm = r["plot permutation"]
            perm_s = "no test" if not math.isfinite(perm) else f"{perm:.3f}"
            print(
                f"{name:<16} {m:>11} {r['pooled MW']:>10.3f} {r['pooled KS']:>10.3f} {perm_s:>10}"
            )


if __name__ == "__main__":
    main()
