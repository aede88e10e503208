"""Change map: persisting, lost and new plants between two survey dates."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import shapely
from matplotlib.figure import Figure

from ecoscan.report.figures import MARKERS, PALETTE, new_figure

__all__ = ["change_map"]

_LABELS = {"persisting": "persisting", "lost": "lost", "new": "new (recruit)"}


def change_map(
    x_m: np.ndarray,
    y_m: np.ndarray,
    status: np.ndarray,
    *,
    plots: Sequence[shapely.Geometry] | None = None,
    plot_ids: Sequence[str] | None = None,
    shift_m: tuple[float, float] = (0.0, 0.0),
    title: str = "Change between survey dates",
) -> Figure:
    """Map of plants by status, with plot outlines, in metres from the map's south-west corner.

    Parameters
    ----------
    x_m, y_m : numpy.ndarray
        Plant positions, metres (projected CRS).
    status : numpy.ndarray of str
        ``persisting``, ``lost`` or ``new`` per plant.
    plots : sequence of shapely polygons, optional
        Plot outlines in the same CRS.
    plot_ids : sequence of str, optional
        Labels drawn at the plots' representative points.
    shift_m : (float, float)
        The co-registration shift removed (east, north), metres, shown in the subtitle.
    title : str
        Figure title.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Colours and marker shapes come from :data:`ecoscan.report.figures.PALETTE` and
    :data:`~ecoscan.report.figures.MARKERS`, so the three classes differ in shape as well as colour
    (readable in grey and with colour-vision deficiency).
    """
    x = np.asarray(x_m, float)
    y = np.asarray(y_m, float)
    st = np.asarray(status).astype(str)
    geoms = list(plots or [])
    xs = [x] + [shapely.get_coordinates(g)[:, 0] for g in geoms]
    ys = [y] + [shapely.get_coordinates(g)[:, 1] for g in geoms]
    allx, ally = np.concatenate(xs), np.concatenate(ys)
    x0 = float(np.floor(np.nanmin(allx))) if allx.size else 0.0
    y0 = float(np.floor(np.nanmin(ally))) if ally.size else 0.0
    span = max(float(np.ptp(allx)) if allx.size else 1.0, float(np.ptp(ally)) if ally.size else 1.0)
    fig, ax = new_figure(7.0, 6.0)
    for g in geoms:
        for part in shapely.get_parts(g):
            rings = [part.exterior, *part.interiors]
            for ring in rings:
                c = np.asarray(ring.coords)
                ax.plot(c[:, 0] - x0, c[:, 1] - y0, color="#444444", linewidth=0.9, zorder=1)
    for i, g in enumerate(geoms):
        if plot_ids is not None and i < len(plot_ids):
            rp = g.representative_point()
            ax.annotate(
                str(plot_ids[i]),
                (rp.x - x0, rp.y - y0),
                color="#222222",
                fontsize=9,
                ha="center",
                zorder=4,
                bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.7},
            )
    size = float(np.clip(3000.0 / max(x.size, 1), 4.0, 30.0))
    for s in ("persisting", "lost", "new"):
        m = st == s
        filled = MARKERS[s] not in ("x", "+", "1", "2", "3", "4")
        style = {"edgecolors": "black", "linewidths": 0.4} if filled and s != "persisting" else {}
        if not filled:
            style = {"linewidths": 1.2}
        ax.scatter(
            x[m] - x0,
            y[m] - y0,
            s=size if s == "persisting" else max(3.0 * size, 22.0),
            marker=MARKERS[s],
            color=PALETTE[s],
            label=f"{_LABELS[s]} ({int(m.sum())})",
            zorder=3 if s != "persisting" else 2,
            **style,
        )
    ax.set_aspect("equal")
    ax.set_xlabel(f"Easting − {x0:.0f} (m)")
    ax.set_ylabel(f"Northing − {y0:.0f} (m)")
    ax.set_title(
        f"{title}\nshift removed: {shift_m[0]:+.2f} m east, {shift_m[1]:+.2f} m north",
    )
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, title="status")
    if span > 0:
        ax.margins(0.03)
    return fig
