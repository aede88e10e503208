"""Synthetic scenes with known plant positions, shared by the detection tests.

All scenes are invented (synthetic ground truth made by ecoscan.synthetic).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from pyproj import CRS
from rasterio.transform import from_origin

from ecoscan.model.points import PointSet
from ecoscan.synthetic import (
    place_crowns,
    render_chm,
    render_classes,
    render_orthomosaic,
    write_geotiff,
)

UTM = "EPSG:32633"
X0, Y0 = 400000.0, 5600000.0


def truth_points(xy_px: np.ndarray, ps: float, attrs: dict | None = None) -> PointSet:
    """Map coordinates of pixel positions for a north-up raster at (X0, Y0)."""
    x = X0 + (xy_px[:, 0] + 0.5) * ps
    y = Y0 - (xy_px[:, 1] + 0.5) * ps
    return PointSet(x, y, attrs or {}, CRS.from_user_input(UTM))


def ortho_scene(
    folder: Path,
    seed: int = 1,
    shape=(600, 560),
    ps: float = 0.05,
    n: int = 160,
    dpx=(12, 40),
    name: str = "ortho.tif",
    **kw,
):
    """An RGB orthomosaic: returns (path, truth PointSet with diameter_m)."""
    rng = np.random.default_rng(seed)
    xy, d = place_crowns(shape, n, dpx, rng, min_gap=0.95)
    img = render_orthomosaic(xy, d, shape, rng, **kw)
    path = write_geotiff(folder / name, img, from_origin(X0, Y0, ps, ps), UTM)
    return path, truth_points(xy, ps, {"diameter_m": d * ps})


def chm_scene(
    folder: Path,
    seed: int = 2,
    shape=(500, 480),
    ps: float = 0.25,
    n: int = 90,
    flat_top: float = 0.0,
    name: str = "chm.tif",
):
    """A canopy height model: returns (path, truth PointSet with height_m, diameter_m)."""
    rng = np.random.default_rng(seed)
    xy, d = place_crowns(shape, n, (14, 34), rng, min_gap=0.9)
    h = rng.uniform(6.0, 22.0, xy.shape[0])
    chm = render_chm(xy, h, d, shape, rng, flat_top=flat_top)
    path = write_geotiff(folder / name, chm, from_origin(X0, Y0, ps, ps), UTM)
    return path, truth_points(xy, ps, {"height_m": h, "diameter_m": d * ps})


def classes_scene(
    folder: Path,
    seed: int = 3,
    shape=(500, 480),
    ps: float = 0.1,
    n: int = 120,
    name: str = "classes.tif",
):
    """A classified raster (plants = class 3, touching allowed)."""
    rng = np.random.default_rng(seed)
    xy, d = place_crowns(shape, n, (12, 36), rng, min_gap=0.92)
    cls = render_classes(xy, d, shape, rng, plant_class=3)
    path = write_geotiff(folder / name, cls, from_origin(X0, Y0, ps, ps), UTM)
    return path, truth_points(xy, ps, {"diameter_m": d * ps})


def f1_against(points: PointSet, truth: PointSet, tol: float) -> float:
    """F1 of detections against truth with one-to-one matching."""
    from ecoscan.stats.matching import match_points

    m = match_points(points.xy, truth.xy, tol)
    return 2 * m.n_matched / (points.n + truth.n)


def sorted_xy(points: PointSet) -> np.ndarray:
    """Coordinates sorted lexicographically, to compare two runs."""
    xy = points.xy
    return xy[np.lexsort((xy[:, 1], xy[:, 0]))]


def suite_scene_f1(style: str, size: int, seed: int, folder: Path):
    """Default detection (only the diameter range and bands given) on a scene-suite scene.

    Returns ``(f1, result)``: a detection counts when it is matched one to one within half
    the smallest stated diameter of a plant (as ``ecoscan validate`` matches).
    """
    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.stats.matching import match_points
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene(style, size, seed)
    paths = write_scene(sc, folder)
    lo, hi = sc.diameter_range_m
    res = detect_raster(
        paths.raster,
        DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, bands=sc.bands_option),
    )
    m = match_points(res.points.xy, np.column_stack([sc.x_m, sc.y_m]), 0.5 * lo)
    return 2 * m.n_matched / (res.n + sc.n), res


def layer_choice(name, terms, raise_by=1.0, closed=False):
    """A layer choice with fixed, plausible figures, to test the rules that read it."""

    from ecoscan.detect.autotune import LayerChoice

    return LayerChoice(
        name=name,
        terms=terms,
        background=0.01,
        spread=0.02,
        min_response=(1.0,),
        min_contrast=1.0,
        min_value=-math.inf if closed else 0.03,
        separation=5.0,
        near_share=0.0,
        candidates=20,
        closed=closed,
        threshold_raise=raise_by,
    )


def sample_windows(style="dry-shrubs", size=320, seed=0, zero_nodata=False):
    """Four sample windows of a suite scene (seed 0 is a development seed), each read
    with a 40-pixel margin around its core (the outer ones touch the scene's edges), the
    last with a 30-pixel nodata corner (its pixels set to 0 with ``zero_nodata``); and the
    blob scales of the scene's diameter range."""
    from ecoscan.detect.autotune import SampleWindow
    from ecoscan.detect.blobs import blob_scales
    from ecoscan.synthetic import make_scene

    sc = make_scene(style, size, seed)
    img = np.asarray(sc.image, np.float32)[:3]
    half, m = size // 2, 40
    wins = []
    for r0 in (0, half):
        for c0 in (0, half):
            rs = slice(max(0, r0 - m), min(size, r0 + half + m))
            cs = slice(max(0, c0 - m), min(size, c0 + half + m))
            data = img[:, rs, cs].copy()
            core = (
                slice(r0 - rs.start, r0 - rs.start + half),
                slice(c0 - cs.start, c0 - cs.start + half),
            )
            wins.append(SampleWindow(data, np.ones(data.shape[1:], bool), core))
    wins[3].valid[-30:, -30:] = False
    if zero_nodata:
        wins[3].data[:, -30:, -30:] = 0.0
    lo, hi = sc.diameter_range_m
    return wins, blob_scales(lo / sc.pixel_size_m / 2, hi / sc.pixel_size_m / 2)


def lambert_domes(shape, crowns, sun_elev_deg=90.0, sun_az_deg=0.0, floor=0.05, height=1.0):
    """Brightness of Lambert half-spheroids (col, row, radius; height ``height`` × radius)
    seen from above; the higher surface wins where crowns overlap (closed-canopy tests).

    Examples
    --------
    >>> img = lambert_domes((20, 20), [(10.0, 10.0, 6.0)])
    >>> bool(img[10, 10] > img[0, 0])
    True
    """
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    e, a = math.radians(sun_elev_deg), math.radians(sun_az_deg)
    s = np.array([math.cos(e) * math.cos(a), math.cos(e) * math.sin(a), math.sin(e)])
    top = np.full(shape, -1.0)
    out = np.full(shape, floor)
    for cx, cy, r in crowns:
        dx, dy = (xx - cx) / r, (yy - cy) / r
        rho2 = dx * dx + dy * dy
        inside = rho2 < 1
        nz = np.sqrt(np.clip(1 - rho2, 0, None))
        z = height * r * nz
        # surface normal of z = height * r * sqrt(1 - rho^2): (height dx, height dy, nz)
        norm = np.sqrt(height**2 * rho2 + nz**2) + 1e-12
        lit = np.clip((height * (dx * s[0] + dy * s[1]) + nz * s[2]) / norm, 0, None)
        win = inside & (z > top)
        out[win] = floor + 0.3 + 0.7 * lit[win]
        top[win] = z[win]
    return out


def rule_on_and_off(style, seed, folder, monkeypatch, module, name, off_value, size=512):
    """Default detection on a scene-suite scene with a rule on, then with ``module.name``
    set to ``off_value`` (the rule off); each result matched to the truth within half the
    smallest diameter (as ``ecoscan validate`` matches). The patch stays in place (undo it
    with ``monkeypatch.undo()``).

    Returns a namespace with ``scene``, ``raster``, ``truth``, ``settings``, ``on``,
    ``off``, ``matched_on`` and ``matched_off``.
    """
    from types import SimpleNamespace

    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.stats.matching import match_points
    from ecoscan.synthetic import make_scene, write_scene

    sc = make_scene(style, size, seed)
    raster = write_scene(sc, folder).raster
    lo, hi = sc.diameter_range_m
    truth = np.column_stack([sc.x_m, sc.y_m])
    settings = DetectionSettings(diameter_min_m=lo, diameter_max_m=hi, bands=sc.bands_option)
    on = detect_raster(raster, settings)
    monkeypatch.setattr(module, name, off_value)
    off = detect_raster(raster, settings)
    return SimpleNamespace(
        scene=sc,
        raster=raster,
        truth=truth,
        settings=settings,
        on=on,
        off=off,
        matched_on=match_points(on.points.xy, truth, 0.5 * lo),
        matched_off=match_points(off.points.xy, truth, 0.5 * lo),
    )
