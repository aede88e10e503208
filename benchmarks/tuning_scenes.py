"""Tuning scenes for the detector's automatic layer and threshold choice.

These scenes exist only to tune the detector's defaults (the constants in
``ecoscan.detect.autotune``). They are drawn deliberately unlike both the bundled demo
renderer (``ecoscan.synthetic``: round crowns of one colour on smooth soil) and the
evaluation scene suite (``ecoscan.synthetic`` scene styles of the ``scenes`` work), so that
accuracy measured on the suite is not flattered by tuning on the same look:

* crowns are lobed stars (a radius modulated by 3-7 random harmonics), with clumpy inner
  texture and a sunlit side to the upper left;
* shadows fall to the upper right (the suite's and the demo's fall elsewhere);
* soil is a reddish laterite with multi-scale mottling, pebbles and fine cracks;
* colours are drawn from a palette of green, olive, straw and blue-grey crowns.

Styles: ``mixed`` (all colours on soil), ``grass`` (pale green-grey grass patches between
darker shrubs), ``pasture`` (dark crowns on green grass), ``clumps`` (touching pairs and
triples of similar size), ``nir`` (four bands, uint16, blue-green-red-NIR), ``canopy``
(crowns of several greens packed edge to edge over dark shaded ground), ``coarse``
(``mixed`` averaged over 3 × 3 pixels: 0.15 m pixels, smallest crowns 4 pixels),
``conifers`` (near-black crowns with coarse, high-contrast needle texture and long shadows
on pasture with wide straw-coloured patches), ``stand`` (overlapping crowns of very
different sizes covering most of dark ground: centres outside each other's crowns by
half the smaller radius), ``jpeg`` (``mixed`` crowns on soil with wide grass patches,
photographed in square frames with strong vignetting and saved as JPEG, quality 45),
``domes`` (the ``stand`` placement over near-black understorey, each crown shaded as a
hemisphere lit from the upper left at 40 degrees elevation with a dark far side, and
rough leaf-clump texture at two scales: touching crowns of one colour meet in a shaded
valley, not a colour edge), ``oaks`` (the ``domes`` placement with broad leaf clumps whose
size grows with the crown, a quarter of its radius, deep enough to cut a big crown's
brightness into several bumps; hemispheres lit from the lower left at 50 degrees),
``pines`` (near-black lobed crowns in jittered rows on
pasture, each casting a shadow 1.2-2.4 crown radii long in a sun direction drawn per
seed; shaded pasture is almost the crowns' colour, so on a darkness layer crown and
shadow are one blob; crowns carry a lit rim on the sun side and speckled needle texture
whose grain is drawn per seed between 0.7 and 2.5 pixels).

Seeds 100-199 are the tuning seeds; nothing else uses this module. Invented data only.

Run ``python benchmarks/tuning_scenes.py`` to print the default detector's F1 per style on
the tuning seeds (the figure the defaults were tuned against).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from scipy import ndimage

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

STYLES = (
    "mixed",
    "grass",
    "pasture",
    "clumps",
    "nir",
    "canopy",
    "coarse",
    "conifers",
    "stand",
    "jpeg",
    "domes",
    "oaks",
    "pines",
)
TUNING_SEEDS = tuple(range(100, 104))
PIXEL_M = 0.05
DIAMETER_M = (0.6, 2.0)

# palette (red, green, blue digital numbers), invented
_GREEN = (52, 110, 40)
_OLIVE = (104, 112, 62)
_STRAW = (170, 158, 112)
_GREYBLUE = (118, 126, 120)
_LATERITE = (176, 120, 92)
_GRASS = (126, 146, 96)
_PASTURE = (92, 140, 60)
_CONIFER = (28, 58, 34)


def _noise(shape, gen, scale_px):
    """Smooth noise, unit standard deviation, feature size about ``scale_px``."""
    f = gen.standard_normal(shape).astype(np.float32)
    f = ndimage.gaussian_filter(f, scale_px)
    return f / (f.std() + 1e-9)


def _place_overlapping(shape, n, dpx, gen):
    """Crowns that may overlap: centres at least the larger radius plus half the smaller
    apart (every centre outside the other crowns), sizes spread log-uniformly."""
    h, w = shape
    xy, rad = np.empty((0, 2)), np.empty(0)
    for _ in range(60 * n):
        if rad.size >= n:
            break
        r = np.exp(gen.uniform(np.log(dpx[0]), np.log(dpx[1]))) / 2
        c = np.array([gen.uniform(0, w), gen.uniform(0, h)])
        if rad.size:
            dd = np.hypot(*(xy - c).T)
            need = np.maximum(rad, r) + 0.5 * np.minimum(rad, r)
            if np.any(dd < need):
                continue
        xy = np.vstack([xy, c])
        rad = np.append(rad, r)
    return xy, 2 * rad


def _place(shape, n, dpx, gen, clumps=False):
    """Crown centres and diameters; touching pairs/triples when ``clumps``."""
    h, w = shape
    xy, d = [], []
    tries = 0
    while len(xy) < n and tries < 50 * n:
        tries += 1
        r = gen.uniform(dpx[0], dpx[1]) / 2
        c = gen.uniform(r, w - r), gen.uniform(r, h - r)
        group = [(c, r)]
        if clumps and gen.random() < 0.7:
            for _ in range(gen.integers(1, 3)):
                r2 = r * gen.uniform(0.85, 1.15)
                a = gen.uniform(0, 2 * np.pi)
                dd = (r + r2) * gen.uniform(0.92, 1.02)
                c2 = (group[-1][0][0] + dd * np.cos(a), group[-1][0][1] + dd * np.sin(a))
                if r2 <= c2[0] < w - r2 and r2 <= c2[1] < h - r2:
                    group.append((c2, r2))
        ok = True
        for (cx, cy), rr in group:
            for (ox, oy), od in zip(xy, d, strict=True):
                if np.hypot(cx - ox, cy - oy) < 0.9 * (rr + od / 2):
                    ok = False
                    break
            if not ok:
                break
        if ok:
            pts = [g[0] for g in group]
            if len(group) > 1:
                dists = [np.hypot(a[0] - b[0], a[1] - b[1]) for a in pts for b in pts if a != b]
                if min(dists) < 0.9 * 2 * min(g[1] for g in group):
                    continue
            for (cx, cy), rr in group:
                xy.append((cx, cy))
                d.append(2 * rr)
    return np.array(xy, float).reshape(-1, 2), np.array(d, float)


def pines_shadow_azimuth_deg(seed: int) -> float:
    """Direction in which the ``pines`` scene of ``seed`` casts its shadows: degrees
    clockwise from the image's up direction (the sun stands opposite)."""
    return float(np.random.default_rng([seed, 17]).uniform(0.0, 360.0))


