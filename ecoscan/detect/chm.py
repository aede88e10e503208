"""Tree tops in a canopy height model by local maxima in a height-dependent window.

A pixel is a tree top when, after light Gaussian smoothing, it is at least ``min_height``
high and the highest pixel inside a circle whose diameter is the crown width predicted from
its own height (variable window of Popescu, S. C. & Wynne, R. H. 2004, Seeing the trees in
the forest, Photogrammetric Engineering & Remote Sensing 70: 589–604). Equal heights are
resolved deterministically: among equal pixels the first in raster order (top row, then
left column) wins, so a flat top gives one tree, placed at the centre of its plateau.
Crowns can be delineated by a marker-controlled watershed on the inverted heights (Meyer,
F. & Beucher, S. 1990, Morphological segmentation, J. Visual Communication and Image
Representation 1: 21–46) with the tops as markers.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import ndimage

__all__ = ["TreeTops", "crown_areas", "smooth_chm", "tree_tops"]


class TreeTops(NamedTuple):
    """Tree tops found by :func:`tree_tops`, one value per top.

    Attributes
    ----------
    col, row : numpy.ndarray
        Position in the raster's pixel frame (plateau centre), float.
    height : numpy.ndarray
        Height of the top, metres.
    array_row, array_col : numpy.ndarray of int
        The top pixel's indices in the array searched (for :func:`crown_areas`).
    """

    col: np.ndarray
    row: np.ndarray
    height: np.ndarray
    array_row: np.ndarray
    array_col: np.ndarray


def smooth_chm(chm: np.ndarray, sigma_px: float) -> np.ndarray:
    """Gaussian smoothing of a height model (σ in pixels, kernels cut at 3σ)."""
    if sigma_px <= 0:
        return np.asarray(chm, np.float32)
    return ndimage.gaussian_filter(np.asarray(chm, np.float32), sigma_px, truncate=3.0)


def _disc_offsets(r: int) -> tuple[np.ndarray, np.ndarray]:
    yy, xx = np.mgrid[-r : r + 1, -r : r + 1]
    inside = (yy**2 + xx**2 <= r * r + r) & ~((yy == 0) & (xx == 0))
    return yy[inside], xx[inside]


def tree_tops(
    heights: np.ndarray,
    valid: np.ndarray,
    min_height: float,
    crown_width_px,
    radius_cap_px: int,
    origin: tuple[int, int] = (0, 0),
) -> TreeTops:
    """Tree tops by the variable-window local-maximum rule.

    Parameters
    ----------
    heights : numpy.ndarray
        Smoothed heights (metres), 2-D.
    valid : numpy.ndarray of bool
        Pixels that may be a top.
    min_height : float
        Lowest top kept, metres.
    crown_width_px : callable
        Maps heights (m) to crown width in pixels (the search window diameter).
    radius_cap_px : int
        Largest search radius in pixels (the tiles' overlap is sized from it).
    origin : (int, int)
        Column and row of the array's first pixel in the raster.

    Returns
    -------
    TreeTops
        ``col``, ``row`` (raster pixel frame; plateau centre), ``height``, and the
        array indices ``array_row``, ``array_col`` of each top.
    """
    h = np.asarray(heights, np.float32)
    local = ndimage.maximum_filter(h, size=3, mode="constant", cval=-np.inf) == h
    cand = local & valid & (h >= min_height)
    cy, cx = np.nonzero(cand)
    hv = h[cy, cx]
    rad = np.clip(np.rint(crown_width_px(hv.astype(float)) / 2.0), 1, radius_cap_px).astype(int)
    pad = radius_cap_px
    hp = np.pad(h, pad, mode="constant", constant_values=-np.inf)
    is_top = np.zeros(cy.size, dtype=bool)
    for r in np.unique(rad):
        sel = np.flatnonzero(rad == r)
        dy, dx = _disc_offsets(int(r))
        q = hp[cy[sel, None] + pad + dy[None], cx[sel, None] + pad + dx[None]]
        p = hv[sel, None]
        before = (dy < 0) | ((dy == 0) & (dx < 0))  # earlier in raster order
        ok = (q < p) | ((q == p) & ~before[None])
        is_top[sel] = ok.all(axis=1)
    # plateaus: connected equal-height local maxima; one top per plateau (the first in
    # raster order), placed at the plateau's centroid
    lab, _n = ndimage.label(cand, structure=np.ones((3, 3), dtype=bool))
    comp = lab[cy, cx]
    first = np.zeros(cy.size, dtype=bool)
    _u, idx = np.unique(comp[is_top], return_index=True)
    first[np.flatnonzero(is_top)[idx]] = True
    is_top &= first
    off_r = np.zeros(cy.size)
    off_c = np.zeros(cy.size)
    size = np.bincount(comp, minlength=lab.max() + 1)
    multi = is_top & (size[comp] > 1)
    if multi.any():
        # mean offset from the top pixel (integer differences: identical in every tile)
        owner = np.full(lab.max() + 1, -1)
        owner[comp[multi]] = np.flatnonzero(multi)
        pr, pc = np.nonzero(np.isin(lab, comp[multi]))
        o = owner[lab[pr, pc]]
        n_o = np.bincount(o, minlength=cy.size)
        off_r = np.bincount(o, weights=pr - cy[o], minlength=cy.size) / np.maximum(n_o, 1)
        off_c = np.bincount(o, weights=pc - cx[o], minlength=cy.size) / np.maximum(n_o, 1)
    return TreeTops(
        col=((cx + origin[0]) + off_c)[is_top].astype(float),
        row=((cy + origin[1]) + off_r)[is_top].astype(float),
        height=hv[is_top].astype(float),
        array_row=cy[is_top],
        array_col=cx[is_top],
    )


def crown_areas(
    heights: np.ndarray,
    raw_heights: np.ndarray,
    valid: np.ndarray,
    top_rows: np.ndarray,
    top_cols: np.ndarray,
    floor_m: float,
) -> np.ndarray:
    """Crown size (pixels) of each top by marker-controlled watershed (Meyer & Beucher 1990).

    Parameters
    ----------
    heights : numpy.ndarray
        Smoothed heights, metres (the surface that is flooded).
    raw_heights : numpy.ndarray
        Unsmoothed heights, metres: crown pixels are those at least ``floor_m`` high here,
        so smoothing does not widen crowns.
    valid : numpy.ndarray of bool
        Valid pixels.
    top_rows, top_cols : numpy.ndarray of int
        Marker pixel of every top in the array.
    floor_m : float
        Pixels lower than this are not crown.

    Returns
    -------
    numpy.ndarray of int
        Pixels in each top's crown.
    """
    from skimage.segmentation import watershed

    markers = np.zeros(heights.shape, dtype=np.int32)
    markers[top_rows, top_cols] = np.arange(1, top_rows.size + 1)
    mask = valid & (raw_heights >= floor_m)
    mask[top_rows, top_cols] = True
    lab = watershed(-heights, markers, mask=mask)
    counts = np.bincount(lab.ravel(), minlength=top_rows.size + 1)
    return counts[1:]
