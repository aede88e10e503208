"""Plant patches in a classified land-cover raster.

Pixels of the chosen class values form patches by 8-connected components. Touching crowns
are split by a watershed on the inverted Euclidean distance transform with one marker per
regional maximum of the distance that stands out by at least ``h`` pixels (the h-maxima
transform), the usual marker-controlled watershed of Meyer, F. & Beucher, S. (1990),
Morphological segmentation, J. Visual Communication and Image Representation 1: 21–46.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

__all__ = ["class_patches"]

_EIGHT = np.ones((3, 3), dtype=bool)


def class_patches(
    classes: np.ndarray,
    valid: np.ndarray,
    values: tuple[int, ...],
    min_area_px: float,
    *,
    split: bool = True,
    h_px: float = 1.0,
    cut_sides: tuple[bool, bool, bool, bool] = (True, True, True, True),
) -> dict[str, np.ndarray]:
    """Patches of the chosen classes, with centroid, area and dominant class.

    Parameters
    ----------
    classes : numpy.ndarray
        Class values, 2-D.
    valid : numpy.ndarray of bool
        Valid pixels.
    values : tuple of int
        Class values that are plants.
    min_area_px : float
        Smallest patch kept, in pixels.
    split : bool
        Split touching crowns by a distance-transform watershed.
    h_px : float
        Depth (pixels of distance) a distance maximum needs to become its own crown.
    cut_sides : (bool, bool, bool, bool)
        Which array sides (top, bottom, left, right) cut the raster, i.e. are not the
        raster's own border; patches touching them are flagged in ``edge``.

    Returns
    -------
    dict of numpy.ndarray
        ``row``, ``col`` (centroid, pixel frame of the array), ``area_px``, ``class_value``
        and ``edge`` (True when the patch touches a cut side, so it may extend further).
    """
    from skimage.morphology import h_maxima
    from skimage.segmentation import watershed

    cls = np.asarray(classes)
    mask = np.isin(cls, np.asarray(values)) & valid
    if split:
        dist = ndimage.distance_transform_edt(mask).astype(np.float32)
        peaks = h_maxima(dist, h_px) > 0
        markers, _n = ndimage.label(peaks & mask, structure=_EIGHT)
        lab = watershed(-dist, markers, mask=mask, connectivity=2)
    else:
        lab, _n = ndimage.label(mask, structure=_EIGHT)
    n = int(lab.max())
    flat = lab.ravel()
    rr, cc = np.indices(lab.shape)
    area = np.bincount(flat, minlength=n + 1).astype(float)
    srow = np.bincount(flat, weights=rr.ravel(), minlength=n + 1)
    scol = np.bincount(flat, weights=cc.ravel(), minlength=n + 1)
    border = np.zeros(lab.shape, dtype=bool)
    top, bottom, left, right = cut_sides
    border[0, :] |= top
    border[-1, :] |= bottom
    border[:, 0] |= left
    border[:, -1] |= right
    edge = np.bincount(flat[border.ravel()], minlength=n + 1) > 0
    best = np.zeros(n + 1)
    dom = np.zeros(n + 1, dtype=np.int64)
    for v in values:
        c = np.bincount(flat, weights=(cls.ravel() == v), minlength=n + 1)
        better = c > best
        dom[better] = v
        best = np.maximum(best, c)
    ids = np.arange(1, n + 1)
    ids = ids[area[ids] >= max(min_area_px, 1.0)]
    return {
        "row": srow[ids] / area[ids],
        "col": scol[ids] / area[ids],
        "area_px": area[ids],
        "class_value": dom[ids],
        "edge": edge[ids],
    }
