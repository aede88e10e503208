"""Clark–Evans R with confidence intervals per group (sites, dates, plots)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from matplotlib.figure import Figure

from ecoscan.report.figures import MARKERS, PALETTE, new_figure

__all__ = ["r_by_group"]


#: Width of one character of the 9 pt tick labels, inches (DejaVu Sans averages about
#: 0.55 em; 9 pt = 0.125 in; from memory, rounded up).
_CHAR_IN = 0.075


def _tick_labels(names: list[str], fig_width_in: float) -> tuple[list[str], bool]:
    """Group names as tick labels that do not overlap: on one line when they fit the space
    of one group, else broken at their last space (site and date on two lines), else turned
    by 30 degrees.

    Examples
    --------
    >>> _tick_labels(["Marrow Wood 2026-04-20", "Tansy Hollow 2026-04-20"], 5.3)
    (['Marrow Wood\\n2026-04-20', 'Tansy Hollow\\n2026-04-20'], False)
    """
    span = 0.6 * fig_width_in / max(len(names), 1)  # the axes take ~60%; the legend is beside

    def fits(labels: list[str]) -> bool:
        return max(len(line) for s in labels for line in s.split("\n")) * _CHAR_IN <= span

    if not names or fits(names):
        return names, False
    two = [s[: s.rindex(" ")] + "\n" + s[s.rindex(" ") + 1 :] if " " in s else s for s in names]
    if fits(two):
        return two, False
    return names, True


def _category(r: float, lo: float, hi: float) -> str:
    if not np.isfinite(r) or not (np.isfinite(lo) and np.isfinite(hi)):
        return "random"
    if lo > 1.0:
        return "regular"
    if hi < 1.0:
        return "clustered"
    return "random"


def r_by_group(
    names: Sequence[str],
    r: np.ndarray,
    low: np.ndarray,
    high: np.ndarray,
    *,
    r_donnelly: np.ndarray | None = None,
    by: str = "group",
    title: str = "Regularity by group (Clark–Evans R)",
) -> Figure:
    """Dot-and-whisker chart of R with its confidence interval per group, most regular first.

    Parameters
    ----------
    names : sequence of str
        Group names.
    r : numpy.ndarray
        Pooled Clark–Evans R per group (dimensionless ratio of mean nearest-neighbour
        distances, Clark & Evans 1954).
    low, high : numpy.ndarray
        Confidence limits of R.
    r_donnelly : numpy.ndarray, optional
        Donnelly (1978) edge-corrected R, drawn as open markers.
    by : str
        What the groups are (axis label).
    title : str
        Figure title.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    R = 1 (dashed) is complete spatial randomness; above it plants are more evenly spaced,
    below it clustered. Colours and markers: :data:`ecoscan.report.figures.PALETTE` and
    :data:`~ecoscan.report.figures.MARKERS` by whether the interval lies above, below or across 1.
    """
    r = np.asarray(r, float)
    low = np.asarray(low, float)
    high = np.asarray(high, float)
    order = np.argsort(-np.where(np.isfinite(r), r, -np.inf), kind="stable")
    k = len(order)
    # at most 9.5 in (912 px at 96 dpi) so the report shows it at full size at 1280 px
    fig, ax = new_figure(min(9.5, max(4.5, 0.7 * k + 2.5)), 4.2)
    pos = np.arange(k)
    seen: set[str] = set()
    for j, i in enumerate(order):
        cat = _category(r[i], low[i], high[i])
        label = {"regular": "CI above 1", "clustered": "CI below 1", "random": "CI includes 1"}[cat]
        ax.errorbar(
            pos[j],
            r[i],
            yerr=[[max(r[i] - low[i], 0.0)], [max(high[i] - r[i], 0.0)]],
            fmt=MARKERS[cat],
            color=PALETTE[cat],
            markersize=7,
            capsize=4,
            label=label if cat not in seen else None,
        )
        seen.add(cat)
    if r_donnelly is not None:
        rd = np.asarray(r_donnelly, float)[order]
        ok = np.isfinite(rd)
        if np.any(ok):
            ax.scatter(
                pos[ok],
                rd[ok],
                marker="o",
                facecolors="none",
                edgecolors="#333333",
                s=40,
                zorder=3,
                label="edge-corrected R (Donnelly)",
            )
    ax.axhline(1.0, color="#555555", linestyle="--", linewidth=1.0, label="random (R = 1)")
    ax.set_xticks(pos)
    labels, turn = _tick_labels([str(names[i]) for i in order], fig.get_figwidth())
    ax.set_xticklabels(labels, rotation=30 if turn else 0, ha="right" if turn else "center")
    ax.set_xlabel(f"{by} (most regular first)")
    ax.set_ylabel("Clark–Evans R (ratio, no unit), 95% CI")
    ax.set_title(title, fontsize=10)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return fig
