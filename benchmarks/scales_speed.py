"""Speed and memory of the analysis across scales on a 10,000-plant plot.

Goal (issue 6): K, L and g with the isotropic edge correction at 100 distances with 199
simulations of complete spatial randomness in under 30 s on one core, with memory growing with
the number of close pairs, not with n².

Prints, for a 1-ha square plot and a 1-ha irregular plot with a hole:

* the CPU time (``time.process_time``: one thread, and other jobs on a shared machine disturb
  it less than wall-clock time) for the observed pattern plus N simulated ones (K, L, g
  isotropic, default largest distance) and the global envelope test, against a baseline run
  in the same process: the bare KD-tree pair enumeration and distance computation that any
  exact estimator must do;
* peak traced memory for one pattern against the n × n distance matrix a dense method would
  hold, and how the peak grows with n at the default largest distance.

Run:  python benchmarks/scales_speed.py [--n 10000] [--simulations 199] [--quick]
(about 2 minutes; --quick about 20 s). Not run by the test suite.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import tracemalloc
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np
import shapely
from scipy.spatial import cKDTree

from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.envelopes import envelope_test
from ecoscan.stats.second_order import default_max_distance, pcf_bandwidth, second_order

SQUARE = shapely.box(0, 0, 100, 100)
# an invented L-shaped 1-ha plot with a pond (hole), 12 edges
IRREGULAR = shapely.Polygon(
    [(0, 0), (130, 0), (130, 50), (60, 50), (60, 110), (0, 110), (0, 0)],
    [[(20, 20), (35, 18), (40, 32), (22, 36)]],
)
IRREGULAR = shapely.affinity.scale(IRREGULAR, *(2 * [np.sqrt(10_000 / IRREGULAR.area)]))


def _bench(poly: shapely.Geometry, n: int, sims: int, seed: int = 1) -> dict:
    rng = np.random.default_rng(seed)
    pats = uniform_in_polygon(poly, n, size=sims + 1, rng=rng)
    max_distance = default_max_distance(poly, n)
    h = pcf_bandwidth(n / poly.area)
    # baseline: pair enumeration + distances only, same patterns
    t0 = time.process_time()
    for p in pats:
        pr = cKDTree(p).query_pairs(max_distance + h, output_type="ndarray")
        z = p[:, 0] + 1j * p[:, 1]
        np.abs(z[pr[:, 0]] - z[pr[:, 1]])
    t_base = time.process_time() - t0
    t0 = time.process_time()
    curves = np.empty((sims + 1, 3, 100))
    n_pairs = 0
    for k, p in enumerate(pats):
        res = second_order(p, poly, max_distance, steps=100, reduced_sample=False)
        curves[k] = res.K_iso_m2, res.L_iso_m, res.g_iso
        n_pairs += res.n_pairs
    env = [envelope_test(curves[0, f], curves[1:, f]) for f in range(3)]
    t_full = time.process_time() - t0
    return {
        "max_distance_m": max_distance,
        "pairs_per_pattern": n_pairs / (sims + 1),
        "t_full_s": t_full,
        "t_base_s": t_base,
        "p_L": env[1].pvalue,
    }


def _peak_mb(poly: shapely.Geometry, n: int) -> tuple[float, int]:
    p = uniform_in_polygon(poly, n, rng=5)
    second_order(p, poly, reduced_sample=False)  # warm up
    tracemalloc.start()
    res = second_order(p, poly, reduced_sample=False)
    _cur, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / 1e6, res.n_pairs


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=10_000)
    ap.add_argument("--simulations", type=int, default=199)
    ap.add_argument("--quick", action="store_true", help="19 simulations, smaller scaling run")
    a = ap.parse_args()
    sims = 19 if a.quick else a.simulations
    print(f"K, L, g (isotropic), 100 distances, n = {a.n}, observed + {sims} simulations, one core")
    print(f"load average before the run: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    for name, poly in (("square 1 ha", SQUARE), ("irregular 1 ha with hole", IRREGULAR)):
        b = _bench(poly, a.n, sims)
        per = b["t_full_s"] / (sims + 1)
        print(
            f"  {name:26s} max distance {b['max_distance_m']:.1f} m, "
            f"{b['pairs_per_pattern'] / 1e6:.2f} M pairs/"
            f"pattern: {b['t_full_s']:.1f} s total ({per * 1000:.0f} ms/pattern); baseline pair "
            f"enumeration {b['t_base_s']:.1f} s ({b['t_base_s'] / (sims + 1) * 1000:.0f} ms/"
            f"pattern); ratio {b['t_full_s'] / b['t_base_s']:.2f}; global p(L) = {b['p_L']:.3f}"
        )
        if sims != 199:
            print(f"  {'':26s} projected for 199 simulations: {per * 200:.1f} s")
    print(f"load average after the timing runs: {os.getloadavg()[0]:.2f}")
    print("memory for one pattern (tracemalloc peak) at the default largest distance:")
    ns = [2_500, 5_000, 10_000] if a.quick else [2_500, 5_000, 10_000, 20_000]
    for n in ns:
        mb, pairs = _peak_mb(SQUARE, n)
        dense = n * n * 8 / 1e6
        print(
            f"  n = {n:6d}: {pairs / 1e6:6.2f} M pairs, peak {mb:7.1f} MB "
            f"({mb / max(pairs / 1e6, 1e-9):5.1f} MB per M pairs); a dense n x n distance matrix "
            f"would be {dense:8.0f} MB (ratio {dense / mb:6.1f})"
        )


if __name__ == "__main__":
    main()
