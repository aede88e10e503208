"""Figure of one plot's "why": fitted density map, clustering beyond it, size and spacing.

Panels (those that were computed): the fitted plant density over the plot (plants per
hectare, with the plants), the inhomogeneous L(r) − r with its global envelope from the
fitted process, and the mark correlation function k_mm(r) with its random-permutation
envelope. Envelope drawing and the clustered / regular symbols are those of the scales
figure.
"""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np

from ecoscan.report.figures import FIGURE_DPI, save_figure
from ecoscan.report.figures.scales import _panel, _shift

__all__ = ["plot_habitat_figure"]


def plot_habitat_figure(
    result, path: str | os.PathLike, xy: np.ndarray | None = None
) -> Path | None:
    """Draw one plot's habitat and size-spacing panels and save them as PNG.

    Parameters
    ----------
    result : ecoscan.analysis.scales.compute.PlotScales
        The plot's result, with ``habitat`` set.
    path : path-like
        Destination PNG.
    xy : numpy.ndarray, optional
        The plants, metres (drawn on the density map).

    Returns
    -------
    pathlib.Path or None
        None when the plot has nothing to draw.
    """
    h = result.habitat
    if h is None:
        return None
    panels = []
    if h.intensity_grid is not None:
        panels.append("map")
    if h.test is not None:
        panels.append("L")
    if h.marks is not None:
        panels.append("marks")
    if not panels:
        return None
    # at most 10 inches wide (960 px at 96 dpi): the report shows figures at natural size
    ncol = min(2, len(panels))
    nrow = int(np.ceil(len(panels) / ncol))
    fig, axes = plt.subplots(
        nrow, ncol, figsize=(5.0 * ncol, 3.7 * nrow + 1.5), dpi=FIGURE_DPI, squeeze=False
    )
    for ax in axes.ravel()[len(panels) :]:
        ax.set_visible(False)
    for ax, kind in zip(axes.ravel(), panels, strict=False):
        _draw_panel(fig, ax, kind, h, xy)
    lines = [f"plot {result.plot_id}: why the pattern"]
    for v in (h.verdict, h.marks_verdict):
        if v:
            lines.append(textwrap.fill(v, 95))
    fig.suptitle("\n".join(lines))
    _shared_legend(fig, axes, len(panels))
    return save_figure(fig, path)


def _draw_panel(fig, ax, kind: str, h, xy: np.ndarray | None) -> None:
    """One panel: the fitted density map, inhomogeneous L, or the mark correlation."""
    if kind == "map":
        gx, gy, lam = h.intensity_grid
        sc = _density_map(ax, gx, gy, lam * 1e4)
        xy = h.xy_m if xy is None else xy
        if xy is not None and len(xy):
            ax.plot(xy[:, 0], xy[:, 1], "o", mfc="none", mec="black", ms=3, mew=0.6, label="plants")
        ax.set_aspect("equal")
        ax.set_xlabel("easting (m)")
        ax.set_ylabel("northing (m)")
        ax.ticklabel_format(useOffset=False, style="plain")
        ax.tick_params(axis="x", labelrotation=30)
        ax.set_title(textwrap.fill(f"fitted density: {h.model}", 48))
        cb = fig.colorbar(sc, ax=ax, shrink=0.7)
        cb.set_label("plants per ha")
    elif kind == "L":
        t = h.test
        env = t.L
        _panel(
            ax,
            t.r_m,
            env.value - t.r_m,
            np.zeros_like(t.r_m),
            _shift(env, t.r_m),
            "inhomogeneous L(r) − r (m)",
            "beyond the fitted density",
            1,
            ("clustered beyond", "more even"),
        )
    else:
        mk = h.marks
        _panel(
            ax,
            mk.r_m,
            mk.k_mm.value,
            np.ones_like(mk.r_m),
            mk.k_mm,
            f"k_mm(r) of {mk.mark}",
            "size and spacing",
            1,
            ("neighbours larger", "neighbours smaller"),
        )


def _shared_legend(fig, axes, n_panels: int) -> None:
    """One legend for all panels, below them or in the empty cell (never over a curve)."""
    seen: dict[str, object] = {}
    for ax in axes.ravel():
        for hd, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            seen.setdefault(lab, hd)
    spare = axes.ravel()[n_panels:]
    if len(spare):  # the legend goes in the empty cell
        fig.tight_layout()
        box = spare[0].get_position()
        fig.legend(
            list(seen.values()),
            list(seen),
            loc="center",
            bbox_to_anchor=(box.x0 + box.width / 2, box.y0 + box.height / 2),
            ncol=1,
            frameon=False,
        )
    else:
        fig.tight_layout(rect=(0, 0.75 / fig.get_figheight(), 1, 1))
        fig.legend(
            list(seen.values()),
            list(seen),
            loc="lower center",
            ncol=min(4, len(seen)),
            frameon=False,
        )


def _density_map(ax, x: np.ndarray, y: np.ndarray, v: np.ndarray):
    """Colour the plot by v at the quadrature's dummy points, one grid cell each (the dummy
    points sit on a regular grid; the few moved onto the plot at its edge take the nearest
    cell)."""
    from scipy.spatial import cKDTree

    pts = np.column_stack([x, y])
    step = float(np.median(cKDTree(pts).query(pts, k=2)[0][:, 1])) if len(pts) > 2 else 1.0
    ix = np.round((x - x.min()) / step).astype(int)
    iy = np.round((y.max() - y) / step).astype(int)
    grid = np.full((iy.max() + 1, ix.max() + 1), np.nan)
    grid[iy, ix] = v
    h = step / 2
    return ax.imshow(
        grid,
        extent=(
            x.min() - h,
            x.min() + step * ix.max() + h,
            y.max() - step * iy.max() - h,
            y.max() + h,
        ),
        origin="upper",
        cmap="cividis",
        interpolation="nearest",
    )
