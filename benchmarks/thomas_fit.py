"""How well the minimum-contrast Thomas fit recovers known parameters.

Simulates Thomas processes with known parent intensity κ, spread σ and cluster size μ in a
square and an L-shaped plot, fits each pattern (:func:`ecoscan.stats.thomas.fit_thomas`) with
its parametric-bootstrap interval, and prints the median relative bias of each parameter and
the share of 95% intervals that contain the true value (coverage), plus the rejection rate of
the fit test at 5% (its size: the fitted model is the true one).

    python benchmarks/thomas_fit.py --replicates 200 --bootstrap 39
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import shapely

from ecoscan.stats.thomas import fit_thomas, thomas_pattern

SHAPES = {
    "square 100 m": shapely.box(0, 0, 100, 100),
    "L-shape": shapely.Polygon([(0, 0), (120, 0), (120, 50), (50, 50), (50, 120), (0, 120)]),
}
TRUTH = {"kappa": 0.003, "sigma": 2.0, "mu": 6.0}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=200)
    ap.add_argument("--bootstrap", type=int, default=39)
    ap.add_argument("--seed", type=int, default=2026)
    a = ap.parse_args()
    print(
        f"truth: κ = {TRUTH['kappa'] * 1e4:g} clusters/ha, σ = {TRUTH['sigma']:g} m, "
        f"μ = {TRUTH['mu']:g} plants/cluster; {a.replicates} replicates, "
        f"{a.bootstrap} bootstrap fits each"
    )
    print("shape          median bias κ  σ      μ      coverage κ  σ     μ     fit-test size  s")
    for name, plot in SHAPES.items():
        t0 = time.perf_counter()
        rng = np.random.default_rng(a.seed)
        est, cover, reject = [], [], []
        for _ in range(a.replicates):
            xy = thomas_pattern(plot, TRUTH["kappa"], TRUTH["sigma"], TRUTH["mu"], rng=rng)
            f = fit_thomas(xy, plot, replicates=a.bootstrap, rng=rng)
            est.append((f.parent_intensity_per_m2, f.sigma_m, f.mean_cluster_size))
            cover.append(
                (
                    f.parent_intensity_low <= TRUTH["kappa"] <= f.parent_intensity_high,
                    f.sigma_low_m <= TRUTH["sigma"] <= f.sigma_high_m,
                    f.cluster_size_low <= TRUTH["mu"] <= f.cluster_size_high,
                )
            )
            reject.append(f.fit_pvalue <= 0.05)
        est = np.array(est)
        truth = np.array([TRUTH["kappa"], TRUTH["sigma"], TRUTH["mu"]])
        bias = np.nanmedian(est / truth - 1, axis=0)
        cov = np.mean(cover, axis=0)
        print(
            f"{name:14s} {bias[0]:+.2f}         {bias[1]:+.2f}  {bias[2]:+.2f}  "
            f"{cov[0]:.2f}        {cov[1]:.2f}  {cov[2]:.2f}  {np.mean(reject):.3f}"
            f"          {time.perf_counter() - t0:.0f}"
        )


if __name__ == "__main__":
    main()
