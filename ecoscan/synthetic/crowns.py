"""Lobed crowns and other objects drawn into a strip: outline, shading, texture, shadow.

A :class:`Stamps` record holds every object of one kind (crowns, weeds, rocks) as arrays
decided up front from the scene seed. Drawing a strip only reads those arrays and the
position-hashed texture of :mod:`ecoscan.synthetic.noise`, so any strip of the scene is
the same whether rendered alone or as part of the whole.

Outline: in polar coordinates about the centre, the edge lies at
``r(θ) = R · (1 + Σ_k a_k cos(k θ + φ_k))`` with a few harmonics, roughened by fine noise;
``R`` is the nominal radius, so the truth diameter ``2R`` is the diameter of the circle
whose radius is the mean outline radius. The edge is soft (an alpha ramp about one pixel
wide). Shading treats the crown as a dome lit from the sun's direction (Lambert), with an
ambient part. The cast shadow is the outline moved away from the sun by the object's
height over the tangent of the sun elevation and stretched along that direction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ecoscan.synthetic.noise import value_noise

__all__ = ["Stamps", "Sun", "cast_shadows", "draw_stamps", "place_separated"]


@dataclass(frozen=True)
class Sun:
    """Sun position: ``azimuth_deg`` clockwise from north (map up), ``elevation_deg``."""

    azimuth_deg: float = 135.0
    elevation_deg: float = 40.0

    @property
    def to_sun(self) -> np.ndarray:
        """Unit vector towards the sun in (column, row, up) image coordinates."""
        a, e = math.radians(self.azimuth_deg), math.radians(self.elevation_deg)
        return np.array([math.cos(e) * math.sin(a), -math.cos(e) * math.cos(a), math.sin(e)])

    @property
    def shadow_dir(self) -> np.ndarray:
        """Unit (column, row) direction in which shadows fall (away from the sun)."""
        v = -self.to_sun[:2]
        return v / np.hypot(*v)


@dataclass(frozen=True, eq=False)
class Stamps:
    """Objects of one kind, as arrays (pixels, image coordinates).

    Attributes
    ----------
    col, row : numpy.ndarray, shape (n,)
        Centres; pixel centres at integer positions.
    radius : numpy.ndarray, shape (n,)
        Nominal radius R in pixels.
    lobe_k : numpy.ndarray of int, shape (K,)
        Harmonic numbers of the outline.
    lobe_a, lobe_phi : numpy.ndarray, shape (n, K)
        Harmonic amplitudes (fractions of R) and phases.
    colour : numpy.ndarray, shape (n, bands)
        Lit colour of each object (band values in the style's working unit).
    texture : numpy.ndarray, shape (n,)
        Relative amplitude of the internal texture (leaf clumps, gaps).
    height : numpy.ndarray, shape (n,)
        Height in pixels, for the cast shadow (0: no shadow).
    ambient : float
        Share of light on the shaded side (0–1).
    edge_px : float
        Width of the soft edge in pixels.
    ragged : float
        Relative roughness of the outline.
    dome : float
        How strongly the surface is curved for shading (0 flat, 1 hemisphere).
    radial : float
        Strength of radial branch stripes (conifers).
    """

    col: np.ndarray
    row: np.ndarray
    radius: np.ndarray
    lobe_k: np.ndarray
    lobe_a: np.ndarray
    lobe_phi: np.ndarray
    colour: np.ndarray
    texture: np.ndarray
    height: np.ndarray
    ambient: float = 0.45
    edge_px: float = 1.0
    ragged: float = 0.08
    dome: float = 1.0
    radial: float = 0.0

    @property
    def n(self) -> int:
        """Number of objects."""
        return int(self.col.size)

    @property
    def reach(self) -> np.ndarray:
        """Largest distance from the centre that the outline can reach, pixels."""
        return self.radius * (1.0 + np.abs(self.lobe_a).sum(axis=1) + self.ragged) + self.edge_px


def lobes(
    gen: np.random.Generator, n: int, k: tuple[int, ...], amp: tuple[float, float]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Random outline harmonics: amplitudes uniform in ``amp`` divided by sqrt(k).

    Returns
    -------
    lobe_k, lobe_a, lobe_phi
    """
    kk = np.asarray(k, dtype=np.int64)
    a = gen.uniform(amp[0], amp[1], (n, kk.size)) / np.sqrt(kk / kk.min())[None, :]
    phi = gen.uniform(0.0, 2.0 * np.pi, (n, kk.size))
    return kk, a, phi


def place_separated(
    width: int,
    height: int,
    radius: np.ndarray,
    gen: np.random.Generator,
    *,
    overlap: float = 1.0,
    visible: float = 0.0,
    margin: float = 0.0,
    existing: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
    tries: int = 30,
) -> np.ndarray:
    """Place objects of the given radii at random, keeping them apart; returns kept indices.

    Objects are tried largest first. Object j is kept when, for every object i already
    kept, the centre distance is at least ``overlap · (r_i + r_j)`` and at least
    ``max(r_i, r_j) + visible · min(r_i, r_j)`` (so a centre is never covered by another
    crown's nominal circle when ``visible > 0``).

    Parameters
    ----------
    width, height : int
        Raster size in pixels.
    radius : numpy.ndarray
        Wanted radii (pixels); objects that find no room are dropped.
    gen : numpy.random.Generator
        Random stream.
    overlap : float
        1 = crowns may touch, below 1 = overlap allowed.
    visible : float
        See above.
    margin : float
        Keep centres this far inside the raster.
    existing : (col, row, radius), optional
        Objects already placed that the new ones must respect.
    tries : int
        Positions tried per object.

    Returns
    -------
    col, row : numpy.ndarray
        Centres of the kept objects, in the order of the returned ``keep`` indices.
    keep : numpy.ndarray of int
        Indices into ``radius`` of the kept objects.

    Examples
    --------
    >>> import numpy as np
    >>> c, r, keep = place_separated(200, 200, np.full(50, 8.0), np.random.default_rng(0))
    >>> d = np.hypot(c[:, None] - c[None], r[:, None] - r[None]) + np.eye(c.size) * 99
    >>> bool(d.min() >= 16.0)
    True
    """
    order = np.argsort(-radius, kind="stable")
    n = radius.size
    cand_c = gen.uniform(margin, width - 1 - margin, (n, tries))
    cand_r = gen.uniform(margin, height - 1 - margin, (n, tries))
    cell = max(2.0 * float(radius.max(initial=1.0)), 4.0)
    grid: dict[tuple[int, int], list[int]] = {}
    pc: list[float] = []
    pr: list[float] = []
    prad: list[float] = []
    if existing is not None:
        for c, r, rr in zip(*existing, strict=True):
            grid.setdefault((int(c // cell), int(r // cell)), []).append(len(pc))
            pc.append(float(c))
            pr.append(float(r))
            prad.append(float(rr))
        cell_reach = max(cell, 2.0 * max(prad, default=0.0))
    else:
        cell_reach = cell
    span = math.ceil(cell_reach / cell)
    keep: list[int] = []
    out_c: list[float] = []
    out_r: list[float] = []
    for j in order:
        rj = float(radius[j])
        for t in range(tries):
            c, r = float(cand_c[j, t]), float(cand_r[j, t])
            gi, gj = int(c // cell), int(r // cell)
            near = [
                q
                for a in range(gi - span, gi + span + 1)
                for b in range(gj - span, gj + span + 1)
                for q in grid.get((a, b), ())
            ]
            if near:
                qc = np.take(pc, near)
                qr = np.take(pr, near)
                qrad = np.take(prad, near)
                d = np.hypot(qc - c, qr - r)
                need = np.maximum(
                    overlap * (qrad + rj), np.maximum(qrad, rj) + visible * np.minimum(qrad, rj)
                )
                if np.any(d < need):
                    continue
            grid.setdefault((gi, gj), []).append(len(pc))
            pc.append(c)
            pr.append(r)
            prad.append(rj)
            keep.append(int(j))
            out_c.append(c)
            out_r.append(r)
            break
    return np.array(out_c), np.array(out_r), np.array(keep, dtype=np.int64)


def _rows_hit(st: Stamps, r0: int, r1: int, shift: np.ndarray | None = None) -> np.ndarray:
    reach = st.reach
    row = st.row if shift is None else st.row + shift
    return np.flatnonzero((row + reach + 2 >= r0) & (row - reach - 2 < r1))


def _outline(st: Stamps, i: int, dx: np.ndarray, dy: np.ndarray, rough: np.ndarray) -> tuple:
    theta = np.arctan2(dy, dx)
    k = st.lobe_k[:, None, None]
    wave = (st.lobe_a[i][:, None, None] * np.cos(k * theta + st.lobe_phi[i][:, None, None])).sum(0)
    edge = st.radius[i] * (1.0 + wave + st.ragged * rough)
    return theta, edge


def cast_shadows(
    shade: np.ndarray,
    st: Stamps,
    r0: int,
    sun: Sun,
    seed: int,
    *,
    soft_px: float = 1.5,
) -> None:
    """Accumulate (maximum) the cast shadows of ``st`` into ``shade`` (values 0–1), in place.

    Parameters
    ----------
    shade : numpy.ndarray, shape (rows, columns)
        Shadow field of the strip starting at image row ``r0``.
    st : Stamps
        Objects casting shadows (those with ``height > 0``).
    r0 : int
        Image row of the strip's first row.
    sun : Sun
        Sun position.
    seed : int
        Stream number for the roughness of the shadow edge.
    soft_px : float
        Width of the penumbra in pixels.

    Examples
    --------
    >>> import numpy as np
    >>> one = Stamps(np.array([20.0]), np.array([20.0]), np.array([5.0]), np.array([2]),
    ...              np.zeros((1, 1)), np.zeros((1, 1)), np.ones((1, 3)), np.zeros(1),
    ...              np.array([5.0]))
    >>> shade = np.zeros((60, 60), np.float32)
    >>> cast_shadows(shade, one, 0, Sun(90.0, 45.0), seed=1)  # sun in the east
    >>> bool(shade[20, 14] > 0.5 and shade[20, 26] == 0)      # shadow to the west
    True
    """
    h, w = shade.shape
    ux, uy = sun.shadow_dir
    length = st.height / math.tan(math.radians(sun.elevation_deg))
    # the shadow of a crown of height H spans from its foot to H / tan(elevation) away
    sc = st.col + ux * length / 2.0
    sr = st.row + uy * length / 2.0
    stretch = 1.0 + length / (2.0 * np.maximum(st.radius, 0.5))
    reach = st.reach * stretch + soft_px + 1
    hit = np.flatnonzero((st.height > 0) & (sr + reach >= r0) & (sr - reach < r0 + h))
    for i in hit:
        x0, x1 = max(0, int(sc[i] - reach[i])), min(w, int(sc[i] + reach[i]) + 2)
        y0, y1 = max(r0, int(sr[i] - reach[i])), min(r0 + h, int(sr[i] + reach[i]) + 2)
        if x0 >= x1 or y0 >= y1:
            continue
        yy = np.arange(y0, y1, dtype=np.float32)[:, None] - np.float32(sr[i])
        xx = np.arange(x0, x1, dtype=np.float32)[None, :] - np.float32(sc[i])
        along = xx * ux + yy * uy
        across = -xx * uy + yy * ux
        along = along / np.float32(stretch[i])
        dx = along * ux - across * uy
        dy = along * uy + across * ux
        rough = value_noise((y0, y1), (x0, x1), max(1.5, st.radius[i] / 5.0), seed)
        _theta, edge = _outline(st, i, dx, dy, rough)
        d = np.hypot(dx, dy)
        a = np.clip((edge - d) / np.float32(soft_px) + 0.5, 0.0, 1.0)
        np.maximum(shade[y0 - r0 : y1 - r0, x0:x1], a, out=shade[y0 - r0 : y1 - r0, x0:x1])


def draw_stamps(
    img: np.ndarray,
    st: Stamps,
    r0: int,
    sun: Sun,
    seed: int,
    *,
    texture_px: tuple[float, float] = (2.5, 7.0),
    shade: np.ndarray | None = None,
    shade_strength: float = 0.0,
    cover: np.ndarray | None = None,
) -> None:
    """Paint objects into a strip (in place), smallest first so larger crowns lie on top.

    Parameters
    ----------
    img : numpy.ndarray, shape (bands, rows, columns)
        float32 strip starting at image row ``r0``.
    st : Stamps
        Objects to paint.
    r0 : int
        Image row of the strip's first row.
    sun : Sun
        Sun position for the dome shading.
    seed : int
        Stream number for texture and edge roughness.
    texture_px : (float, float)
        Feature sizes (pixels) of the fine and coarse internal texture.
    shade : numpy.ndarray, optional
        Cast-shadow field of the strip; darkens the objects by ``shade_strength``.
    shade_strength : float
        Darkening of objects inside cast shadows (0–1).
    cover : numpy.ndarray, optional
        Strip-sized float32 array receiving the maximum alpha of painted objects.

    Examples
    --------
    >>> import numpy as np
    >>> one = Stamps(np.array([20.0]), np.array([20.0]), np.array([6.0]), np.array([2]),
    ...              np.zeros((1, 1)), np.zeros((1, 1)), np.array([[50.0, 120.0, 40.0]]),
    ...              np.zeros(1), np.zeros(1))
    >>> img = np.full((3, 40, 40), 150.0, np.float32)
    >>> draw_stamps(img, one, 0, Sun(), seed=2)
    >>> bool(img[1, 20, 20] < 150 and img[0, 20, 20] < 70 and img[0, 2, 2] == 150)
    True
    """
    _b, h, w = img.shape
    hit = _rows_hit(st, r0, r0 + h)
    hit = hit[np.argsort(st.radius[hit], kind="stable")]
    reach = st.reach
    s = sun.to_sun.astype(np.float32)
    for i in hit:
        cx, cy, rr = st.col[i], st.row[i], reach[i]
        x0, x1 = max(0, int(cx - rr)), min(w, int(cx + rr) + 2)
        y0, y1 = max(r0, int(cy - rr)), min(r0 + h, int(cy + rr) + 2)
        if x0 >= x1 or y0 >= y1:
            continue
        dy = np.arange(y0, y1, dtype=np.float32)[:, None] - np.float32(cy)
        dx = np.arange(x0, x1, dtype=np.float32)[None, :] - np.float32(cx)
        rad = float(st.radius[i])
        rough = value_noise((y0, y1), (x0, x1), max(1.5, rad / 5.0), seed)
        theta, edge = _outline(st, i, dx, dy, rough)
        d = np.hypot(dx, dy)
        alpha = np.clip((edge - d) / np.float32(st.edge_px) + 0.5, 0.0, 1.0)
        if not alpha.any():
            continue
        rho = np.clip(d / np.maximum(edge, 0.5), 0.0, 1.0)
        z = np.sqrt(1.0 - rho * rho) + np.float32(1.0 - st.dome)
        nx = np.where(d > 0, dx / np.maximum(d, 1e-6), 0) * rho
        ny = np.where(d > 0, dy / np.maximum(d, 1e-6), 0) * rho
        lam = (nx * s[0] + ny * s[1] + z * s[2]) / np.sqrt(nx * nx + ny * ny + z * z)
        light = st.ambient + (1.0 - st.ambient) * np.clip(lam, 0.0, 1.0) / max(float(s[2]), 0.3)
        fine = value_noise((y0, y1), (x0, x1), texture_px[0], seed + 1)
        coarse = value_noise((y0, y1), (x0, x1), max(texture_px[1], rad / 2.5), seed + 2)
        tex = 1.0 + st.texture[i] * (1.4 * fine + 1.0 * coarse)
        if st.radial > 0:
            nb = int(st.lobe_k.max()) + 2
            tex = tex * (1.0 + st.radial * np.cos(nb * theta + st.lobe_phi[i, 0]) * rho)
        # gaps between leaf clumps towards the edge
        tex = tex * (1.0 - 0.25 * st.texture[i] * rho**2)
        val = np.clip(light * tex, 0.05, 3.0)
        if shade is not None and shade_strength > 0:
            val = val * (1.0 - shade_strength * shade[y0 - r0 : y1 - r0, x0:x1])
        patch = img[:, y0 - r0 : y1 - r0, x0:x1]
        col = st.colour[i].astype(np.float32)[:, None, None]
        patch *= 1.0 - alpha[None]
        patch += col * (val * alpha)[None]
        if cover is not None:
            np.maximum(cover[y0 - r0 : y1 - r0, x0:x1], alpha, out=cover[y0 - r0 : y1 - r0, x0:x1])
