"""Validity table: how often each of ecoscan's tests rejects, under randomness and otherwise.

Run: ``nice python benchmarks/validity.py [--replicates 1000] [--quick] [--markdown FILE]
[--csv FILE] [--workers 2] [--only TEXT]``

For every test that ecoscan reports, this measures its rejection rate at α = 5 % under
complete spatial randomness (its *size*, which should be close to 5 %) in three plot shapes
(a square, an L-shaped plot with a hole, a narrow strip) at about 30 and 300 plants, and its
*power* against a clustered (Thomas) and a regular (jittered grid) process of stated
strength. A test that gives a verdict and whose size leaves 3–7 % in any shape is flagged
"approximate".

Design (stated so the numbers can be read):

- Every test is a :class:`Entry` in :data:`REGISTRY`: a name, the command that reports it,
  the kind of data it takes, a function ``(data, polygon, rng) -> p-value`` that calls the
  same ecoscan functions as the command, with the command's defaults, whether the command
  turns it into a verdict, and the rejection rule the command uses (``p < α`` or ``p ≤ α``).
  Rule-based verdicts (standardised Morisita beyond ±0.5, the pattern label of a group)
  return 0 (reject) or 1. A NaN p-value means "not computed" (e.g. no focal plants left
  inside the guard zone) and is counted apart.
- Monte Carlo tests, and what they cost. The analyse tests come from one call of
  ``analyse_plot`` per replicate (the command's own function and defaults) with 99
  simulations instead of 999; the two-sided verdict ``p_mc < 0.05`` can then reach 4 %
  at most (4.8 % with 999). The envelope tests draw 99 simulated
  curves (the command uses 199) from a pool of ``--pool`` K and g curves, simulated as
  ``scales`` does. Each replicate's observed pattern is always new, so each replicate is
  exactly the test as the command runs it; replicates share the pools, so they are not
  quite independent (the binomial interval is a little too narrow for these rows). The
  tests that condition on the observed pattern use 39 simulations (change: random losses
  and recruits, command default 199) or relabellings (cross-type, default 199); with
  ``p ≤ 0.05`` two-sided, 39 can still reach 5 %.
- Data per kind: ``plot`` one pattern of exactly n plants; ``labelled`` the same with half
  the plants labelled B at random (the null of random labelling still holds for clustered
  or regular patterns, so its "power" columns are sizes too); ``groups`` two groups of 4
  plots of the same shape, plant counts Poisson with mean n per plot, group A always
  random, group B random (size) or from the alternative (power); ``dates`` an earlier
  random pattern of n plants, each surviving with probability 0.8, and Poisson(0.2 n)
  recruits (no net change expected) placed at random (size), or as a Thomas / jittered
  grid pattern (power); ``paired`` 8 such plots on two dates (compare's paired tests).
- Alternatives: Thomas process with parent intensity κ = λ/5 (5 plants per cluster on
  average) and Gaussian offsets σ = 0.5/√λ per axis (half the mean spacing 1/√λ), λ = n/A,
  simulated with parents in the bounding box dilated by 4σ and thinned at random to exactly
  n plants; jittered grid with one plant per cell of a rectangular grid (≈ 1.1 n cells in
  the plot; one row of cells in a strip narrower than a cell), each plant displaced uniformly
  over ±30 % of the cell side in each axis (jitter fraction 0.6), thinned at random to n.

References: Besag & Diggle (1977) Applied Statistics 26: 327–333 (Monte Carlo tests);
Myllymäki et al. (2017) JRSS B 79: 381–404 (global envelopes); Thomas (1949) Biometrika 36:
18–25 (cluster process; from memory).
"""

from __future__ import annotations

import argparse
import contextlib
import csv
import datetime as _dt
import math
import multiprocessing as mp
import os
import re
import subprocess
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import shapely
from scipy import stats as sps

from ecoscan.analysis.change.compute import _pooled_r, _row
from ecoscan.analysis.compare.compute import GroupSummary, PlotUnit, _pair_row, _pattern
from ecoscan.analysis.dispersion import compute as analysis
from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot
from ecoscan.analysis.dispersion.detectable import NO_DEPARTURE
from ecoscan.analysis.scales.compute import ScalesSettings, kinds_verdict
from ecoscan.stats.compare_r import plot_nn, pooled_clark_evans, r_change_test
from ecoscan.stats.cross import random_labelling_test
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.envelopes import envelope_test
from ecoscan.stats.montecarlo import mean_nn_batch
from ecoscan.stats.quadrat import standardised_morisita
from ecoscan.stats.second_order import default_max_distance, second_order

ALPHA = 0.05
#: Band of sizes accepted for a test that gives a verdict (issue 10).
SIZE_BAND = (0.03, 0.07)
#: Simulations per replicate for the envelope tests (the command uses 199).
SIMULATIONS = 99
#: Simulations of each analyse_plot call without a pool (the command's default is 999).
ANALYSE_SIMULATIONS = 99
#: Simulated means / tables for the NN and quadrat Monte Carlo tests with a pool.
MC_SIMULATIONS = 999
#: Multinomial tables for the exact quadrat test (999 in the command; 199 can reach 5 %).
QUADRAT_TABLES = 199
#: Simulations / relabellings for the costly tests that cannot share a pool (change,
#: cross-type); with p ≤ 0.05 read two-sided, 39 can still reach 5 %.
FEW_SIMULATIONS = 39
#: Plots per group in the comparisons between groups.
PLOTS_PER_GROUP = 4
#: Survival probability and recruits per plant in the change design.
SURVIVAL = 0.8
RECRUITS = 0.2
#: Thomas process: plants per cluster, and σ as a fraction of the mean spacing 1/√λ.
THOMAS_MU = 5.0
THOMAS_SIGMA = 0.5
#: Jittered grid: displacement over this fraction of the cell side (uniform, centred).
JITTER = 0.6

SHAPES: dict[str, shapely.Geometry] = {
    "square": shapely.box(0.0, 0.0, 100.0, 100.0),
    "L+hole": shapely.Polygon(
        [(0, 0), (100, 0), (100, 50), (50, 50), (50, 100), (0, 100)],
        [[(15, 15), (30, 15), (30, 30), (15, 30)]],
    ),
    "strip": shapely.box(0.0, 0.0, 400.0, 5.0),
}
SHAPE_TEXT = {
    "square": "100 × 100 m square",
    "L+hole": "L-shape in a 100 m square (7,500 m²) with a 15 × 15 m hole: 7,275 m²",
    "strip": "400 × 5 m strip",
}
SIZES = (30, 300)
PROCESSES = ("csr", "thomas", "grid")


