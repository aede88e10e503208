"""Figure of a monitoring plan: detectable pattern against plants per plot, and power
against the number of plots."""

from __future__ import annotations

import os
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np

from ecoscan.report.figures import FIGURE_DPI, PALETTE, save_figure

__all__ = ["plot_plan"]


def plot_plan(result, path: str | os.PathLike) -> Path:
    """Draw a plan: left, the detectable Clark–Evans R per plants per plot for each plot
    shape; right, power to detect the density change and survival difference against the
    number of plots.

    Parameters
    ----------
    result : ecoscan.analysis.planning.PlanResult
        The plan.
    path : path-like
        PNG file to write.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import shapely, tempfile, os
    >>> from ecoscan.analysis.planning import PlanSettings, make_plan
    >>> plan = make_plan({"square": shapely.box(0, 0, 20, 20)},
    ...                  PlanSettings(densities_per_ha=(600.0,), patterns=20))
    >>> plot_plan(plan, os.path.join(tempfile.mkdtemp(), "p.png")).suffix
    '.png'
    """
    s = result.settings
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10.5, 4.2), dpi=FIGURE_DPI)
    styles = ["-", "--", ":", "-."]
    for i, (name, ranges) in enumerate(result.curves.items()):
        ns = np.array([d.n for d in ranges])
        lo = np.array([d.clustered_r for d in ranges])
        hi = np.array([d.regular_r for d in ranges])
        ls = styles[i % len(styles)]
        ax1.plot(ns, lo, ls, marker="s", color=PALETTE["clustered"], label=f"{name}: clustered")
        ax1.plot(ns, hi, ls, marker="D", color=PALETTE["regular"], label=f"{name}: regular")
    ax1.axhline(1.0, color=PALETTE["random"], linewidth=0.8)
    ax1.axhline(s.clustered_r, color=PALETTE["clustered"], linewidth=0.6, alpha=0.5)
    ax1.axhline(s.regular_r, color=PALETTE["regular"], linewidth=0.6, alpha=0.5)
    ax1.set_xscale("log")
    ax1.set_xlabel("plants per plot (count)", fontsize=10)
    ax1.set_ylabel("detectable Clark–Evans R (dimensionless)", fontsize=10)
    ax1.set_title(f"pattern detected with {s.power:.0%} power", fontsize=11)
    # below the panel, so that it never covers the curves however many shapes there are
    ax1.legend(fontsize=9, loc="upper left", bbox_to_anchor=(0.0, -0.22), ncol=2, frameon=False)
    rows = result.design_rows
    k = [r["plots"] for r in rows]
    ax2.plot(
        k,
        [r["power_density_change"] for r in rows],
        "-o",
        color=PALETTE["lost"],
        label=f"density change {s.relative_change:+.0%}",
    )
    ax2.plot(
        k,
        [r["power_survival_difference"] for r in rows],
        "--^",
        color=PALETTE["persisting"],
        label=f"survival {s.survival[0]:.0%} vs {s.survival[1]:.0%}",
    )
    ax2.axhline(s.power, color="#444444", linewidth=0.8, linestyle=":")
    ax2.set_ylim(0, 1.02)
    ax2.set_xlabel("plots per site or date (count)", fontsize=10)
    ax2.set_ylabel("power (probability)", fontsize=10)
    first = next(iter(result.curves), "")
    ax2.set_title(f"{first}, {rows[0]['density_per_ha']:.0f} plants/ha", fontsize=11)
    ax2.legend(fontsize=9, loc="lower right", framealpha=0.9)
    for ax in (ax1, ax2):
        ax.grid(True, color="#dddddd", linewidth=0.6)
        ax.tick_params(labelsize=9)
    fig.tight_layout()
    return save_figure(fig, path)
