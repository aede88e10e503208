"""Monitoring design: how many plants, plots and of what size a survey needs.

The ``ecoscan plan`` command's engine. For each plot shape it finds, by simulation in the
exact polygon, the weakest clustering and regularity the Monte Carlo nearest-neighbour test
would detect (:mod:`ecoscan.stats.power`) across a range of plants per plot; for the whole
design it gives the power to detect a change in density between dates and a survival
difference between sites (:mod:`ecoscan.stats.planning`) against the number of plots.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np
import shapely

from ecoscan.settings import Settings
from ecoscan.stats.planning import density_change_power, survival_difference_power
from ecoscan.stats.power import DetectableRange, detectable_range

__all__ = [
    "DESIGN_COLUMNS",
    "PATTERN_COLUMNS",
    "PlanResult",
    "PlanSettings",
    "make_plan",
]

#: Columns of the table of detectable pattern per plot shape and plants per plot.
PATTERN_COLUMNS = (
    "plot_shape",
    "area_m2",
    "plants",
    "density_per_ha",
    "detectable_clustered_R",
    "detectable_regular_R",
    "power_clustered_target",
    "power_regular_target",
    "reading",
)
#: Columns of the design table (per number of plots).
DESIGN_COLUMNS = (
    "plots",
    "surveyed_area_m2",
    "density_per_ha",
    "power_density_change",
    "plants_per_site",
    "power_survival_difference",
)

#: Most plot shapes a plan looks at (each costs several seconds of simulation).
MAX_SHAPES = 12
#: Plants-per-plot values tried for the pattern curves (clipped to the density range).
PLANT_STEPS = (10, 15, 20, 30, 45, 70, 100, 150, 220, 330)


@dataclass(frozen=True)
class PlanSettings(Settings):
    """What the user asked the planner.

    Attributes
    ----------
    densities_per_ha : tuple of float
        Expected densities (one, or the ends of a range), plants per hectare.
    plot_count : int
        Plots per site (or per date).
    alpha : float
        Level of the tests.
    power : float
        Target power.
    relative_change : float
        Density change between dates to detect, as a fraction (−0.2: a 20% loss).
    survival : tuple of float
        Survival proportions at two sites, to tell apart.
    clustered_r, regular_r : float
        Target departures from random, as Clark–Evans R.
    patterns : int
        Simulated patterns per alternative strength.
    seed : int
        Random seed.
    """

    densities_per_ha: tuple[float, ...]
    plot_count: int = 5
    alpha: float = 0.05
    power: float = 0.8
    relative_change: float = -0.2
    survival: tuple[float, float] = (0.8, 0.65)
    clustered_r: float = 0.8
    regular_r: float = 1.2
    patterns: int = 120
    seed: int = 1

    SECTION: ClassVar[str] = "plan"


@dataclass
class PlanResult:
    """Tables of a plan, with notes."""

    settings: PlanSettings
    pattern_rows: list[dict] = field(default_factory=list)
    design_rows: list[dict] = field(default_factory=list)
    curves: dict[str, list[DetectableRange]] = field(default_factory=dict)
    answers: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _plants_grid(area_m2: float, densities: tuple[float, ...]) -> list[int]:
    lo = max(2.0, min(densities) * area_m2 / 1e4)
    hi = max(densities) * area_m2 / 1e4
    ns = {round(d * area_m2 / 1e4) for d in densities}
    ns |= {n for n in PLANT_STEPS if lo / 3 <= n <= hi * 3}
    return sorted(n for n in ns if n >= 2)


def _answer_plants(shape: str, ranges: list[DetectableRange], s: PlanSettings) -> str:
    ok = [
        d.n
        for d in ranges
        if np.isfinite(d.clustered_r)
        and np.isfinite(d.regular_r)
        and d.clustered_r >= s.clustered_r
        and d.regular_r <= s.regular_r
    ]
    target = f"R {s.clustered_r:g} or {s.regular_r:g}"
    if not ok:
        most = max(d.n for d in ranges)
        return (
            f"{shape}: even {most} plants per plot do not detect {target} with "
            f"{s.power:.0%} power; use larger plots"
        )
    return f"{shape}: about {min(ok)} plants per plot detect {target} with {s.power:.0%} power"


def make_plan(shapes: dict[str, shapely.Geometry], settings: PlanSettings) -> PlanResult:
    """Power of a monitoring design for each plot shape.

    Parameters
    ----------
    shapes : dict of str to shapely.Polygon
        Plot shapes by name, metres.
    settings : PlanSettings
        Densities, plot count, targets.

    Returns
    -------
    PlanResult

    Raises
    ------
    ValueError
        When a density gives fewer than 2 plants per plot, or a setting is out of range.

    Examples
    --------
    >>> import shapely
    >>> plan = make_plan({"30x30 m": shapely.box(0, 0, 30, 30)},
    ...                  PlanSettings(densities_per_ha=(300.0,), patterns=30))
    >>> plan.pattern_rows[0]["plot_shape"]
    '30x30 m'
    """
    s = settings
    if not 0 < s.power < 1:
        raise ValueError(f"the target power must lie between 0 and 1 (got {s.power:g})")
    if not 0 < s.alpha < 0.5:
        raise ValueError(f"alpha must lie between 0 and 0.5 (got {s.alpha:g})")
    if s.plot_count < 1:
        raise ValueError("the number of plots must be at least 1")
    if not shapes:
        raise ValueError("no plot shape to plan for")
    if len(shapes) > MAX_SHAPES:
        raise ValueError(f"{len(shapes)} plot shapes: plan at most {MAX_SHAPES} at a time")
    out = PlanResult(s)
    for name, poly in shapes.items():
        area = float(poly.area)
        fewest = min(s.densities_per_ha) * area / 1e4
        if fewest < 2:
            raise ValueError(
                f"{name}: {min(s.densities_per_ha):g} plants/ha gives {fewest:.1f} plants per "
                "plot; a pattern needs at least 2 (larger plots or a higher density)"
            )
        ranges = []
        for n in _plants_grid(area, s.densities_per_ha):
            seed = np.random.SeedSequence([s.seed, zlib.crc32(name.encode()), n])
            d = detectable_range(
                poly,
                n,
                alpha=s.alpha,
                power=s.power,
                patterns=s.patterns,
                full_curves=True,
                rng=np.random.default_rng(seed),
            )
            ranges.append(d)
            out.pattern_rows.append(
                {
                    "plot_shape": name,
                    "area_m2": area,
                    "plants": n,
                    "density_per_ha": n / area * 1e4,
                    "detectable_clustered_R": d.clustered_r,
                    "detectable_regular_R": d.regular_r,
                    "power_clustered_target": d.power_at(s.clustered_r),
                    "power_regular_target": d.power_at(s.regular_r),
                    "reading": d.describe(),
                }
            )
        out.curves[name] = ranges
        out.answers.append(_answer_plants(name, ranges, s))
    first = next(iter(shapes.values()))
    area = float(first.area)
    density = float(np.mean(s.densities_per_ha))
    counts = sorted({*range(1, 11), 12, 15, 20, 25, 30, s.plot_count})
    for k in counts:
        total = k * area
        plants = density * total / 1e4
        out.design_rows.append(
            {
                "plots": k,
                "surveyed_area_m2": total,
                "density_per_ha": density,
                "power_density_change": density_change_power(
                    density, s.relative_change, total, alpha=s.alpha
                ),
                "plants_per_site": plants,
                "power_survival_difference": survival_difference_power(
                    s.survival[0], s.survival[1], plants, alpha=s.alpha
                ),
            }
        )
    out.answers += _design_answers(out.design_rows, s, next(iter(shapes)))
    out.notes.append(
        "planning figures assume plants independent between plots (Poisson counts); "
        "patchy sites need more plots. Check the design with a pilot survey and local "
        "monitoring standards before committing field time"
    )
    return out


def _design_answers(rows: list[dict], s: PlanSettings, shape: str) -> list[str]:
    answers = []
    for key, what in (
        ("power_density_change", f"a {abs(s.relative_change):.0%} change in density"),
        (
            "power_survival_difference",
            f"survival {s.survival[0]:.0%} against {s.survival[1]:.0%} between two sites",
        ),
    ):
        enough = [r["plots"] for r in rows if r[key] >= s.power]
        if enough:
            answers.append(
                f"{what}: {min(enough)} plots of the {shape} shape per site/date give "
                f"{s.power:.0%} power"
            )
        else:
            answers.append(
                f"{what}: even {rows[-1]['plots']} plots fall short of {s.power:.0%} power"
            )
    return answers
