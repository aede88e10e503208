"""The invented demo scenario: plant positions and plot outlines with known patterns.

Everything here is made up for the demo. Two sites of an imaginary upland restoration
project:

* **Tansy Hollow**, a shrubland restoration trial flown twice (spring and autumn) with an RGB
  camera. Four plots of the fictional shrub "greywisp":
  ``rows``    planted in rows (regular),
  ``regen``   natural regeneration around seed shrubs (clustered),
  ``scatter`` wind-dispersed scatter (random),
  ``corner``  a small plot with fewer than 30 plants (random).
  Between spring and autumn some shrubs die and seedlings appear; the autumn mosaic is
  misregistered by a few decimetres, as drone mosaics often are.
* **Marrow Wood**, a young woodland of the fictional "hollow pine", with a canopy height model
  (spring) and a classified land-cover map (autumn). Two plots:
  ``thinned`` (regular after thinning) and ``thicket`` (clustered groups).

Coordinates are metres in WGS 84 / UTM zone 31N at an arbitrary invented location.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

EPSG = 32631
ORIGIN_TANSY = (431_000.0, 5_412_000.0)  # lower-left corner of the Tansy Hollow mosaics
ORIGIN_MARROW = (431_400.0, 5_412_000.0)  # lower-left corner of the Marrow Wood rasters
TANSY_SIZE_M = (110.0, 80.0)
MARROW_SIZE_M = (100.0, 60.0)
#: the autumn Tansy mosaic is shifted by this much against the spring one (co-registration)
AUTUMN_SHIFT_M = (0.30, -0.20)


@dataclass
class PlotTruth:
    """A plot outline and the true plants in it."""

    plot_id: str
    site: str
    verdict: str
    polygon: shapely.Polygon
    xy: np.ndarray  # (n, 2) metres
    diameter_m: np.ndarray
    height_m: np.ndarray


def _hard_core_fill(candidates, min_dist, keep_first=None):
    """Greedy sequential inhibition: keep candidates at least ``min_dist`` from kept ones."""
    kept = [] if keep_first is None else list(keep_first)
    for c in candidates:
        if not kept or np.min(np.hypot(*(np.asarray(kept) - c).T)) >= min_dist:
            kept.append(c)
    return np.asarray(kept[0 if keep_first is None else len(keep_first) :])


def _inside(poly, xy, margin):
    inner = poly.buffer(-margin)
    return xy[shapely.contains_xy(inner, xy[:, 0], xy[:, 1])]


def _random(poly, n, rng, min_dist, margin):
    x0, y0, x1, y1 = poly.bounds
    cand = np.column_stack([rng.uniform(x0, x1, n * 20), rng.uniform(y0, y1, n * 20)])
    cand = _inside(poly, cand, margin)
    return _hard_core_fill(cand, min_dist)[:n]


def tansy_plots(rng: np.random.Generator) -> list[PlotTruth]:
    """The four greywisp plots of Tansy Hollow (spring positions)."""
    ox, oy = ORIGIN_TANSY
    out = []
    # rows: 3.0 m between plants in a row, 3.5 m between rows, slight planting jitter
    rows = shapely.box(ox + 5, oy + 40, ox + 47, oy + 75)
    gx, gy = np.meshgrid(np.arange(ox + 6.5, ox + 46, 3.0), np.arange(oy + 41.5, oy + 74, 3.5))
    xy = np.column_stack([gx.ravel(), gy.ravel()]) + rng.normal(0, 0.2, (gx.size, 2))
    xy = _inside(rows, xy, 0.6)
    out.append(PlotTruth("rows", "Tansy Hollow", "regular", rows, xy, *_shrub_sizes(rng, len(xy))))
    # regen: clusters around 9 seed shrubs in an irregular pentagon
    regen = shapely.Polygon(
        [
            (ox + 55, oy + 42),
            (ox + 100, oy + 40),
            (ox + 105, oy + 62),
            (ox + 80, oy + 76),
            (ox + 57, oy + 70),
        ]
    )
    x0, y0, x1, y1 = regen.bounds
    parents = _inside(
        regen, np.column_stack([rng.uniform(x0, x1, 60), rng.uniform(y0, y1, 60)]), 5.0
    )[:9]
    kids = np.vstack([p + rng.normal(0, 1.6, (40, 2)) for p in parents])
    rng.shuffle(kids)
    kids = _inside(regen, kids, 0.6)
    xy = _hard_core_fill(kids, 1.05)[:150]
    out.append(
        PlotTruth(
            "regen", "Tansy Hollow", "clustered", regen, xy, *_shrub_sizes(rng, len(xy), small=True)
        )
    )
    # scatter: random in an L-shaped plot
    scatter = shapely.Polygon(
        [
            (ox + 5, oy + 4),
            (ox + 60, oy + 4),
            (ox + 60, oy + 18),
            (ox + 25, oy + 18),
            (ox + 25, oy + 34),
            (ox + 5, oy + 34),
        ]
    )
    xy = _random(scatter, 75, rng, 0.9, 0.6)
    out.append(
        PlotTruth(
            "scatter",
            "Tansy Hollow",
            "random",
            scatter,
            xy,
            *_shrub_sizes(rng, len(xy), small=True),
        )
    )
    # corner: small plot under 30 plants
    corner = shapely.box(ox + 75, oy + 8, ox + 95, oy + 28)
    xy = _random(corner, 22, rng, 0.8, 0.6)
    out.append(
        PlotTruth(
            "corner", "Tansy Hollow", "random", corner, xy, *_shrub_sizes(rng, len(xy), small=True)
        )
    )
    return out


def _shrub_sizes(rng, n, small=False):
    lo, hi = (0.7, 1.0) if small else (0.9, 1.5)
    d = rng.uniform(lo, hi, n)
    h = 0.4 + 0.8 * d + rng.normal(0, 0.05, n)
    return d, h


def autumn_change(
    plots: list[PlotTruth], rng: np.random.Generator, loss: float = 0.15, recruits: float = 0.10
) -> tuple[list[PlotTruth], dict[str, dict[str, np.ndarray]]]:
    """Autumn plants: some spring shrubs die, seedlings appear (true positions, no shift).

    Returns the autumn plots and, per plot, the indices of spring plants lost and the
    positions of recruits.
    """
    out, log = [], {}
    for p in plots:
        n = len(p.xy)
        lost = np.sort(rng.choice(n, size=round(loss * n), replace=False))
        alive = np.setdiff1d(np.arange(n), lost)
        k = max(1, round(recruits * n))
        x0, y0, x1, y1 = p.polygon.bounds
        cand = _inside(
            p.polygon,
            np.column_stack([rng.uniform(x0, x1, 50 * k), rng.uniform(y0, y1, 50 * k)]),
            0.6,
        )
        if p.verdict == "clustered":  # seedlings come up close to surviving shrubs
            near = p.xy[alive][rng.choice(len(alive), 50 * k)] + rng.normal(0, 1.5, (50 * k, 2))
            cand = _inside(p.polygon, near, 0.6)
        # recruits keep 1.3 m from every spring shrub, dead or alive, so that a seedling is
        # never mistaken for a shrub that died (positions alone could not tell them apart)
        new = _hard_core_fill(cand, 1.3, keep_first=list(p.xy))[:k]
        xy = np.vstack([p.xy[alive], new])
        d = np.r_[p.diameter_m[alive] * 1.05, rng.uniform(0.7, 0.8, len(new))]
        h = np.r_[p.height_m[alive] * 1.05, 0.4 + 0.8 * d[len(alive) :]]
        out.append(PlotTruth(p.plot_id, p.site, p.verdict, p.polygon, xy, d, h))
        log[p.plot_id] = {"lost": lost, "recruits": new}
    return out, log


def marrow_plots(rng: np.random.Generator) -> list[PlotTruth]:
    """The two hollow-pine plots of Marrow Wood."""
    ox, oy = ORIGIN_MARROW
    out = []
    thinned = shapely.box(ox + 5, oy + 5, ox + 45, oy + 55)
    gx, gy = np.meshgrid(np.arange(ox + 8, ox + 44, 5.0), np.arange(oy + 8, oy + 54, 5.0))
    xy = np.column_stack([gx.ravel(), gy.ravel()]) + rng.normal(0, 0.5, (gx.size, 2))
    xy = _inside(thinned, xy, 1.5)
    h = rng.uniform(11, 17, len(xy))
    out.append(PlotTruth("thinned", "Marrow Wood", "regular", thinned, xy, 0.25 * h + 0.6, h))
    thicket = shapely.Polygon(
        [(ox + 51, oy + 3), (ox + 97, oy + 5), (ox + 95, oy + 57), (ox + 53, oy + 55)]
    )
    parents = np.array([[ox + 64, oy + 16], [ox + 84, oy + 22], [ox + 70, oy + 42]])
    kids = np.vstack([p + rng.normal(0, 2.6, (60, 2)) for p in parents])
    rng.shuffle(kids)
    xy = _hard_core_fill(_inside(thicket, kids, 1.5), 2.2)[:75]
    h = rng.uniform(6, 10, len(xy))
    out.append(PlotTruth("thicket", "Marrow Wood", "clustered", thicket, xy, 0.2 * h, h))
    return out
