"""Small invented scenes for the calibration tests, each with a training plot.

Two looks the default Excess Green layer handles badly: dark conifers on green pasture
(darkness separates, greenness does not), and leafy crowns whose mean colour equals the
soil's, told apart only by their texture (only the pixel classifier separates). All data
are synthetic ground truth.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import shapely
from rasterio.transform import from_origin
from scipy import ndimage

from ecoscan.io.vector import write_plots, write_points
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.synthetic import place_crowns, write_geotiff

UTM = "EPSG:32633"
X0, Y0 = 400000.0, 5600000.0


def _mottle(shape, rng, sigma, amp):
    f = ndimage.gaussian_filter(rng.normal(size=shape), sigma)
    return amp * f / (f.std() + 1e-9)


def render(kind: str, seed: int, shape=(600, 600), dpx=(14, 34), n=260):
    """Render a scene: returns (uint8 image (3, rows, cols), centres px, diameters px)."""
    rng = np.random.default_rng(seed)
    xy, d = place_crowns(shape, n, dpx, rng, min_gap=1.0)
    h, w = shape
    rr, cc = np.mgrid[0:h, 0:w].astype(np.float32)
    img = np.empty((3, h, w), np.float32)
    if kind == "conifer":
        ground = np.array([95.0, 140.0, 65.0])
        crown = np.array([45.0, 75.0, 40.0])
        texture_amp = 6.0
    elif kind == "texture":
        ground = np.array([125.0, 115.0, 95.0])
        crown = ground.copy()
        texture_amp = 45.0
    else:
        raise ValueError(kind)
    mott = _mottle(shape, rng, 12, 10.0)
    for b in range(3):
        img[b] = ground[b] + mott
    fine = ndimage.gaussian_filter(rng.normal(size=shape), 1.2)
    fine = fine / fine.std()
    cover = np.zeros(shape, np.float32)
    for (x, y), dd in zip(xy, d, strict=True):
        r = dd / 2.0
        r0, r1 = int(max(0, y - r - 2)), int(min(h, y + r + 3))
        c0, c1 = int(max(0, x - r - 2)), int(min(w, x + r + 3))
        dist = np.hypot(cc[r0:r1, c0:c1] - x, rr[r0:r1, c0:c1] - y)
        a = np.clip(r + 0.5 - dist, 0, 1)
        cover[r0:r1, c0:c1] = np.maximum(cover[r0:r1, c0:c1], a)
    tone = rng.uniform(0.85, 1.15)
    for b in range(3):
        leaf = crown[b] * tone + texture_amp * fine
        img[b] = img[b] * (1 - cover) + leaf * cover
    img += rng.normal(0, 3.0, size=img.shape)
    return np.clip(img, 0, 255).astype(np.uint8), xy, d


def scene_files(folder: Path, kind: str, seed: int = 3, shape=(600, 600), ps: float = 0.05):
    """Write raster, all plants, a training plot (15% of the scene) and the rest.

    Returns
    -------
    dict with paths ``raster``, ``truth``, ``train``, ``test`` and ``truth_points``.
    """
    img, xy, d = render(kind, seed, shape)
    t = from_origin(X0, Y0, ps, ps)
    raster = write_geotiff(folder / f"{kind}.tif", img, t, UTM)
    x = X0 + (xy[:, 0] + 0.5) * ps
    y = Y0 - (xy[:, 1] + 0.5) * ps
    from pyproj import CRS

    crs = CRS.from_user_input(UTM)
    pts = PointSet(x, y, {}, crs)
    truth = write_points(pts, folder / f"{kind}_plants.csv")
    h, w = shape
    side = np.sqrt(0.15 * h * w) * ps  # 15% of the scene
    train = shapely.box(X0 + 0.0, Y0 - side, X0 + side, Y0)
    whole = shapely.box(X0, Y0 - h * ps, X0 + w * ps, Y0)
    rest = whole.difference(train)
    train_p = write_plots(PlotLayer([Plot("train", train)], crs), folder / f"{kind}_train.gpkg")
    test_p = write_plots(PlotLayer([Plot("rest", rest)], crs), folder / f"{kind}_rest.gpkg")
    return {
        "raster": raster,
        "truth": truth,
        "train": train_p,
        "test": test_p,
        "truth_points": pts,
        "diameter_m": (float(d.min() * ps), float(d.max() * ps)),
    }
