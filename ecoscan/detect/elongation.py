"""Are the kept blobs stretched along one common direction? (crowns joined to their shadows)

On a layer that sees dark things (darkness, or Excess Green plus darkness), a dark crown
and its cast shadow can form one blob. Every shadow falls away from the same sun, so such
blobs are all stretched along the sun's azimuth, whereas crowns alone are stretched in
random directions (lobes, clumps, neighbours). That is measurable without the truth: the
orientation of each kept blob from the second moments of its positive excess over the
background (the blob's inertia tensor; common practice in image analysis, e.g. the
orientation and eccentricity of scikit-image's ``regionprops``), and the agreement of the
orientations across blobs as the mean resultant of doubled angles (axial data; Mardia, K. V.
& Jupp, P. E. 2000, *Directional Statistics*, Wiley, §9.3.2 and the Rayleigh test §6.3.1).

Such a detection is badly placed even when the count looks plausible: a blob's centre falls
between crown and shadow, and crowns, shadows and their unions are counted apart. The
separation score (how far candidates stand above the noise) does not see it: the joined
blobs are strong.

Pure computation on arrays: :func:`blob_elongations` and :func:`common_elongation`.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "ALIGNED_MIN",
    "ALIGNED_MIN_Z",
    "MAX_BLOBS",
    "blob_elongations",
    "common_elongation",
    "is_aligned",
]

#: Smallest common elongation (length of the mean elongation vector) that flags blobs
#: joined to their shadows. Measured on the tuning scenes (benchmarks/tuning_scenes.py,
#: seeds 100-103): styles whose darkness blobs join crowns and shadows (``conifers``,
#: ``pines``) 0.12-0.22, every other style at most 0.06; the scene suite's development
#: seeds 0, 7, 11: 0.10 on the failing conifer pasture, row crops 0.06, others up to 0.108
#: (JPEG with vignetting, seed 0, with only 61 blobs; see ``ALIGNED_MIN_Z``).
ALIGNED_MIN = 0.08
#: Smallest Rayleigh-type statistic n·R² (R = length of the mean elongation vector over
#: the mean length of the vectors) for the common direction to count. Exp(−z) is the
#: Rayleigh test's approximate p-value (Mardia & Jupp 2000, §6.3.1) for unweighted angles;
#: the limit is far stricter than any significance level because the orientations of
#: neighbouring blobs are not independent (rows, clumps). Measured: blobs joined to
#: shadows 51-92, JPEG with vignetting seed 0 (a working scene) 23.
ALIGNED_MIN_Z = 30.0
#: At most this many blobs (the strongest) are measured per raster.
MAX_BLOBS = 1000
#: The window of a blob reaches this many blob radii; its weight is a Gaussian of one
#: blob radius, so a neighbour's excess counts little.
REACH_RADII = 2.0


def blob_elongations(
    layer: np.ndarray,
    valid: np.ndarray,
    rows: np.ndarray,
    cols: np.ndarray,
    radii: np.ndarray,
    level: float,
) -> np.ndarray:
    """Elongation vector of each blob from the second moments of its excess over ``level``.

    Around each blob centre, the layer's excess over ``level`` (negative parts set to 0)
    times a Gaussian of one blob radius gives weights; their centred second moments
    Mxx, Myy, Mxy (columns x, rows y) give the vector
    ``((Mxx − Myy) / (Mxx + Myy), 2 Mxy / (Mxx + Myy))``: length 0 for a round blob,
    approaching 1 for a line, pointing at twice the angle of the long axis.

    Parameters
    ----------
    layer : numpy.ndarray
        The detection layer (plants bright), 2-D.
    valid : numpy.ndarray of bool
        Valid pixels (others carry no weight).
    rows, cols : numpy.ndarray
        Blob centres in pixels.
    radii : numpy.ndarray
        Blob radii in pixels.
    level : float
        The background level of the layer.

    Returns
    -------
    numpy.ndarray
        Shape (n, 2); NaN for a blob without positive excess.

    Examples
    --------
    >>> import numpy as np
    >>> yy, xx = np.mgrid[:80, :80]
    >>> ellipse = np.exp(-((xx - 40) ** 2 / 200.0 + (yy - 40) ** 2 / 50.0))
    >>> e = blob_elongations(ellipse, np.ones((80, 80), bool), np.array([40.0]),
    ...                      np.array([40.0]), np.array([10.0]), 0.0)
    >>> bool(e[0, 0] > 0.3 and abs(e[0, 1]) < 1e-6)   # long axis along the columns
    True
    """
    h, w = layer.shape
    rows = np.asarray(rows, float)
    cols = np.asarray(cols, float)
    radii = np.asarray(radii, float)
    out = np.full((rows.size, 2), np.nan)
    for i, (r0, c0, rad) in enumerate(zip(rows, cols, radii, strict=True)):
        reach = math.ceil(REACH_RADII * max(rad, 1.0))
        y0, y1 = max(0, int(r0) - reach), min(h, int(r0) + reach + 1)
        x0, x1 = max(0, int(c0) - reach), min(w, int(c0) + reach + 1)
        if y0 >= y1 or x0 >= x1:
            continue
        dy = np.arange(y0, y1, dtype=float)[:, None] - r0
        dx = np.arange(x0, x1, dtype=float)[None, :] - c0
        g = np.exp(-(dx * dx + dy * dy) / (2.0 * max(rad, 1.0) ** 2))
        wgt = np.clip(layer[y0:y1, x0:x1] - level, 0.0, None) * g * valid[y0:y1, x0:x1]
        s = float(wgt.sum())
        if not s > 0:
            continue
        my = float((wgt * dy).sum()) / s
        mx = float((wgt * dx).sum()) / s
        ddy, ddx = dy - my, dx - mx
        mxx = float((wgt * ddx * ddx).sum()) / s
        myy = float((wgt * ddy * ddy).sum()) / s
        mxy = float((wgt * ddx * ddy).sum()) / s
        tr = mxx + myy
        if tr > 0:
            out[i] = ((mxx - myy) / tr, 2.0 * mxy / tr)
    return out


def common_elongation(vectors: np.ndarray) -> dict:
    """How strongly and how consistently blobs are stretched along one direction.

    Returns ``alignment`` (length of the mean elongation vector: 0 when orientations are
    random, up to the blobs' elongation when all share one axis), ``coherence`` (that
    length over the mean length of the vectors, 0-1), ``z`` (n × coherence², a
    Rayleigh-type statistic), ``axis_deg`` (the common long axis as a bearing, degrees
    clockwise from north = up in the image, 0-180) and ``blobs`` (n measured).

    Examples
    --------
    >>> import numpy as np
    >>> same = np.tile([[0.3, 0.0]], (50, 1))        # all stretched along the columns
    >>> r = common_elongation(same)
    >>> round(r["alignment"], 3), round(r["coherence"], 3), round(r["axis_deg"], 1)
    (0.3, 1.0, 90.0)
    >>> ang = np.linspace(0, 2 * np.pi, 40, endpoint=False)
    >>> round(common_elongation(0.3 * np.column_stack([np.cos(ang), np.sin(ang)]))["alignment"], 6)
    0.0
    """
    v = np.asarray(vectors, float)
    v = v[np.isfinite(v).all(axis=1)] if v.size else v.reshape(0, 2)
    n = int(v.shape[0])
    if n == 0:
        return {"alignment": 0.0, "coherence": 0.0, "z": 0.0, "axis_deg": 0.0, "blobs": 0}
    mean = v.mean(axis=0)
    alignment = float(math.hypot(mean[0], mean[1]))
    spread = float(np.hypot(v[:, 0], v[:, 1]).mean())
    coherence = alignment / spread if spread > 0 else 0.0
    # doubled angle of the long axis in image axes (x = columns, y = rows down)
    theta = 0.5 * math.atan2(mean[1], mean[0])
    # bearing: clockwise from up; the axis (dx, dy) = (cos θ, sin θ) with y down
    bearing = math.degrees(math.atan2(math.cos(theta), -math.sin(theta))) % 180.0
    return {
        "alignment": alignment,
        "coherence": coherence,
        "z": n * coherence * coherence,
        "axis_deg": bearing,
        "blobs": n,
    }


def is_aligned(stats: dict) -> bool:
    """True when the blobs share one long axis strongly and significantly enough to flag
    crowns joined to their cast shadows (``ALIGNED_MIN``, ``ALIGNED_MIN_Z``).

    Examples
    --------
    >>> is_aligned({"alignment": 0.15, "z": 80.0})
    True
    >>> is_aligned({"alignment": 0.15, "z": 10.0})
    False
    """
    return stats.get("alignment", 0.0) >= ALIGNED_MIN and stats.get("z", 0.0) >= ALIGNED_MIN_Z
