"""Figures for one plot's dispersion analysis and for the survey overview."""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import matplotlib.colors as mcolors
import numpy as np
import shapely
from matplotlib.patches import PathPatch
from matplotlib.path import Path as MplPath
from scipy import stats as sps

from ecoscan.analysis.dispersion.detectable import NO_DEPARTURE, TOO_FEW
from ecoscan.report.figures import PALETTE, new_figure, save_figure
from ecoscan.stats.nearest import CE_SE_CONSTANT, MIN_POINTS_ADVISED, R_HEXAGONAL

__all__ = [
    "add_polygon",
    "nn_histogram_figure",
    "plot_map_figure",
    "quadrat_map_figure",
    "r_against_n_figure",
]


def _polygon_path(geom: shapely.Geometry, dx: float, dy: float) -> MplPath:
    verts, codes = [], []
    for poly in shapely.get_parts(geom):
        for ring in [poly.exterior, *poly.interiors]:
            c = np.asarray(ring.coords) - (dx, dy)
            verts.append(c)
            codes += [MplPath.MOVETO] + [MplPath.LINETO] * (len(c) - 2) + [MplPath.CLOSEPOLY]
    return MplPath(np.vstack(verts), codes)


def add_polygon(ax, geom: shapely.Geometry, origin: tuple[float, float], **kw) -> None:
    """Draw a (multi)polygon with holes, shifted so that ``origin`` is at (0, 0)."""
    style = {"facecolor": "none", "edgecolor": "#222222", "linewidth": 1.2}
    style.update(kw)
    ax.add_patch(PathPatch(_polygon_path(geom, *origin), **style))


def _plot_frame(ax, polygon: shapely.Geometry, pad: float, title: str) -> None:
    """Axes of a plot map: metres from the plot's lower-left corner, equal scale."""
    x0, y0, x1, y1 = polygon.bounds
    ax.set_xlim(-pad, x1 - x0 + pad)
    ax.set_ylim(-pad, y1 - y0 + pad)
    ax.set_aspect("equal")
    ax.set_xlabel("easting from plot corner (m)")
    ax.set_ylabel("northing from plot corner (m)")
    ax.set_title(title)


def plot_map_figure(
    path: str | os.PathLike,
    polygon: shapely.Geometry,
    xy: np.ndarray,
    *,
    image: np.ndarray | None = None,
    image_extent: tuple[float, float, float, float] | None = None,
    title: str = "",
    sizes_m: np.ndarray | None = None,
    image_kind: str = "rgb",
) -> Path:
    """Map of the plants in a plot over an image thumbnail, with the plot outline.

    Parameters
    ----------
    path : path-like
        PNG to write.
    polygon : shapely geometry
        Plot outline, metres.
    xy : numpy.ndarray, shape (n, 2)
        Plant positions, metres.
    image : numpy.ndarray, optional
        Thumbnail, (H, W) or (H, W, 3) floats in [0, 1] or uint8.
    image_extent : tuple, optional
        (left, right, bottom, top) of the thumbnail in map metres.
    title : str
        Figure title.
    sizes_m : numpy.ndarray, optional
        Crown diameters in metres, drawn to scale as circles.
    image_kind : {'rgb', 'grey', 'height', 'classes'}
        How to draw ``image``: colour photo, grey, canopy height in metres (viridis with a
        colour bar) or class values (Okabe–Ito colours with a legend).

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, shapely, numpy as np
    >>> out = plot_map_figure(tempfile.mktemp(suffix=".png"), shapely.box(0, 0, 10, 10),
    ...                       np.array([[2.0, 3.0], [7.0, 8.0]]))
    >>> out.exists()
    True
    """
    x0, y0, x1, y1 = polygon.bounds
    pad = 0.04 * max(x1 - x0, y1 - y0)
    fig, ax = new_figure(5.6, 5.0 * max(0.5, min(1.6, (y1 - y0) / max(x1 - x0, 1e-9))))
    ax.grid(False)
    handles = []
    if image is not None and image_extent is not None:
        left, right, bottom, top = image_extent
        ext = (left - x0, right - x0, bottom - y0, top - y0)
        if image_kind == "height":
            im = ax.imshow(
                np.ma.masked_invalid(image), extent=ext, cmap="viridis", interpolation="nearest"
            )
            fig.colorbar(im, ax=ax, shrink=0.75, pad=0.02, label="canopy height (m)")
        elif image_kind == "classes":
            handles += _class_backdrop(ax, image, ext)
        else:
            ax.imshow(
                image, extent=ext, cmap="gray" if image.ndim == 2 else None, interpolation="nearest"
            )
    add_polygon(ax, polygon, (x0, y0), edgecolor="#ffffff", linewidth=2.6)
    add_polygon(ax, polygon, (x0, y0), edgecolor="#1f4e8c", linewidth=1.3)
    if len(xy):
        if sizes_m is not None and np.all(np.isfinite(sizes_m)):
            from matplotlib.collections import EllipseCollection

            ax.add_collection(
                EllipseCollection(
                    sizes_m,
                    sizes_m,
                    0,
                    units="xy",
                    offsets=xy - (x0, y0),
                    offset_transform=ax.transData,
                    facecolors="none",
                    edgecolors="#ffffff",
                    linewidths=0.8,
                )
            )
        (pts,) = ax.plot(
            xy[:, 0] - x0,
            xy[:, 1] - y0,
            "o",
            mfc="#ffffff",
            mec="#000000",
            ms=3.6,
            mew=0.8,
            linestyle="none",
            label=f"{len(xy)} detected plants",
        )
        handles.insert(0, pts)
    if handles:
        # below the map, outside the data
        ax.legend(
            handles=handles,
            loc="upper left",
            bbox_to_anchor=(0.0, -0.13),
            ncol=min(3, len(handles)),
            frameon=False,
        )
    _plot_frame(ax, polygon, pad, title)
    return save_figure(fig, path)


