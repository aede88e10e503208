"""Figures (matplotlib, headless Agg backend), one module per topic.

Shared conventions: colour-blind-safe colour maps (``viridis``/``cividis``), the unit in every
axis label, figures saved atomically as PNG through :func:`save_figure`.
"""

from __future__ import annotations

import os
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
from matplotlib.figure import Figure

from ecoscan.outputs import atomic_path

__all__ = ["MARKERS", "PALETTE", "new_figure", "save_figure"]

#: Three colours from cividis plus one from viridis' yellow end, readable in grey too.
PALETTE = {
    "clustered": "#7d6b15",
    "random": "#7f7f7f",
    "regular": "#1f4e8c",
    "persisting": "#2b6c8f",
    "lost": "#c0392b",
    "new": "#e3b505",
}
#: Marker shapes so that categories differ without colour too.
MARKERS = {
    "persisting": "o",
    "lost": "x",
    "new": "^",
    "clustered": "s",
    "random": "o",
    "regular": "D",
}


def new_figure(width_in: float = 6.0, height_in: float = 4.0) -> tuple[Figure, object]:
    """A new figure and axes with ecoscan's plain style."""
    fig, ax = plt.subplots(figsize=(width_in, height_in), dpi=110)
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return fig, ax


def save_figure(fig: Figure, path: str | os.PathLike) -> Path:
    """Save a figure as PNG atomically and close it."""
    with atomic_path(path, suffix=".png") as tmp:
        fig.savefig(tmp, format="png", bbox_inches="tight")
    plt.close(fig)
    return Path(path)