def _pines(seed: int, size_px: int):
    """The ``pines`` style (see the module docstring): long shadows that merge with the
    crowns. Drawn with this module's own outline, texture and palette."""
    gen = np.random.default_rng(seed * 31 + STYLES.index("pines"))
    shape = (size_px, size_px)
    dpx = (DIAMETER_M[0] / PIXEL_M, DIAMETER_M[1] / PIXEL_M)
    # pasture: two greens and a dry tint at large scale, fine tufts
    mott = 0.10 * _noise(shape, gen, 22) + 0.05 * _noise(shape, gen, 3)
    dry = np.clip(0.5 + 0.8 * _noise(shape, gen, 60), 0, 1)
    base = np.array(_PASTURE, np.float32)[:, None, None] * (1 - 0.35 * dry[None])
    base = base + np.array(_STRAW, np.float32)[:, None, None] * 0.35 * dry[None]
    img = base * (1 + mott)[None]
    # trees on rows at a random angle, 15 % missing, plus scattered young trees
    ang = gen.uniform(0, np.pi)
    step, row = gen.uniform(1.6, 2.0) * dpx[1], gen.uniform(1.9, 2.4) * dpx[1]
    u = np.arange(-size_px, size_px, step)
    v = np.arange(-size_px, size_px, row)
    uu, vv = np.meshgrid(u, v)
    cx = size_px / 2 + uu * np.cos(ang) - vv * np.sin(ang) + gen.normal(0, 3, uu.shape)
    cy = size_px / 2 + uu * np.sin(ang) + vv * np.cos(ang) + gen.normal(0, 3, uu.shape)
    keep = (gen.uniform(size=cx.shape) > 0.15) & (cx > 4) & (cx < size_px - 4)
    keep &= (cy > 4) & (cy < size_px - 4)
    cx, cy = cx[keep], cy[keep]
    d = gen.uniform(0.55, 1.0, cx.size) * dpx[1]
    n_young = int(size_px * size_px / 12000)
    yx, yy_ = gen.uniform(4, size_px - 4, n_young), gen.uniform(4, size_px - 4, n_young)
    gap = np.hypot(cx[None, :] - yx[:, None], cy[None, :] - yy_[:, None]).min(axis=1)
    far = gap > dpx[1]  # young trees clear of the planted crowns
    cx, cy = np.r_[cx, yx[far]], np.r_[cy, yy_[far]]
    d = np.r_[d, gen.uniform(dpx[0], 0.5 * dpx[1], int(far.sum()))]
    # sun: shadows fall towards the azimuth of pines_shadow_azimuth_deg, length h * r
    az = np.radians(pines_shadow_azimuth_deg(seed))
    ux, uy = np.sin(az), -np.cos(az)  # columns grow to the right, rows downwards
    grain = gen.uniform(0.7, 2.5)
    yy, xx = np.mgrid[0:size_px, 0:size_px].astype(np.float32)
    shade = np.ones(shape, np.float32)
    cover = np.zeros(shape, np.float32)
    plant = np.zeros((3, *shape), np.float32)
    for i in np.argsort(d)[::-1]:
        r = d[i] / 2
        length = gen.uniform(1.2, 2.4) * r
        reach = r + length + 2
        x0, x1 = int(max(0, cx[i] - reach)), int(min(size_px, cx[i] + reach + 2))
        y0, y1 = int(max(0, cy[i] - reach)), int(min(size_px, cy[i] + reach + 2))
        if x1 <= x0 or y1 <= y0:
            continue
        sx, sy = xx[y0:y1, x0:x1] - cx[i], yy[y0:y1, x0:x1] - cy[i]
        k, amp, ph = int(gen.integers(6, 10)), gen.uniform(0.08, 0.18), gen.uniform(0, 2 * np.pi)
        ang_p = np.arctan2(sy, sx)
        rr = r * (1 + amp * np.cos(k * ang_p + ph)) / (1 + amp / 2)
        alpha = np.clip(rr - np.hypot(sx, sy) + 0.7, 0, 1)
        # shadow: the outline swept from the crown to the shadow's end (a stadium)
        t = np.clip(sx * ux + sy * uy, 0, length)
        px, py = sx - t * ux, sy - t * uy
        sh = np.clip(0.95 * r - np.hypot(px, py) + 1.0, 0, 1) * gen.uniform(0.55, 0.65)
        shade[y0:y1, x0:x1] = np.minimum(shade[y0:y1, x0:x1], 1 - sh)
        # crown: dark, lit rim towards the sun, speckled needles
        col = np.array(_CONIFER, np.float32) * gen.uniform(0.85, 1.2)
        toward = -(sx * ux + sy * uy) / (r + 1e-6)
        rim = np.clip(np.hypot(sx, sy) / (r + 1e-6), 0, 1) ** 2
        lit = 1 + 0.5 * np.clip(toward, 0, 1) * rim
        speck = ndimage.gaussian_filter(gen.standard_normal(sx.shape).astype(np.float32), grain)
        speck /= speck.std() + 1e-6
        needles = np.clip(1 + 0.35 * speck, 0.3, 2.0)
        shaded = col[:, None, None] * (lit * needles)[None]
        a = alpha[None]
        plant[:, y0:y1, x0:x1] = plant[:, y0:y1, x0:x1] * (1 - a) + shaded * a
        cover[y0:y1, x0:x1] = np.maximum(cover[y0:y1, x0:x1], alpha)
    out = img * shade[None] * (1 - cover[None]) + plant * cover[None]
    out += gen.normal(0, 3.0, out.shape).astype(np.float32)
    return np.clip(np.rint(out), 0, 255).astype(np.uint8), np.column_stack([cx, cy]), d


