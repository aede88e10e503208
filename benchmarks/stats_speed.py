"""Speed of the dispersion statistics against a straightforward O(n²) numpy baseline.

Run: ``python benchmarks/stats_speed.py [--quick]``

1. Nearest-neighbour summary (Clark–Evans R with Donnelly's correction) for 1,000,000 points.
   Aim: under 3 s on one core.
2. Monte Carlo test with 999 simulations for a plot of 1,000 points in an irregular polygon
   with a hole. Aim: under 2 s on one core.
3. Monte Carlo test at scale: 100,000 plants in one plot, 999 simulations (issue 10). Aim:
   under 30 s with all cores, for a random and a clustered pattern. Baseline: the fixed-N
   test in one process, one KD-tree per pattern queried in input order (the earlier code),
   timed on a few patterns in the same process and extrapolated by the number of patterns.
   The sequential rule (Besag & Clifford 1991, h = 20) stops early when p is large; a
   clear verdict still uses all 999 patterns, spread over the cores in seeded blocks.

Each figure is compared with a pure-numpy all-pairs baseline run in the same process, on a
sample the baseline can handle, and extrapolated by n² (or by the number of simulations).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import shapely

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.montecarlo import mean_nn_batch, monte_carlo_nn
from ecoscan.stats.nearest import clark_evans, donnelly, nn_distances

IRREGULAR = shapely.Polygon(
    [(0, 0), (400, 0), (520, 240), (240, 440), (80, 320), (0, 160)]
).difference(shapely.Point(240, 200).buffer(60))


def brute_nn(xy: np.ndarray, chunk: int = 2000) -> np.ndarray:
    """Baseline: all pairwise distances with numpy broadcasting, in row chunks."""
    out = np.empty(xy.shape[0])
    for s in range(0, xy.shape[0], chunk):
        block = xy[s : s + chunk]
        d2 = ((block[:, None, :] - xy[None, :, :]) ** 2).sum(axis=2)
        d2[np.arange(block.shape[0]), np.arange(s, s + block.shape[0])] = np.inf
        out[s : s + chunk] = np.sqrt(d2.min(axis=1))
    return out


def timed(fn, *args, repeat: int = 1, **kw):
    best, res = np.inf, None
    for _ in range(repeat):
        t = time.perf_counter()
        res = fn(*args, **kw)
        best = min(best, time.perf_counter() - t)
    return best, res


def bench_nn(n: int, n_base: int) -> None:
    rng = np.random.default_rng(1)
    side = 1000.0
    poly = shapely.box(0, 0, side, side)
    xy = rng.uniform(0, side, (n, 2))

    def summary(xy):
        d = nn_distances(xy)
        return clark_evans(xy, poly.area, nn=d), donnelly(xy, poly, nn=d)

    t_fast, (ce, dn) = timed(summary, xy, repeat=3)
    sample = xy[:n_base]
    t_base, d_base = timed(brute_nn, sample)
    t_fast_s, d_fast = timed(nn_distances, sample, repeat=3)
    assert np.allclose(d_base, d_fast)
    extrapolated = t_base * (n / n_base) ** 2
    print(f"NN summary, {n:,} points (R = {ce.statistic:.4f}, R_donnelly = {dn.statistic:.4f})")
    print(f"  ecoscan (one KD-tree, R and Donnelly):           {t_fast:8.3f} s  (aim < 3 s)")
    print(f"  baseline O(n^2) numpy on {n_base:,} points:           {t_base:8.3f} s")
    print(f"  ecoscan on the same {n_base:,} points:                {t_fast_s:8.4f} s")
    print(f"  speed-up on the sample:                        {t_base / t_fast_s:8.0f} x")
    print(f"  baseline extrapolated to {n:,} (n^2):      {extrapolated:8.0f} s")
    print(f"  speed-up at {n:,}:                          {extrapolated / t_fast:8.0f} x")


def bench_mc(n: int, sims: int, base_sims: int) -> None:
    xy = uniform_in_polygon(IRREGULAR, n, rng=7)
    t_fast, res = timed(monte_carlo_nn, xy, IRREGULAR, simulations=sims, rng=1, repeat=3)

    def baseline(k):
        gen = np.random.default_rng(2)
        out = np.empty(k)
        for i in range(k):
            pat = uniform_in_polygon(IRREGULAR, n, rng=gen)
            out[i] = brute_nn(pat).mean()
        return out

    t_base, _ = timed(baseline, base_sims)
    extrapolated = t_base * sims / base_sims
    print(f"Monte Carlo test, {n:,} points, {sims} simulations, irregular polygon with a hole")
    print(f"  ecoscan (one small KD-tree per simulated pattern): {t_fast:8.3f} s  (aim < 2 s)")
    print(f"    p = {res.pvalue:.3f}, expected NN under CSR = {res.expected_nn_m:.3f} m")
    print(f"  baseline O(n^2) numpy, {base_sims} simulations:            {t_base:8.3f} s")
    print(f"  baseline extrapolated to {sims} simulations:      {extrapolated:8.3f} s")
    print(f"  speed-up:                                       {extrapolated / t_fast:8.1f} x")


def bench_mc_scale(n: int, sims: int, base_sims: int) -> None:
    plot = IRREGULAR
    rng = np.random.default_rng(11)
    random_xy = uniform_in_polygon(plot, n, rng=rng)
    # clustered: 2,000 parents, plants within 2 m of them, kept inside the plot
    parents = uniform_in_polygon(plot, 2000, rng=rng)
    pts = parents[rng.integers(0, 2000, 3 * n)] + rng.normal(0, 1.0, (3 * n, 2))
    pts = pts[shapely.contains_xy(plot, pts[:, 0], pts[:, 1])][:n]

    def baseline(xy, k):
        gen = np.random.default_rng(2)
        out = np.empty(k)
        for i in range(k):
            pat = uniform_in_polygon(plot, xy.shape[0], rng=gen)
            out[i] = mean_nn_batch(pat[None])[0]
        return out

    t_base, _ = timed(baseline, random_xy, base_sims)
    per = t_base / base_sims
    print(f"Monte Carlo test at scale, {n:,} plants, up to {sims} simulations")
    print(f"  baseline (fixed N, one process): {per:.3f} s per pattern -> {per * sims:6.1f} s")
    for label, xy in (("random", random_xy), ("clustered", pts)):
        t, res = timed(monte_carlo_nn, xy, plot, simulations=sims, rng=1, stop_after=20)
        verdict = "random" if res.pvalue >= 0.05 else res.direction
        print(
            f"  {label:9s}: {t:6.1f} s ({res.simulations} patterns, p = {res.pvalue:.3g}, "
            f"{verdict}); speed-up {per * sims / t:5.1f} x  (aim <= 30 s)"
        )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes, for a smoke run")
    a = ap.parse_args()
    if a.quick:
        bench_nn(100_000, 2_000)
        bench_mc(1_000, 99, 5)
        bench_mc_scale(20_000, 199, 5)
    else:
        bench_nn(1_000_000, 10_000)
        bench_mc(1_000, 999, 50)
        bench_mc_scale(100_000, 999, 10)


if __name__ == "__main__":
    main()
