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


#: Resolution of saved figures (dots per inch): sharp on screen, small in the report.
FIGURE_DPI = 96


def new_figure(width_in: float = 6.0, height_in: float = 4.0) -> tuple[Figure, object]:
    """A new figure and axes with ecoscan's plain style."""
    fig, ax = plt.subplots(figsize=(width_in, height_in), dpi=FIGURE_DPI)
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return fig, ax


def save_figure(fig: Figure, path: str | os.PathLike) -> Path:
    """Save a figure atomically and close it: PNG, or JPEG for ``.jpg`` (photo-like maps)."""
    p = Path(path)
    fmt = "jpeg" if p.suffix.lower() in (".jpg", ".jpeg") else "png"
    extra = {"pil_kwargs": {"quality": 82, "optimize": True}} if fmt == "jpeg" else {}
    with atomic_path(p, suffix=p.suffix or ".png") as tmp:
        fig.savefig(tmp, format=fmt, bbox_inches="tight", dpi=FIGURE_DPI, **extra)
    plt.close(fig)
    return p