def make_tuning_scene(style: str, seed: int, size_px: int = 640):
    """Render one tuning scene.

    Returns
    -------
    image : numpy.ndarray
        (bands, rows, columns); uint8 RGB, or uint16 blue, green, red, NIR for ``nir``.
    xy_px : numpy.ndarray
        Crown centres (column, row).
    diameters_px : numpy.ndarray
    """
    if style not in STYLES:
        raise ValueError(style)
    if style == "pines":
        return _pines(seed, size_px)
    if style == "coarse":
        img, xy, d = make_tuning_scene("mixed", seed, size_px)
        h = size_px // 3 * 3
        f = img[:, :h, :h].astype(np.float32).reshape(3, h // 3, 3, h // 3, 3).mean(axis=(2, 4))
        f += np.random.default_rng(seed).normal(0, 3.0, f.shape).astype(np.float32)
        keep = (xy[:, 0] < h) & (xy[:, 1] < h)
        return np.clip(np.rint(f), 0, 255).astype(np.uint8), (xy[keep] - 1.0) / 3.0, d[keep] / 3
    gen = np.random.default_rng(seed * 31 + STYLES.index(style))
    shape = (size_px, size_px)
    dpx = (DIAMETER_M[0] / PIXEL_M, DIAMETER_M[1] / PIXEL_M)
    per_crown = {"clumps": 2600, "canopy": 700, "stand": 300, "domes": 300, "oaks": 300}
    per_crown = per_crown.get(style, 3200)
    n = int(size_px * size_px / per_crown)
    if style in ("stand", "domes", "oaks"):
        xy, d = _place_overlapping(shape, n, dpx, gen)
    else:
        xy, d = _place(shape, n, dpx, gen, clumps=style in ("clumps", "canopy"))
    # background
    mott = 0.10 * _noise(shape, gen, 18) + 0.06 * _noise(shape, gen, 4)
    if style in ("pasture", "conifers"):
        bg = np.array(_PASTURE, np.float32)[:, None, None] * (1 + 1.3 * mott)[None]
    elif style == "stand":
        bg = np.array(_LATERITE, np.float32)[:, None, None] * 0.3 * (1 + mott)[None]
    elif style in ("domes", "oaks"):
        bg = np.array(_CONIFER, np.float32)[:, None, None] * 0.8 * (1 + mott)[None]
    elif style == "canopy":
        bg = np.array(_LATERITE, np.float32)[:, None, None] * 0.45 * (1 + mott)[None]
    else:
        bg = np.array(_LATERITE, np.float32)[:, None, None] * (1 + mott)[None]
    img = bg.copy()
    if style in ("conifers", "jpeg"):
        # wide patches (straw on pasture; grass on soil), wider than any crown
        patch = _noise(shape, gen, 45) > 0.2
        a = ndimage.gaussian_filter(patch.astype(np.float32), 6.0)
        tuft = 1 + 0.1 * _noise(shape, gen, 1.2)
        g = np.array(_STRAW if style == "conifers" else _GRASS, np.float32)[:, None, None]
        img = img * (1 - a[None]) + g * tuft[None] * a[None]
    if style == "grass":
        patch = _noise(shape, gen, 14) > 0.35
        a = ndimage.gaussian_filter(patch.astype(np.float32), 2.0)
        tuft = 1 + 0.15 * _noise(shape, gen, 1.5)
        g = np.array(_GRASS, np.float32)[:, None, None] * tuft[None]
        img = img * (1 - a[None]) + g * a[None]
    # pebbles and cracks
    peb = _noise(shape, gen, 1.2) > 2.6
    img[:, peb] *= 0.55
    crack = np.abs(_noise(shape, gen, 6)) < 0.03
    img[:, crack] *= 0.8
    yy, xx = np.mgrid[0:size_px, 0:size_px].astype(np.float32)
    shade = np.ones(shape, np.float32)
    cover = np.zeros(shape, np.float32)
    plant = np.zeros((3, *shape), np.float32)
    if style in ("pasture", "conifers"):
        palette = [_CONIFER]
    elif style == "stand":
        palette = [_GREEN, _OLIVE, (70, 120, 52), (88, 132, 70), (120, 140, 60)]
    elif style == "grass":
        palette = [_GREEN, _OLIVE]
    elif style == "canopy":
        palette = [_GREEN, _OLIVE, (70, 120, 52), (88, 132, 70)]
    elif style == "domes":
        palette = [_GREEN, (70, 120, 52), (96, 150, 66)]
    elif style == "oaks":
        palette = [_GREEN, (78, 124, 50), (60, 98, 44), (104, 146, 70)]
    else:
        palette = [_GREEN, _GREEN, _OLIVE, _STRAW, _GREYBLUE]
    order = np.argsort(d)[::-1]  # small crowns drawn over large ones
    for i in order:
        cx, cy = xy[i]
        r = d[i] / 2
        k = int(gen.integers(3, 8))
        amp = gen.uniform(0.06, 0.16)
        ph = gen.uniform(0, 2 * np.pi)
        x0, x1 = int(max(0, cx - 1.6 * r)), int(min(size_px, cx + 1.6 * r + 2))
        y0, y1 = int(max(0, cy - 1.6 * r)), int(min(size_px, cy + 1.6 * r + 2))
        sx, sy = xx[y0:y1, x0:x1] - cx, yy[y0:y1, x0:x1] - cy
        ang = np.arctan2(sy, sx)
        rr = r * (1 + amp * np.cos(k * ang + ph)) / (1 + amp / 2)
        dist = np.hypot(sx, sy)
        alpha = np.clip(rr - dist + 0.7, 0, 1)
        # shadow to the upper right, on the ground only (long and deep under conifers)
        off, depth = (0.9, 0.6) if style == "conifers" else (0.4, 0.45)
        sdist = np.hypot(sx - off * r, sy + off * r)
        sh = np.clip(rr - sdist + 1.0, 0, 1) * depth
        shade[y0:y1, x0:x1] = np.minimum(shade[y0:y1, x0:x1], 1 - sh)
        col = np.array(palette[int(gen.integers(len(palette)))], np.float32)
        col = col * gen.uniform(0.85, 1.15)
        lit = 1 + 0.18 * (-(sx + sy) / (np.sqrt(2) * r + 1e-6)).clip(-1, 1)
        if style == "domes":  # hemisphere, sun to the upper left at 40 degrees elevation
            nx, ny = (sx / (r + 1e-6)).clip(-1, 1), (sy / (r + 1e-6)).clip(-1, 1)
            nz = np.sqrt(np.clip(1 - nx * nx - ny * ny, 0, 1))
            ce, se = np.cos(np.radians(40)) / np.sqrt(2), np.sin(np.radians(40))
            lit = 0.3 + 1.1 * np.clip(-ce * nx - ce * ny + se * nz, 0, None)
        if style == "oaks":  # hemisphere, sun to the lower left at 50 degrees elevation
            nx, ny = (sx / (r + 1e-6)).clip(-1, 1), (sy / (r + 1e-6)).clip(-1, 1)
            nz = np.sqrt(np.clip(1 - nx * nx - ny * ny, 0, 1))
            ce, se = np.cos(np.radians(50)) / np.sqrt(2), np.sin(np.radians(50))
            lit = 0.25 + 1.1 * np.clip(-ce * nx + ce * ny + se * nz, 0, None)
        if style == "domes":  # leaf clumps and gaps at two scales
            fine = 1 + 0.3 * gen.standard_normal(sx.shape).astype(np.float32)
            coarse = ndimage.gaussian_filter(gen.standard_normal(sx.shape).astype(np.float32), 3.5)
            clump = ndimage.gaussian_filter(fine, 1.2) * (1 + 0.25 * np.clip(6 * coarse, -1.5, 1.5))
            clump = np.clip(clump, 0.3, 1.8)
        elif style == "oaks":  # leaf clumps a quarter of the crown radius across
            fine = ndimage.gaussian_filter(
                1 + 0.25 * gen.standard_normal(sx.shape).astype(np.float32), 1.0
            )
            broad = ndimage.gaussian_filter(
                gen.standard_normal(sx.shape).astype(np.float32), max(2.0, r / 4)
            )
            broad /= broad.std() + 1e-9
            clump = np.clip(fine * (1 + 0.4 * np.clip(broad, -2, 2)), 0.3, 1.8)
        elif style == "conifers":  # coarse needle texture: strong, fine-grained
            clump = 1 + 0.5 * gen.standard_normal(sx.shape).astype(np.float32)
            clump = np.clip(ndimage.gaussian_filter(clump, 0.7), 0.2, 2.0)
        else:
            clump = 1 + 0.12 * gen.standard_normal(sx.shape).astype(np.float32)
            clump = ndimage.gaussian_filter(clump, 1.0)
        shaded = col[:, None, None] * (lit * clump)[None]
        a = alpha[None]
        plant[:, y0:y1, x0:x1] = plant[:, y0:y1, x0:x1] * (1 - a) + shaded * a
        cover[y0:y1, x0:x1] = np.maximum(cover[y0:y1, x0:x1], alpha)
    ground = img * shade[None]
    out = ground * (1 - cover[None]) + plant * cover[None]
    out += gen.normal(0, 3.0, out.shape).astype(np.float32)
    if style == "jpeg":
        return _camera(out, gen), xy, d
    if style == "nir":
        # NIR: vegetation bright, soil medium; 12-bit-like range in uint16
        veg = cover * (1 + 0.1 * _noise(shape, gen, 2))
        nir = 900 + 300 * mott + 2200 * veg
        rgb = np.clip(out, 0, 255) * 12
        bands = np.stack([rgb[2], rgb[1], rgb[0], nir])
        bands += gen.normal(0, 20, bands.shape)
        return np.clip(bands, 0, 65535).astype(np.uint16), xy, d
    return np.clip(np.rint(out), 0, 255).astype(np.uint8), xy, d


def _camera(rgb: np.ndarray, gen) -> np.ndarray:
    """Square frames of 280 px with vignetting (quadratic fall-off, 35 % at the corners,
    a random exposure per frame) and a JPEG round trip at quality 45 (Pillow)."""
    import io

    from PIL import Image

    _b, h, w = rgb.shape
    frame = 280.0
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32) + gen.uniform(0, frame, 2)[:, None, None]
    fy, fx = np.floor(yy / frame), np.floor(xx / frame)
    dy, dx = yy / frame - fy - 0.5, xx / frame - fx - 0.5
    expo = 1 + 0.15 * np.sin(12.9898 * fy + 78.233 * fx)
    gain = (1 - 0.7 * (dy * dy + dx * dx)) * expo
    img = np.clip(np.rint(rgb * gain[None]), 0, 255).astype(np.uint8)
    buf = io.BytesIO()
    Image.fromarray(img.transpose(1, 2, 0)).save(buf, format="JPEG", quality=45)
    buf.seek(0)
    return np.asarray(Image.open(buf)).transpose(2, 0, 1).copy()