# ------------------------------------------------------------------------------ patterns


def csr_pattern(polygon, n: int, rng: np.random.Generator) -> np.ndarray:
    """n plants uniformly at random in the polygon (binomial process), metres."""
    return uniform_in_polygon(polygon, n, rng=rng)


def _thin_to(xy: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    return xy[rng.choice(xy.shape[0], n, replace=False)]


def thomas_pattern(polygon, n: int, rng: np.random.Generator) -> np.ndarray:
    """Exactly n plants of a Thomas process of intensity about n / A (see module notes)."""
    area = float(polygon.area)
    lam = n / area
    sigma = THOMAS_SIGMA / math.sqrt(lam)
    kappa = lam / THOMAS_MU
    x0, y0, x1, y1 = polygon.bounds
    pad = 4.0 * sigma
    bx0, by0, bx1, by1 = x0 - pad, y0 - pad, x1 + pad, y1 + pad
    shapely.prepare(polygon)
    for _ in range(100):
        k = max(1, int(rng.poisson(kappa * (bx1 - bx0) * (by1 - by0))))
        px = rng.uniform(bx0, bx1, k)
        py = rng.uniform(by0, by1, k)
        m = rng.poisson(1.5 * THOMAS_MU, k)  # thinned by about 2/3 below
        cx = np.repeat(px, m) + rng.normal(0.0, sigma, int(m.sum()))
        cy = np.repeat(py, m) + rng.normal(0.0, sigma, int(m.sum()))
        ok = shapely.contains_xy(polygon, cx, cy)
        if ok.sum() >= n:
            return _thin_to(np.column_stack([cx[ok], cy[ok]]), n, rng)
    raise RuntimeError("Thomas simulation kept too few plants")


def jittered_grid_pattern(polygon, n: int, rng: np.random.Generator) -> np.ndarray:
    """Exactly n plants of a jittered rectangular grid (see module notes)."""
    area = float(polygon.area)
    x0, y0, x1, y1 = polygon.bounds
    width, height = x1 - x0, y1 - y0
    shapely.prepare(polygon)
    cell = area / (1.1 * n)
    for _ in range(30):
        rows = max(1, round(height / math.sqrt(cell)))
        sy = height / rows
        sx = cell / sy
        cols = math.ceil(width / sx) + 1
        ox = x0 - rng.uniform(0.0, sx)
        ii, jj = np.meshgrid(np.arange(cols), np.arange(rows))
        cx = ox + (ii.ravel() + 0.5) * sx + (rng.uniform(size=ii.size) - 0.5) * JITTER * sx
        cy = y0 + (jj.ravel() + 0.5) * sy + (rng.uniform(size=ii.size) - 0.5) * JITTER * sy
        ok = shapely.contains_xy(polygon, cx, cy)
        if ok.sum() >= n:
            return _thin_to(np.column_stack([cx[ok], cy[ok]]), n, rng)
        cell *= 0.9
    raise RuntimeError("jittered grid kept too few plants")


PATTERNS: dict[str, Callable[[Any, int, np.random.Generator], np.ndarray]] = {
    "csr": csr_pattern,
    "thomas": thomas_pattern,
    "grid": jittered_grid_pattern,
}


# --------------------------------------------------------------------------- data kinds


@dataclass(frozen=True)
class Labelled:
    """Plants with a two-kind label (True = kind B)."""

    xy: np.ndarray
    is_b: np.ndarray


@dataclass(frozen=True)
class Groups:
    """Two groups of plots of the same shape (lists of (n, 2) arrays)."""

    a: list[np.ndarray]
    b: list[np.ndarray]


@dataclass(frozen=True)
class Dates:
    """One plot on two dates: earlier plants, which survive, and the recruits."""

    earlier: np.ndarray
    survived: np.ndarray
    recruits: np.ndarray

    @property
    def later(self) -> np.ndarray:
        return np.concatenate([self.earlier[self.survived], self.recruits])


def make_data(kind: str, process: str, polygon, n: int, rng: np.random.Generator):
    """One replicate's data of a kind, under ``process`` ('csr', 'thomas' or 'grid')."""
    draw = PATTERNS[process]
    if kind == "plot":
        return draw(polygon, n, rng)
    if kind == "labelled":
        xy = draw(polygon, n, rng)
        is_b = np.zeros(n, bool)
        is_b[rng.choice(n, n // 2, replace=False)] = True
        return Labelled(xy, is_b)
    if kind == "groups":
        counts = rng.poisson(n, 2 * PLOTS_PER_GROUP)
        a = [csr_pattern(polygon, int(c), rng) for c in counts[:PLOTS_PER_GROUP]]
        b = [draw(polygon, int(c), rng) for c in counts[PLOTS_PER_GROUP:]]
        return Groups(a, b)
    if kind == "dates":
        earlier = csr_pattern(polygon, n, rng)
        survived = rng.uniform(size=n) < SURVIVAL
        m = int(rng.poisson(RECRUITS * n))
        recruits = draw(polygon, m, rng) if m >= 2 else csr_pattern(polygon, m, rng)
        return Dates(earlier, survived, recruits)
    if kind == "paired":
        return [make_data("dates", process, polygon, n, rng) for _ in range(PAIRED_PLOTS)]
    raise ValueError(f"unknown data kind {kind!r}")


# ------------------------------------------------------------------------------ registry


@dataclass(frozen=True)
class Entry:
    """One test in the validity table.

    Attributes
    ----------
    name : str
        Row label.
    command : str
        The ecoscan command that reports it.
    kind : {'plot', 'labelled', 'groups', 'dates'}
        The data it takes (see :func:`make_data`).
    pvalue : callable
        ``(data, polygon, rng) -> float``; NaN when not computed.
    verdict : bool
        True when the command turns the result into a verdict (a word or a label).
    rule : {'lt', 'le'}
        Rejection rule: ``p < α`` or ``p ≤ α`` (as the command reads it).
    note : str
        What is measured, briefly.
    """

    name: str
    command: str
    kind: str
    pvalue: Callable[[Any, Any, np.random.Generator], float]
    verdict: bool
    rule: str = "le"
    note: str = ""

    def rejects(self, p: float, alpha: float = ALPHA) -> bool:
        return bool(p < alpha) if self.rule == "lt" else bool(p <= alpha)


REGISTRY: list[Entry] = []


def register(name: str, command: str, kind: str, *, verdict: bool, rule: str = "le", note=""):
    """Decorator adding a p-value function to :data:`REGISTRY`."""

    def deco(fn):
        REGISTRY.append(Entry(name, command, kind, fn, verdict, rule, note))
        return fn

    return deco


class _Shared:
    """One-slot caches so that tests sharing a computation on the same data run it once."""

    def __init__(self) -> None:
        self.slots: dict[str, tuple[Any, Any]] = {}

    def get(self, key: str, data: Any, compute: Callable[[], Any]) -> Any:
        hit = self.slots.get(key)
        if hit is not None and hit[0] is data:
            return hit[1]
        value = compute()
        self.slots[key] = (data, value)  # keeps ``data`` alive, so identity stays unique
        return value


SHARED = _Shared()


# -- analyse: one call of ecoscan.analysis.dispersion.compute.analyse_plot per replicate
#    (the command's own function and defaults, except fewer simulations), its dispersion.csv
#    row read back


@contextlib.contextmanager
def _no_cluster_bootstrap():
    """A clustered plot's cluster description (a Thomas fit with a parametric bootstrap)
    changes no p-value: skip its bootstrap during one call, then restore the setting."""
    old = analysis.CLUSTER_BOOTSTRAP
    analysis.CLUSTER_BOOTSTRAP = 0
    try:
        yield
    finally:
        analysis.CLUSTER_BOOTSTRAP = old


def _dispersion_row(xy, polygon, rng) -> dict[str, Any]:
    def compute():
        # every column as analyse computes it, with its own Monte Carlo (guard-zone p,
        # quadrat tables and Morisita limits come from the same simulations)
        settings = DispersionSettings(
            simulations=ANALYSE_SIMULATIONS, seed=int(rng.integers(2**31))
        )
        with _no_cluster_bootstrap():
            return analyse_plot(xy, polygon, "plot", settings).row()

    return SHARED.get("dispersion", xy, compute)


def _column_entry(name: str, column: str, *, verdict: bool = False, rule="le", note="") -> None:
    register(name, "analyse", "plot", verdict=verdict, rule=rule, note=note)(
        lambda xy, polygon, rng: float(_dispersion_row(xy, polygon, rng)[column])
    )


_column_entry("Clark–Evans R, no edge correction", "p")
_column_entry("Clark–Evans R, Donnelly correction", "p_donnelly")
_column_entry("Clark–Evans R, guard zone 1/√ρ", "p_guard")
_column_entry(
    "Monte Carlo NN test (the `verdict`)",
    "p_mc",
    verdict=True,
    rule="lt",
    note=f"{ANALYSE_SIMULATIONS} simulations (the command's default is 999)",
)
_column_entry("quadrat χ² (quadrat_p)", "quadrat_p")
_column_entry(
    "quadrat exact (quadrat_p_mc)",
    "quadrat_p_mc",
    note=f"{ANALYSE_SIMULATIONS} multinomial tables (the command's default is 999)",
)


@register(
    "VMR: (q−1)·VMR against χ²(q−1)",
    "analyse",
    "plot",
    verdict=False,
    note="the index-of-dispersion test; VMR = X²/(q−1), so it is the quadrat χ² test",
)
def p_vmr(xy, polygon, rng):
    row = _dispersion_row(xy, polygon, rng)
    df = row["quadrat_df"] or 0
    if not (np.isfinite(row["vmr"]) and df >= 1):
        return float("nan")
    x = row["vmr"] * df
    return float(min(1.0, 2.0 * min(sps.chi2.sf(x, df), sps.chi2.cdf(x, df))))


@register(
    "Morisita I_δ beyond the limits for q equal cells",
    "analyse",
    "plot",
    verdict=False,
    note="I_δ read against Smith-Gill's M_u, M_c with the cell count q, ignoring clipping",
)
def p_morisita(xy, polygon, rng):
    row = _dispersion_row(xy, polygon, rng)
    ip = standardised_morisita(row["morisita"], int(row["n"]), int(row["quadrat_cells"] or 0))
    return float("nan") if not np.isfinite(ip) else (0.0 if abs(ip) >= 0.5 else 1.0)


@register(
    "standardised Morisita I_p beyond ±0.5",
    "analyse",
    "plot",
    verdict=True,
    note="±0.5 are read as the 95 % limits",
)
def p_morisita_std(xy, polygon, rng):
    ip = _dispersion_row(xy, polygon, rng)["morisita_std"]
    return float("nan") if not np.isfinite(ip) else (0.0 if abs(ip) >= 0.5 else 1.0)


# -- scales: global envelope tests (the verdict uses L by default, or g), as in
#    ecoscan.analysis.scales.compute.analyse_plot: observed curve, 99 random patterns in the
#    same polygon


@dataclass
class NullPool:
    """Statistics of many random patterns of one n in one polygon (see module notes)."""

    max_distance_m: float
    K: np.ndarray  # (M, steps) Ripley's K, m²
    g: np.ndarray  # (M, steps) pair correlation
    mean_nn: np.ndarray  # (5 M,) mean nearest-neighbour distance, metres


#: Pools by (shape wkb, n), filled by :func:`build_pools`; empty = simulate per replicate.
POOLS: dict[tuple[bytes, int], NullPool] = {}
_SCALES = ScalesSettings()  # the command's defaults: L, ERL, steps = 100


def _curves(xy, polygon, max_distance):
    so = second_order(xy, polygon, max_distance, steps=_SCALES.steps, reduced_sample=False)
    return so.K_iso_m2, so.g_iso


def pool_curves(polygon, n: int, count: int, seed) -> tuple[np.ndarray, ...]:
    """K and g curves of ``count`` random patterns, simulated as ``scales`` simulates them,
    and the mean NN distance of 5 × ``count`` more, as ``analyse`` simulates them (for
    :class:`NullPool`)."""
    rng = np.random.default_rng(seed)
    max_distance = default_max_distance(polygon, n)
    ks = np.empty((count, _SCALES.steps))
    gs = np.empty((count, _SCALES.steps))
    for i in range(count):
        ks[i], gs[i] = _curves(csr_pattern(polygon, n, rng), polygon, max_distance)
    means = mean_nn_batch(uniform_in_polygon(polygon, n, size=5 * count, rng=rng))
    return ks, gs, means


def _envelopes(xy, polygon, rng):
    def compute():
        n = xy.shape[0]
        max_distance = default_max_distance(polygon, n)
        k_obs, g_obs = _curves(xy, polygon, max_distance)
        pool = POOLS.get((polygon.wkb, n))
        if pool is not None and pool.K.shape[0] >= SIMULATIONS:
            pick = rng.choice(pool.K.shape[0], SIMULATIONS, replace=False)
            k_sim, g_sim = pool.K[pick], pool.g[pick]
        else:
            sims = uniform_in_polygon(polygon, n, size=SIMULATIONS, rng=rng)
            pairs = [_curves(s, polygon, max_distance) for s in sims]
            k_sim = np.array([p[0] for p in pairs])
            g_sim = np.array([p[1] for p in pairs])
        r = max_distance * np.arange(1, _SCALES.steps + 1) / _SCALES.steps
        curves = {
            "K": (k_obs, k_sim, np.pi * r**2),
            "L": (np.sqrt(np.maximum(k_obs, 0) / np.pi), np.sqrt(np.maximum(k_sim, 0) / np.pi), r),
            "g": (g_obs, g_sim, np.ones_like(r)),
        }
        out = {}
        for fn, (obs, sim, theo) in curves.items():
            for test in ("rank-length", "max-deviation"):
                env = envelope_test(obs, sim, csr_value=theo, alpha=ALPHA, test=test)
                out[fn, test] = env.pvalue
        return out

    return SHARED.get("envelopes", xy, compute)


def _envelope_entry(fn: str, test: str, verdict: bool, note: str) -> None:
    label = {"rank-length": "extreme rank length", "max-deviation": "maximum absolute deviation"}[
        test
    ]
    name = f"global envelope, {fn}, {label}"
    register(name, "scales", "plot", verdict=verdict, note=note)(
        lambda xy, polygon, rng: _envelopes(xy, polygon, rng)[fn, test]
    )


_envelope_entry("L", "rank-length", True, "the default verdict of `scales`")
_envelope_entry("L", "max-deviation", True, "verdict with the maximum-deviation global test")
_envelope_entry("g", "rank-length", True, "verdict with the pair correlation")
_envelope_entry("g", "max-deviation", True, "verdict with g and the maximum-deviation test")
_envelope_entry("K", "rank-length", False, "reported for K; same ranks as L")
_envelope_entry("K", "max-deviation", False, "reported for K")


def _cross(data: Labelled, polygon, rng):
    def compute():
        res = random_labelling_test(
            data.xy,
            data.is_b,
            polygon,
            steps=_SCALES.steps,
            simulations=FEW_SIMULATIONS,
            alpha=ALPHA,
            test=_SCALES.global_test,
            rng=rng,
            labels=("A", "B"),
        )
        words = kinds_verdict(res, ALPHA)
        return res, words

    return SHARED.get("cross", data, compute)


@register("cross-type: cross-L, random labelling", "scales", "labelled", verdict=True)
def p_cross_l(data, polygon, rng):
    return _cross(data, polygon, rng)[0].L_between_kinds.pvalue


@register("cross-type: K_BB − K_AA, random labelling", "scales", "labelled", verdict=True)
def p_cross_d(data, polygon, rng):
    return _cross(data, polygon, rng)[0].D.pvalue


@register(
    "cross-type verdict (either test)",
    "scales",
    "labelled",
    verdict=True,
    note="the words say 'random subset' only when both tests accept",
)
def p_cross_either(data, polygon, rng):
    _res, words = _cross(data, polygon, rng)
    return 1.0 if "placed like a random subset" in words else 0.0


# -- compare: one pair of groups, as ecoscan.analysis.compare.compute._pair_row computes it


def _group(name: str, patterns: Sequence[np.ndarray], polygon) -> GroupSummary:
    units = tuple(
        PlotUnit("validity", name, "", f"{name}{i}", plot_nn(xy, polygon.area, polygon.length))
        for i, xy in enumerate(patterns)
    )
    n = sum(u.nn.n for u in units)
    area = sum(u.nn.area_m2 for u in units)
    return GroupSummary(name, units, n, area, pooled_clark_evans([u.nn for u in units]))


def _pair(data: Groups, polygon, rng):
    def compute():
        a, b = _group("A", data.a, polygon), _group("B", data.b, polygon)
        row = _pair_row(a, b, 999, rng)  # compare's default: 999 permutations
        row["pattern_b"] = _pattern(b.r)
        return row

    return SHARED.get("pair", data, compute)


def _pair_entry(name, column, verdict=False, note=""):
    register(name, "compare", "groups", verdict=verdict, note=note)(
        lambda data, polygon, rng: float(_pair(data, polygon, rng).get(column, float("nan")))
    )


_pair_entry("rate test, density A vs B", "p_density")
_pair_entry("ΔR z test, no edge correction", "p_R_diff")
_pair_entry("ΔR z test, Donnelly correction", "p_R_donnelly_diff")
_pair_entry(
    "ΔR permutation test (whole plots)",
    "p_R_perm",
    note="4 + 4 plots: 70 arrangements, smallest p 2/70",
)
_pair_entry("NN distances, Mann–Whitney", "p_mw")
_pair_entry("NN distances, Kolmogorov–Smirnov", "p_ks")
_pair_entry(
    "NN distances, plots permuted",
    "p_nn_distribution",
    note="compare's distribution test that moves whole plots (n/a where compare lacks it)",
)


@register(
    "group pattern label (pooled R)",
    "compare",
    "groups",
    verdict=True,
    note="groups.csv label of group B: 'no departure detected' unless the pooled-R z test "
    "rejects",
)
def p_group_pattern(data, polygon, rng):
    label = _pair(data, polygon, rng)["pattern_b"]
    return float("nan") if not label else (1.0 if label == NO_DEPARTURE else 0.0)


# -- compare --by date: the same plots on two dates, paired sign-flip tests over plots
#    (registered only where ecoscan.analysis.compare.compute has them)

PAIRED_PLOTS = 8


def _paired(data: list, polygon, rng):
    def compute():
        from ecoscan.analysis.compare.compute import _paired as paired_tests

        def units(patterns):
            return tuple(
                PlotUnit("validity", "", "", f"p{i}", plot_nn(xy, polygon.area, polygon.length))
                for i, xy in enumerate(patterns)
            )

        def group(name, us):
            n = sum(u.nn.n for u in us)
            area = sum(u.nn.area_m2 for u in us)
            return GroupSummary(name, us, n, area, pooled_clark_evans([u.nn for u in us]))

        a = group("earlier", units([d.earlier for d in data]))
        b = group("later", units([d.later for d in data]))
        return paired_tests(a, b, 999, rng)

    return SHARED.get("paired", data, compute)


if hasattr(__import__("ecoscan.analysis.compare.compute", fromlist=["_paired"]), "_paired"):
    for _name, _col in (
        ("paired density change over plots (sign flips)", "p_density_paired"),
        ("paired R change over plots (sign flips)", "p_R_paired"),
    ):
        register(
            _name,
            "compare",
            "paired",
            verdict=False,
            note=f"{PAIRED_PLOTS} plots on two dates: 256 sign patterns",
        )(
            lambda data, polygon, rng, _c=_col: float(
                _paired(data, polygon, rng).get(_c, float("nan"))
            )
        )


# -- change: one plot on two dates, as ecoscan.analysis.change.compute.detect_change computes
#    its row


def _change(data: Dates, polygon, rng):
    def compute():
        later = data.later
        n_keep = int(data.survived.sum())
        status = np.array(
            ["persisting"] * n_keep
            + ["lost"] * int((~data.survived).sum())
            + ["new"] * data.recruits.shape[0],
            dtype=object,
        )
        r1 = _pooled_r([data.earlier], [polygon])
        r2 = _pooled_r([later], [polygon])
        mc = r_change_test(
            [(data.earlier, data.survived, later, polygon)], simulations=FEW_SIMULATIONS, rng=rng
        )
        return _row("plot", float(polygon.area), status, r1, r2, mc)

    return SHARED.get("change", data, compute)


def _change_entry(name, column, note=""):
    register(name, "change", "dates", verdict=False, note=note)(
        lambda data, polygon, rng: float(_change(data, polygon, rng)[column])
    )


_change_entry(
    "count change (lost vs new, exact)",
    "p_count_change",
    note="lost ~ binomial(n, 0.2), new ~ Poisson(0.2 n)",
)
_change_entry("R change z test (later vs earlier)", "p_R_change")
_change_entry(
    "R change Monte Carlo (random losses and recruits)",
    "p_R_change_mc",
    note="39 simulations (the command uses 199); p ≤ 0.05 can reach 5 % (two-sided)",
)


# ------------------------------------------------------------------------------- running


@dataclass
class Cell:
    """One shape × n × process combination and the tests run in it."""

    shape: str
    n: int
    process: str
    replicates: int
    index: int


@dataclass
class Tally:
    """Rejections of one test in one cell."""

    rejected: int = 0
    computed: int = 0
    replicates: int = 0

    def add(self, other: Tally) -> None:
        self.rejected += other.rejected
        self.computed += other.computed
        self.replicates += other.replicates


#: The entries of the current run by name (set before the workers are forked).
_ACTIVE: dict[str, Entry] = {}


def run_chunk(args) -> dict[tuple[str, str, int, str], Tally]:
    """Run ``count`` replicates of one cell for the selected tests (a worker's job)."""
    cell, start, count, seed, names = args
    polygon = SHAPES[cell.shape]
    entries = [_ACTIVE[name] for name in names]
    kinds = sorted({e.kind for e in entries})
    out: dict[tuple[str, str, int, str], Tally] = {}
    for rep in range(start, start + count):
        rng = np.random.default_rng([seed, cell.index, rep])
        for kind in kinds:
            data = make_data(kind, cell.process, polygon, cell.n, rng)
            for e in entries:
                if e.kind != kind:
                    continue
                p = float(e.pvalue(data, polygon, rng))
                t = out.setdefault((e.name, cell.shape, cell.n, cell.process), Tally())
                t.replicates += 1
                if np.isfinite(p):
                    t.computed += 1
                    t.rejected += e.rejects(p)
    return out


def _pool_job(args):
    shape, n, count, seed = args
    return shape, n, pool_curves(SHAPES[shape], n, count, seed)


def build_pools(
    shapes: Sequence[str], sizes: Sequence[int], count: int, seed: int, workers: int
) -> None:
    """Fill :data:`POOLS` per shape and n with the statistics of random patterns (see
    :func:`pool_curves`; split over the workers)."""
    k_jobs = max(workers, 1)
    per = max(1, math.ceil(count / k_jobs))
    jobs = [
        (s, n, min(per, count - k * per), [seed, 7919, i, k])
        for i, (s, n) in enumerate((s, n) for s in shapes for n in sizes)
        for k in range(k_jobs)
        if count - k * per > 0
    ]
    parts: dict[tuple[str, int], list] = {}
    for shape, n, arrays in _map(_pool_job, jobs, workers):
        parts.setdefault((shape, n), []).append(arrays)
    for (shape, n), chunks in parts.items():
        poly = SHAPES[shape]
        POOLS[poly.wkb, n] = NullPool(
            default_max_distance(poly, n),
            *(np.concatenate([c[j] for c in chunks]) for j in range(3)),
        )


def _map(fn, jobs, workers: int):
    """``map`` in this process or over ``workers`` forked processes, results in job order."""
    if workers <= 1 or len(jobs) <= 1:
        yield from (fn(j) for j in jobs)
        return
    ctx = mp.get_context("fork")
    with ctx.Pool(workers) as pool:
        yield from pool.imap(fn, jobs, chunksize=1)


@dataclass
class Result:
    """One row of the long table: a test in one cell."""

    test: str
    command: str
    verdict: bool
    shape: str
    n: int
    process: str
    replicates: int
    computed: int
    rejected: int

    @property
    def rate(self) -> float:
        return self.rejected / self.computed if self.computed else float("nan")

    def interval(self) -> tuple[float, float]:
        """Exact (Clopper–Pearson) 95 % interval of the rejection rate."""
        if not self.computed:
            return float("nan"), float("nan")
        ci = sps.binomtest(self.rejected, self.computed).proportion_ci(method="exact")
        return float(ci.low), float(ci.high)


def run_validity(
    *,
    shapes: Sequence[str] = tuple(SHAPES),
    sizes: Sequence[int] = SIZES,
    replicates: int = 1000,
    power_replicates: int = 500,
    processes: Sequence[str] = PROCESSES,
    entries: Sequence[Entry] | None = None,
    seed: int = 20261204,
    workers: int = 1,
    pool: int = 0,
    chunk: int = 50,
    progress: bool = False,
    checkpoint: Callable[[list[Result]], None] | None = None,
) -> list[Result]:
    """Measure every selected test's rejection rate in every shape, size and process.

    Parameters
    ----------
    shapes, sizes, processes
        Keys of :data:`SHAPES`, plant counts, and keys of :data:`PATTERNS`.
    replicates, power_replicates : int
        Replicates under randomness ('csr') and under each alternative.
    entries : sequence of Entry, optional
        Tests to run (default all of :data:`REGISTRY`).
    seed : int
        Seed; replicate i of a cell uses ``default_rng([seed, cell, i])`` whatever the
        number of workers.
    workers : int
        Processes (fork); 1 runs in this process.
    pool : int
        Random curves per shape and n shared by the envelope tests (0: simulate 99 per
        replicate, as the command does).
    chunk : int
        Replicates per job.
    progress : bool
        Print the jobs done to stderr.
    checkpoint : callable, optional
        Called with the results so far every 6 jobs (partial cells show fewer replicates).

    Returns
    -------
    list of Result

    Examples
    --------
    >>> res = run_validity(shapes=["square"], sizes=[30], replicates=20, power_replicates=0,
    ...                    entries=[e for e in REGISTRY if e.name.startswith("Clark–Evans R, n")])
    >>> res[0].computed
    20
    """
    chosen = list(REGISTRY if entries is None else entries)
    names = tuple(e.name for e in chosen)
    _ACTIVE.clear()  # workers are forked after this, so they see the chosen entries
    _ACTIVE.update({e.name: e for e in chosen})
    if pool and any(e.command == "scales" and e.kind == "plot" for e in chosen):
        build_pools(shapes, sizes, pool, seed, workers)
    cells = []
    for s in shapes:
        for n in sizes:
            for proc in processes:
                reps = replicates if proc == "csr" else power_replicates
                if reps > 0:
                    cells.append(Cell(s, n, proc, reps, len(cells)))
    # round robin over the cells, so that partial results (checkpoints) cover every cell
    rounds = max(math.ceil(c.replicates / chunk) for c in cells) if cells else 0
    jobs = [
        (c, k * chunk, min(chunk, c.replicates - k * chunk), seed, names)
        for k in range(rounds)
        for c in cells
        if k * chunk < c.replicates
    ]
    total: dict[tuple[str, str, int, str], Tally] = {}

    def collect() -> list[Result]:
        out = []
        for e in chosen:
            for c in cells:
                t = total.get((e.name, c.shape, c.n, c.process), Tally())
                out.append(
                    Result(
                        e.name,
                        e.command,
                        e.verdict,
                        c.shape,
                        c.n,
                        c.process,
                        t.replicates,
                        t.computed,
                        t.rejected,
                    )
                )
        return out

    for i, part in enumerate(_map(run_chunk, jobs, workers), 1):
        for k, t in part.items():
            total.setdefault(k, Tally()).add(t)
        if progress:
            print(f"\r{i}/{len(jobs)} jobs", end="", file=sys.stderr, flush=True)
        if checkpoint is not None and i % 6 == 0 and i < len(jobs):
            checkpoint(collect())
    return collect()


def flag_approximate(results: Sequence[Result], band: tuple[float, float] = SIZE_BAND) -> list[str]:
    """Names of verdict-giving tests whose size leaves ``band`` in any shape and n.

    Sizes from fewer than half the replicates computed count too (they are shown with a
    dagger).
    """
    bad = []
    for r in results:
        if r.process != "csr" or not r.verdict or not r.computed:
            continue
        if not (band[0] <= r.rate <= band[1]) and r.test not in bad:
            bad.append(r.test)
    return bad


# ------------------------------------------------------------------------------- output

CSV_COLUMNS = (
    "test",
    "command",
    "verdict",
    "shape",
    "n",
    "process",
    "replicates",
    "computed",
    "rejected",
    "rejection_rate",
    "rate_low95",
    "rate_high95",
)


def write_csv(path: str, results: Sequence[Result]) -> None:
    """The long table, one row per test and cell."""
    tmp = f"{path}.tmp"
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(CSV_COLUMNS)
        for r in results:
            lo, hi = r.interval()
            w.writerow(
                [
                    r.test,
                    r.command,
                    int(r.verdict),
                    r.shape,
                    r.n,
                    r.process,
                    r.replicates,
                    r.computed,
                    r.rejected,
                    f"{r.rate:.4f}",
                    f"{lo:.4f}",
                    f"{hi:.4f}",
                ]
            )
    os.replace(tmp, path)


def read_csv(path: str) -> list[Result]:
    """Results back from a CSV written by :func:`write_csv` (to re-render or quote them)."""
    with open(path, newline="", encoding="utf-8") as fh:
        return [
            Result(
                row["test"],
                row["command"],
                row["verdict"] == "1",
                row["shape"],
                int(row["n"]),
                row["process"],
                int(row["replicates"]),
                int(row["computed"]),
                int(row["rejected"]),
            )
            for row in csv.DictReader(fh)
        ]


def _cell_text(r: Result | None, flag_band: bool) -> str:
    if r is None or r.replicates == 0:
        return ""
    if not r.computed:
        return "n/a"
    txt = f"{100 * r.rate:.1f}"
    if r.computed < 0.5 * r.replicates:
        txt += "†"
    if flag_band and not (SIZE_BAND[0] <= r.rate <= SIZE_BAND[1]):
        txt = f"**{txt}**"
    return txt


def markdown_table(results: Sequence[Result], process: str, *, bold: bool) -> list[str]:
    """Wide table of rejection rates (%) for one process: rows tests, columns shape × n."""
    tests = list(dict.fromkeys(r.test for r in results))
    cols = list(dict.fromkeys((r.shape, r.n) for r in results if r.process == process))
    idx = {(r.test, r.shape, r.n, r.process): r for r in results}
    meta = {r.test: r for r in results}
    head = ["test", "command", "verdict"] + [f"{s} n={n}" for s, n in cols]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for t in tests:
        m = meta[t]
        cells = [_cell_text(idx.get((t, s, n, process)), bold and m.verdict) for s, n in cols]
        lines.append("| " + " | ".join([t, m.command, "yes" if m.verdict else "no", *cells]) + " |")
    return lines


#: Which commands' rows each method reference quotes.
DOC_QUOTES = {
    "methods-dispersion.md": ("analyse",),
    "methods-scales.md": ("scales",),
    "methods-compare.md": ("compare", "change"),
}
_MARK_START = "<!-- validity table: generated by benchmarks/validity.py --update-docs -->"
_MARK_END = "<!-- end of validity table -->"


def quote_block(results: Sequence[Result], commands: Sequence[str], source: str) -> str:
    """Markdown quoting the size and power rows of some commands' tests."""
    rows = [r for r in results if r.command in commands]
    reps = max((r.replicates for r in rows if r.process == "csr"), default=0)
    preps = max((r.replicates for r in rows if r.process != "csr"), default=0)
    out = [
        _MARK_START,
        "",
        f"Rejection rates (%) at α = 5 %, from `{source}` (see `docs/validity.md` for the "
        f"design): {reps} random patterns per cell for the size, {preps} per alternative "
        "for the power. Verdict-giving tests outside 3–7 % are in **bold**.",
        "",
        "Size under complete spatial randomness:",
        "",
        *markdown_table(rows, "csr", bold=True),
    ]
    for proc, text in (
        ("thomas", f"Thomas process (κ = λ/{THOMAS_MU:g}, σ = {THOMAS_SIGMA:g}/√λ)"),
        ("grid", f"jittered grid (jitter {JITTER:g} of the cell side)"),
    ):
        if any(r.process == proc for r in rows):
            out += ["", f"Power against a {text}:", "", *markdown_table(rows, proc, bold=False)]
    return "\n".join([*out, "", _MARK_END])


def update_docs(results: Sequence[Result], folder: str, source: str) -> list[str]:
    """Replace the marked validity block in each method reference; returns files changed."""
    changed = []
    for name, commands in DOC_QUOTES.items():
        path = os.path.join(folder, name)
        if not os.path.exists(path):
            continue
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
        if _MARK_START not in text or _MARK_END not in text:
            continue
        head, rest = text.split(_MARK_START, 1)
        tail = rest.split(_MARK_END, 1)[1]
        new = head + quote_block(results, commands, source) + tail
        if new != text:
            tmp = f"{path}.tmp"
            with open(tmp, "w", encoding="utf-8") as fh:
                fh.write(new)
            os.replace(tmp, path)
            changed.append(path)
    return changed


def _commit() -> str:
    try:
        out = subprocess.run(
            ["git", "rev-parse", "--short", "HEAD"],
            capture_output=True,
            text=True,
            check=True,
            cwd=os.path.dirname(os.path.abspath(__file__)),
        )
        return out.stdout.strip() or "unknown"
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def markdown_report(
    results: Sequence[Result], *, command: str, seconds: float, source: str = ""
) -> str:
    """The whole Markdown document: settings, size table, power tables, flags, notes.

    ``source``: the CSV the results were read from, when re-rendered (``seconds`` unused).
    """
    any_r = results[0] if results else None
    sizes = [r.replicates for r in results if r.process == "csr"]
    powers = [r.replicates for r in results if r.process != "csr"]
    reps = (
        f"{min(sizes)}–{max(sizes)}"
        if sizes and min(sizes) != max(sizes)
        else max(sizes, default=0)
    )
    preps = (
        f"{min(powers)}–{max(powers)}"
        if powers and min(powers) != max(powers)
        else max(powers, default=0)
    )
    flagged = flag_approximate(results)
    today = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    out = [
        "# Validity of ecoscan's tests: measured rejection rates",
        "",
        (
            f"Rendered by `{command}` on {today} at commit {_commit()} from `{source}`; a "
            "run stopped early leaves fewer replicates in some cells (counts below). Do not "
            "edit by hand."
            if source
            else f"Generated by `{command}` on {today} at commit {_commit()} "
            f"({seconds / 60:.1f} min). Do not edit by hand; rerun after changing a test."
        ),
        "",
        f"Rejection rates in % at α = 5 %. Size: {reps} replicates of complete spatial "
        f"randomness per cell; power: {preps} replicates per alternative. Shapes: "
        + "; ".join(f"{k} = {v}" for k, v in SHAPE_TEXT.items())
        + ".",
        "",
        "## Size under complete spatial randomness (should be near 5 %)",
        "",
        "A verdict-giving test outside 3–7 % is in **bold**; † = computed in fewer than half",
        "the replicates (e.g. no focal plants inside the guard zone); n/a = never computed.",
        "",
        *markdown_table(results, "csr", bold=True),
        "",
    ]
    for proc, text in (
        ("thomas", f"Thomas process: κ = λ/{THOMAS_MU:g}, σ = {THOMAS_SIGMA:g}/√λ"),
        ("grid", f"jittered grid: jitter fraction {JITTER:g} of the cell side"),
    ):
        if any(r.process == proc for r in results):
            out += [
                f"## Power against a {text}",
                "",
                *markdown_table(results, proc, bold=False),
                "",
            ]
    out += [
        "## Tests flagged approximate (verdict-giving, size outside 3–7 % somewhere)",
        "",
        "Each with the cells where its size is outside the band: rate, exact 95 % interval,",
        'replicates; "clearly" when the whole interval is outside 3–7 %.',
        "",
    ]
    for t in flagged:
        bad = [
            r
            for r in results
            if r.test == t
            and r.process == "csr"
            and r.computed
            and not (SIZE_BAND[0] <= r.rate <= SIZE_BAND[1])
        ]
        cells = []
        for r in bad:
            lo, hi = r.interval()
            clear = hi < SIZE_BAND[0] or lo > SIZE_BAND[1]
            cells.append(
                f"{r.shape} n={r.n}: {100 * r.rate:.1f} % ({100 * lo:.1f}–{100 * hi:.1f}, "
                f"{r.computed}){' clearly' if clear else ''}"
            )
        out.append(f"- {t}: " + "; ".join(cells))
    if not flagged:
        out.append("- none")
    out += ["", "## Notes on the tests", ""]
    for e in REGISTRY:
        if e.note and any(r.test == e.name for r in results):
            out.append(f"- {e.name}: {e.note}.")
    out += [
        "",
        "## Design",
        "",
        *[
            line.strip()
            for line in (__doc__ or "")
            .split("Design (stated so the numbers can be read):")[-1]
            .split("References:")[0]
            .strip()
            .splitlines()
        ],
        "",
    ]
    del any_r
    return "\n".join(out)


def main(argv: Sequence[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--replicates", type=int, default=1000, help="replicates under CSR")
    ap.add_argument("--power-replicates", type=int, default=None, help="replicates per alternative")
    ap.add_argument("--quick", action="store_true", help="100 replicates, 50 for power")
    ap.add_argument("--workers", type=int, default=2, help="processes (default 2)")
    ap.add_argument("--pool", type=int, default=3000, help="pooled curves for envelope tests")
    ap.add_argument("--only", default="", help="run only tests whose name contains this")
    ap.add_argument("--command", default="", help="run only this command's tests")
    ap.add_argument(
        "--keep",
        metavar="FILE",
        help="an earlier run's CSV: its rows for tests not run now are kept in the outputs",
    )
    ap.add_argument("--shapes", default=",".join(SHAPES), help="comma-separated shapes")
    ap.add_argument("--seed", type=int, default=20261204)
    ap.add_argument("--markdown", metavar="FILE", help="write the Markdown table here")
    ap.add_argument("--csv", metavar="FILE", help="write the long CSV table here")
    ap.add_argument(
        "--from-csv", metavar="FILE", help="print tables from an earlier run's CSV (no run)"
    )
    ap.add_argument(
        "--update-docs",
        metavar="FOLDER",
        help="with --from-csv: rewrite the quoted tables between the validity markers in "
        "FOLDER/methods-*.md",
    )
    a = ap.parse_args(argv)
    if a.from_csv and a.update_docs:
        try:
            changed = update_docs(read_csv(a.from_csv), a.update_docs, a.from_csv)
        except (OSError, KeyError, ValueError) as exc:
            print(f"error: --update-docs {a.update_docs}: {exc}", file=sys.stderr)
            return 2
        print("updated: " + (", ".join(changed) or "nothing (no markers found)"))
        return 0
    if a.from_csv:
        try:
            old = [r for r in read_csv(a.from_csv) if a.command in ("", r.command)]
        except (OSError, KeyError, ValueError) as exc:
            print(f"error: --from-csv {a.from_csv}: cannot read it ({exc})", file=sys.stderr)
            return 2
        if a.markdown:
            cmd = "python benchmarks/validity.py " + " ".join(
                sys.argv[1:] if argv is None else argv
            )
            origin = ""
            if os.path.exists(a.markdown):  # keep the command of the run that made the CSV
                with open(a.markdown, encoding="utf-8") as fh:
                    found = re.search(r"(?:Generated|run) by `([^`]*)`", fh.read())
                origin = found.group(1) if found else ""
            source = f"{a.from_csv}`, written by the run `{origin}" if origin else a.from_csv
            doc = markdown_report(old, command=cmd, seconds=0.0, source=source)
            tmp = f"{a.markdown}.tmp"
            with open(tmp, "w", encoding="utf-8") as fh:
                fh.write(doc + "\n")
            os.replace(tmp, a.markdown)
            print(doc)
            return 0
        for proc, title in (("csr", "size"), ("thomas", "power, Thomas"), ("grid", "power, grid")):
            if any(r.process == proc for r in old):
                print(f"\nRejection rate (%), {title}:\n")
                print("\n".join(markdown_table(old, proc, bold=proc == "csr")))
        return 0
    reps = 100 if a.quick else a.replicates
    preps = a.power_replicates if a.power_replicates is not None else (50 if a.quick else reps // 2)
    pool = min(a.pool, 600) if a.quick else a.pool
    shapes = [s.strip() for s in a.shapes.split(",") if s.strip()]
    unknown = [s for s in shapes if s not in SHAPES]
    if unknown or reps < 1 or preps < 0 or a.workers < 1:
        print(
            f"error: bad option (shapes must be among {', '.join(SHAPES)}; replicates >= 1; "
            "workers >= 1)",
            file=sys.stderr,
        )
        return 2
    entries = [
        e for e in REGISTRY if a.only.lower() in e.name.lower() and a.command in ("", e.command)
    ]
    if not entries:
        print(f"error: --only {a.only!r} --command {a.command!r} match no test", file=sys.stderr)
        return 2
    kept: list[Result] = []
    if a.keep:
        try:
            run_now = {e.name for e in entries}
            kept = [r for r in read_csv(a.keep) if r.test not in run_now]
        except (OSError, KeyError, ValueError) as exc:
            print(f"error: --keep {a.keep}: cannot read it ({exc})", file=sys.stderr)
            return 2
    t0 = time.perf_counter()
    cmd = "python benchmarks/validity.py " + " ".join(sys.argv[1:] if argv is None else argv)

    def emit(res: list[Result], final: bool) -> str:
        if kept:  # registry order; earlier rows kept where they were not rerun
            order = {e.name: i for i, e in enumerate(REGISTRY)}
            res = sorted(kept + res, key=lambda r: order.get(r.test, len(order)))
        doc = markdown_report(res, command=cmd.strip(), seconds=time.perf_counter() - t0)
        if not final:
            doc = doc.replace("\n\n", "\n\n**Partial results: the run is not finished.**\n\n", 1)
        if a.markdown:
            tmp = f"{a.markdown}.tmp"
            with open(tmp, "w", encoding="utf-8") as fh:
                fh.write(doc)
            os.replace(tmp, a.markdown)
        if a.csv:
            write_csv(a.csv, res)
        return doc

    res = run_validity(
        shapes=shapes,
        replicates=reps,
        power_replicates=preps,
        entries=entries,
        seed=a.seed,
        workers=a.workers,
        pool=pool,
        progress=True,
        checkpoint=lambda r: emit(r, False),
    )
    print(emit(res, True))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
