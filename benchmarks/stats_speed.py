"""Speed of the dispersion statistics against a straightforward O(n²) numpy baseline.

Run: ``python benchmarks/stats_speed.py [--quick]``

1. Nearest-neighbour summary (Clark–Evans R with Donnelly's correction) for 1,000,000 points.
   Aim: under 3 s on one core.
2. Monte Carlo test with 999 simulations for a plot of 1,000 points in an irregular polygon
   with a hole. Aim: under 2 s on one core.
3. Monte Carlo test at scale: 100,000 plants in one plot, 999 simulations, with the guard-zone
   mean ranked among the same patterns as ``analyse`` does (issue 10). Aim: under 30 s with
   all cores, for a random and a clustered pattern, verdicts unchanged. Baseline, in the same
   process: the earlier code (patterns drawn by ``uniform_in_polygon``, an unbalanced KD-tree
   queried in leaf order, the guard zone by a point-in-polygon test), selected by raising
   ``montecarlo.LARGE_PATTERN``. Now: patterns drawn in spatial order from a cached grid
   triangulation (``uniform_in_cells``, focal points known from their triangles) and
   nearest neighbours from close pairs (``nn_distances_close_pairs``). Both use the
   sequential rule (Besag & Clifford 1991, h = 20), which stops early when p is large; a
   clear verdict uses all 999 patterns, spread over the cores in seeded blocks. Wall times
   depend on what else runs on the machine; the CPU time per pattern does much less.

Each figure is compared with a pure-numpy all-pairs baseline run in the same process, on a
sample the baseline can handle, and extrapolated by n² (or by the number of simulations).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import shapely

from ecoscan.stats import montecarlo
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.montecarlo import monte_carlo_nn
from ecoscan.stats.nearest import clark_evans, default_guard_m, donnelly, nn_distances

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
    guard = plot.buffer(-default_guard_m(n, plot.area))  # as analyse: the guard-zone mean too
    wkb, inner = shapely.to_wkb(plot), shapely.to_wkb(guard)
    now = montecarlo.LARGE_PATTERN

    def per_pattern_cpu(large: int) -> float:
        montecarlo.LARGE_PATTERN = large
        montecarlo._block_stats(wkb, inner, n, 1, [1, 2, 3, 4], 0)  # warm the caches
        t = time.process_time()
        montecarlo._block_stats(wkb, inner, n, base_sims, [1, 2, 3, 4], 1)
        return (time.process_time() - t) / base_sims

    before_cpu, after_cpu = per_pattern_cpu(10**12), per_pattern_cpu(now)
    print(f"Monte Carlo test at scale, {n:,} plants, up to {sims} simulations, guard zone on")
    print(
        f"  CPU per simulated pattern (one core, {base_sims} patterns): earlier "
        f"{before_cpu:.3f} s, now {after_cpu:.3f} s ({before_cpu / after_cpu:.1f} x)"
    )
    for label, xy in (("random", random_xy), ("clustered", pts)):
        res = {}
        for version, large in (("earlier", 10**12), ("now", now)):
            montecarlo.LARGE_PATTERN = large
            t, r = timed(
                monte_carlo_nn,
                xy,
                plot,
                simulations=sims,
                rng=1,
                stop_after=20,
                guard_region=guard,
            )
            res[version] = (t, r)
        montecarlo.LARGE_PATTERN = now
        (t0, r0), (t1, r1) = res["earlier"], res["now"]
        v0, v1 = (_verdict(r) for r in (r0, r1))
        assert v0 == v1, (v0, v1)
        print(
            f"  {label:9s}: earlier {t0:6.1f} s ({r0.simulations} patterns, p = {r0.pvalue:.3g}),"
            f" now {t1:6.1f} s ({r1.simulations} patterns, p = {r1.pvalue:.3g}); verdict "
            f"{v1} both; speed-up {t0 / t1:4.1f} x  (aim <= 30 s)"
        )


def _verdict(res) -> str:
    return "no departure detected" if res.pvalue >= 0.05 else res.side


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