def write_tuning_scene(folder: Path, style: str, seed: int, size_px: int = 640):
    """Write a tuning scene as a GeoTIFF; returns (path, truth PointSet)."""
    from pyproj import CRS
    from rasterio.transform import from_origin

    from ecoscan.model.points import PointSet
    from ecoscan.synthetic import write_geotiff

    img, xy, d = make_tuning_scene(style, seed, size_px)
    ps = 3 * PIXEL_M if style == "coarse" else PIXEL_M
    x0, y0 = 500000.0, 4100000.0
    path = write_geotiff(
        Path(folder) / f"tune_{style}_{seed}.tif",
        img,
        from_origin(x0, y0, ps, ps),
        "EPSG:32631",
    )
    pts = PointSet(
        x0 + (xy[:, 0] + 0.5) * ps,
        y0 - (xy[:, 1] + 0.5) * ps,
        {"diameter_m": d * ps},
        CRS.from_user_input("EPSG:32631"),
    )
    return path, pts


def main(argv: list[str] | None = None) -> None:
    import argparse
    import tempfile

    from ecoscan.detect import DetectionSettings, detect_raster
    from ecoscan.stats.matching import match_points

    ap = argparse.ArgumentParser(description="default detector F1 on the tuning scenes")
    ap.add_argument("--styles", default=",".join(STYLES), help="comma-separated styles")
    ap.add_argument("--seeds", default=",".join(map(str, TUNING_SEEDS)))
    args = ap.parse_args(argv)
    seeds = [int(s) for s in args.seeds.split(",")]
    if not all(100 <= s <= 199 for s in seeds):
        ap.error("tuning seeds are 100-199")
    summary = []
    with tempfile.TemporaryDirectory() as tmp:
        for style in args.styles.split(","):
            f1s = []
            for seed in seeds:
                path, truth = write_tuning_scene(Path(tmp), style, seed)
                s = DetectionSettings(
                    diameter_min_m=DIAMETER_M[0],
                    diameter_max_m=DIAMETER_M[1],
                    bands="blue=1,green=2,red=3,nir=4" if style == "nir" else "",
                )
                res = detect_raster(path, s)
                m = match_points(res.points.xy, truth.xy, 0.3)
                f1s.append(2 * m.n_matched / (res.n + truth.n))
                layer = res.thresholds.get("layer", res.index)
                print(
                    f"{style:8} seed {seed}: F1 {f1s[-1]:.3f} (found {res.n}, truth {truth.n}, "
                    f"layer {layer}, raise {res.thresholds.get('threshold_raise', 1.0):.2f})",
                    flush=True,
                )
            print(f"{style:8} mean F1 {np.mean(f1s):.3f}", flush=True)
            summary.append(f"{style} {np.mean(f1s):.3f}")
    print("summary: " + ", ".join(summary))


if __name__ == "__main__":
    main()