def _class_backdrop(ax, image: np.ndarray, extent) -> list:
    """Draw a class raster in Okabe–Ito colours; legend handles for the classes shown."""
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    from ecoscan.report.figures import CLASS_COLOURS

    vals = image[np.isfinite(image)]
    classes = [int(v) for v in np.unique(vals)][: len(CLASS_COLOURS)]
    if not classes:
        return []
    idx = np.full(image.shape, np.nan)
    for i, c in enumerate(classes):
        idx[image == c] = i
    cmap = ListedColormap(CLASS_COLOURS[: len(classes)])
    ax.imshow(
        np.ma.masked_invalid(idx),
        extent=extent,
        cmap=cmap,
        vmin=-0.5,
        vmax=len(classes) - 0.5,
        interpolation="nearest",
        alpha=0.75,
    )
    return [
        Patch(facecolor=CLASS_COLOURS[i], alpha=0.75, label=f"class {c}")
        for i, c in enumerate(classes)
    ]


def nn_histogram_figure(
    path: str | os.PathLike,
    nn_m: np.ndarray,
    density_per_m2: float,
    *,
    title: str = "",
) -> Path:
    """Histogram of nearest-neighbour distances with the density expected under CSR.

    Under complete spatial randomness with intensity λ the nearest-neighbour distance has
    density f(r) = 2πλr·exp(−λπr²) (Clark & Evans 1954), drawn scaled to the counts.
    """
    fig, ax = new_figure(5.2, 3.4)
    d = np.asarray(nn_m, float)
    d = d[np.isfinite(d)]
    if d.size:
        top = max(float(d.max()), 2.5 / np.sqrt(max(density_per_m2, 1e-12)) * 0.5) * 1.05
        bins = np.linspace(0, top, min(30, max(8, d.size // 4)) + 1)
        ax.hist(
            d,
            bins=bins,
            color="#8fa8c8",
            edgecolor="#1f4e8c",
            linewidth=0.6,
            label=f"measured (n = {d.size})",
        )
        r = np.linspace(0, top, 300)
        lam = density_per_m2
        pdf = 2 * np.pi * lam * r * np.exp(-lam * np.pi * r**2)
        ax.plot(
            r,
            pdf * d.size * (bins[1] - bins[0]),
            color="#7d6b15",
            linewidth=2,
            label="expected if random",
        )
        ax.axvline(
            d.mean(),
            color="#1f4e8c",
            linestyle="--",
            linewidth=1,
            label=f"measured mean {d.mean():.2f} m",
        )
        ax.axvline(
            0.5 / np.sqrt(lam),
            color="#7d6b15",
            linestyle=":",
            linewidth=1.2,
            label=f"random mean {0.5 / np.sqrt(lam):.2f} m",
        )
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    ax.set_xlabel("distance to nearest neighbour (m)")
    ax.set_ylabel("number of plants")
    ax.set_title(title)
    return save_figure(fig, path)


def quadrat_map_figure(
    path: str | os.PathLike,
    polygon: shapely.Geometry,
    cells: Sequence[shapely.Geometry],
    counts: np.ndarray,
    *,
    title: str = "",
) -> Path:
    """Map of quadrat counts: each cell (clipped to the plot) shaded by its count."""
    x0, y0, x1, y1 = polygon.bounds
    fig, ax = new_figure(5.2, 5.2 * max(0.5, min(1.6, (y1 - y0) / max(x1 - x0, 1e-9))))
    ax.grid(False)
    counts = np.asarray(counts)
    norm = mcolors.Normalize(0, max(1, int(counts.max()) if counts.size else 1))
    import matplotlib as mpl

    cmap = mpl.colormaps["cividis"]
    for cell, c in zip(cells, counts, strict=True):
        if cell.is_empty:
            continue
        add_polygon(ax, cell, (x0, y0), facecolor=cmap(norm(c)), edgecolor="#ffffff", linewidth=0.6)
        if cell.area > 0.02 * polygon.area / max(len(cells), 1):
            pt = cell.representative_point()
            ax.text(
                pt.x - x0,
                pt.y - y0,
                str(int(c)),
                ha="center",
                va="center",
                fontsize=9,
                color="white" if norm(c) < 0.55 else "black",
            )
    add_polygon(ax, polygon, (x0, y0), edgecolor="#222222", linewidth=1.2)
    sm = mpl.cm.ScalarMappable(norm=norm, cmap=cmap)
    fig.colorbar(sm, ax=ax, shrink=0.8, label="plants per quadrat")
    pad = 0.03 * max(x1 - x0, y1 - y0)
    _plot_frame(ax, polygon, pad, title)
    return save_figure(fig, path)


def r_against_n_figure(
    path: str | os.PathLike,
    rows: Sequence[Mapping],
    *,
    alpha: float = 0.05,
    label_key: str = "plot_id",
) -> Path:
    """Every plot's Clark–Evans R against its number of points, with the random band.

    Under complete spatial randomness the standard error of R is
    0.26136 / √(nρ) / (0.5 / √ρ) = 0.52272 / √n (Clark & Evans 1954), so the band where R
    is not significantly different from 1 at ``alpha`` (two-sided, normal approximation,
    no edge correction) is 1 ± z₁₋α/₂ · 0.52272 / √n.
    """
    fig, ax = new_figure(6.4, 4.0)
    n = np.array([float(r.get("n") or 0) for r in rows])
    big = max(40.0, float(n.max()) * 1.15 if n.size else 40.0)
    nn = np.linspace(2, big, 400)
    half = sps.norm.ppf(1 - alpha / 2) * 2 * CE_SE_CONSTANT / np.sqrt(nn)
    ax.fill_between(
        nn, 1 - half, 1 + half, color="#dddddd", label=f"not significant at α = {alpha:g}"
    )
    ax.axhline(1, color="#7f7f7f", linewidth=0.8)
    ax.axhline(R_HEXAGONAL, color="#1f4e8c", linewidth=0.6, linestyle=":")
    # inside the axes: the legend stands to the right of them
    ax.text(
        0.99 * big,
        R_HEXAGONAL,
        f"hexagonal {R_HEXAGONAL:.3f} ",
        ha="right",
        va="bottom",
        fontsize=9,
        color="#1f4e8c",
    )
    ax.axvline(MIN_POINTS_ADVISED, color="#999999", linewidth=0.8, linestyle="--")
    ax.text(MIN_POINTS_ADVISED, 0.02, f" {MIN_POINTS_ADVISED} points", fontsize=9, color="#666666")
    labelled: set = set()
    for key, style, face in (
        ("clustered", "clustered", None),
        (NO_DEPARTURE, "random", None),
        (TOO_FEW, "random", "white"),
        ("regular", "regular", None),
    ):
        sel = [r for r in rows if r.get("verdict") == key and r.get("R") not in (None, "")]
        if sel:
            ax.scatter(
                [float(r["n"]) for r in sel],
                [float(r["R"]) for r in sel],
                color=face or PALETTE[style],
                marker={"clustered": "s", "random": "o", "regular": "D"}[style],
                s=36,
                label=f"{key} (Monte Carlo)",
                zorder=3,
                edgecolor="black",
                linewidth=0.4,
            )
            for r in sel:
                if r.get(label_key) in labelled:  # one label per plot (several dates)
                    continue
                labelled.add(r.get(label_key))
                ax.annotate(
                    str(r.get(label_key, "")),
                    (float(r["n"]), float(r["R"])),
                    fontsize=9,
                    xytext=(4, 3),
                    textcoords="offset points",
                )
    ax.set_xlim(0, big)
    ax.set_ylim(0, 2.3)
    ax.set_xlabel("number of plants in the plot, n")
    ax.set_ylabel("Clark–Evans R (no edge correction)")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return save_figure(fig, path)
