"""Figures (matplotlib, headless Agg backend), one module per topic.

Shared conventions: colour-blind-safe colour maps (``viridis``/``cividis``), the unit in every
axis label, figures saved atomically as PNG through :func:`save_figure`.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
from matplotlib.figure import Figure

from ecoscan.io.outputs import atomic_path

__all__ = [
    "CLASS_COLOURS",
    "MARKERS",
    "MIN_FONT_PT",
    "PALETTE",
    "new_figure",
    "save_figure",
    "smallest_text_pt",
]

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


#: Okabe & Ito (2008) colour-blind-safe qualitative colours, for class maps.
CLASS_COLOURS = (
    "#E69F00",
    "#56B4E9",
    "#009E73",
    "#F0E442",
    "#0072B2",
    "#D55E00",
    "#CC79A7",
    "#000000",
)

#: Resolution of saved figures (dots per inch). 96 is the CSS pixel density, so a figure
#: shown at its natural size in the report has its type at the point sizes set here.
FIGURE_DPI = 96

#: Smallest type in any figure, points, at the size the report shows it (no downscaling).
MIN_FONT_PT = 9.0

plt.rcParams.update(
    {
        "font.size": 10,
        "axes.titlesize": 10.5,
        "axes.labelsize": 10,
        "xtick.labelsize": 9.5,
        "ytick.labelsize": 9.5,
        "legend.fontsize": 9.5,
        "legend.title_fontsize": 9.5,
        "figure.titlesize": 11,
    }
)


def new_figure(width_in: float = 6.0, height_in: float = 4.0) -> tuple[Figure, object]:
    """A new figure and axes with ecoscan's plain style."""
    fig, ax = plt.subplots(figsize=(width_in, height_in), dpi=FIGURE_DPI)
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return fig, ax


def smallest_text_pt(fig: Figure) -> float:
    """Size in points of the smallest visible non-empty text in a figure (inf if none).

    Examples
    --------
    >>> fig, ax = new_figure()
    >>> _ = ax.set_title("spacing")
    >>> smallest_text_pt(fig) >= MIN_FONT_PT
    True
    >>> plt.close(fig)
    """
    from matplotlib.text import Text

    sizes = [
        t.get_fontsize()
        for t in fig.findobj(Text)
        if t.get_visible() and t.get_text().strip() and (t.axes is None or t.axes.get_visible())
    ]
    return float(min(sizes)) if sizes else float("inf")


def save_figure(fig: Figure, path: str | os.PathLike) -> Path:
    """Save a figure atomically and close it: PNG, or JPEG for ``.jpg`` (photo-like maps).

    PNGs are stored with a 256-colour palette (line drawings lose nothing visible and shrink
    about threefold). Raises ValueError when any text is below :data:`MIN_FONT_PT`.
    """
    from PIL import Image

    small = smallest_text_pt(fig)
    if small < MIN_FONT_PT:
        plt.close(fig)
        raise ValueError(f"figure {Path(path).name} has {small:g} pt text (< {MIN_FONT_PT:g})")
    p = Path(path)
    fmt = "jpeg" if p.suffix.lower() in (".jpg", ".jpeg") else "png"
    with atomic_path(p, suffix=p.suffix or ".png") as tmp:
        if fmt == "jpeg":
            fig.savefig(
                tmp,
                format=fmt,
                bbox_inches="tight",
                dpi=FIGURE_DPI,
                pil_kwargs={"quality": 80, "optimize": True},
            )
        else:
            buf = io.BytesIO()
            fig.savefig(buf, format="png", bbox_inches="tight", dpi=FIGURE_DPI)
            buf.seek(0)
            with Image.open(buf) as im:
                pal = im.convert("RGB").quantize(256, method=Image.Quantize.MEDIANCUT)
                pal.save(tmp, format="PNG", optimize=True)
    plt.close(fig)
    return p
