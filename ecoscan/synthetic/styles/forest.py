"""Tree styles: planted conifers on pasture; closed canopy of touching, overlapping crowns."""

from __future__ import annotations

import math

import numpy as np

from ecoscan.synthetic.compose import Recipe
from ecoscan.synthetic.crowns import Sun
from ecoscan.synthetic.scene import ScenePlan
from ecoscan.synthetic.styles._kit import crowns_from, mix_ground, scatter, varied_colours

RGB = ("red", "green", "blue")


def planting_grid(
    gen: np.random.Generator,
    size: int,
    *,
    row_px: float,
    step_px: float,
    angle_deg: float,
    jitter_px: float,
    gap: float,
    margin: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Planting positions on rotated rows, jittered, with a share ``gap`` missing.

    Returns
    -------
    col, row : numpy.ndarray
        Positions inside the raster (at least ``margin`` from the edge).
    """
    half = size * 0.75
    a = math.radians(angle_deg)
    u = np.arange(-half, half, step_px) + gen.uniform(0, step_px)
    v = np.arange(-half, half, row_px) + gen.uniform(0, row_px)
    uu, vv = np.meshgrid(u, v)
    uu = uu + gen.uniform(-0.3, 0.3, (v.size, 1)) * step_px  # rows start at different places
    col = size / 2 + uu * math.cos(a) - vv * math.sin(a)
    row = size / 2 + uu * math.sin(a) + vv * math.cos(a)
    col = col.ravel() + gen.normal(0, jitter_px, uu.size)
    row = row.ravel() + gen.normal(0, jitter_px, uu.size)
    keep = gen.uniform(size=col.size) >= gap
    keep &= (col >= margin) & (col <= size - 1 - margin) & (row >= margin)
    keep &= row <= size - 1 - margin
    return col[keep], row[keep]


def conifer_pasture(size: int, seed: int) -> ScenePlan:
    """Dark, star-shaped conifers on green pasture: planted rows with gaps, plus natural
    regeneration between them.

    0.08 m pixels; planted trees 1.8–3.4 m on rows 4.5 m apart at 3.6 m, 15 % missing;
    regeneration 0.7–1.4 m. Crown and pasture have about the same Excess Green: the trees
    differ by darkness, texture and long shadows.
    """
    ps, dmin, dmax = 0.08, 0.7, 3.4
    gen = np.random.default_rng([seed, 201])
    tex = seed * 1000 + 201
    pc, pr = planting_grid(
        gen,
        size,
        row_px=4.5 / ps,
        step_px=3.6 / ps,
        angle_deg=gen.uniform(-12, 12),
        jitter_px=0.2 / ps,
        gap=0.15,
        margin=dmin / 2 / ps,
    )
    pd = gen.uniform(1.8, 3.4, pc.size) / ps
    rc, rr, rd = scatter(
        gen, size, 120 / 1e4 * ps**2, (dmin / ps, 1.4 / ps), existing=(pc, pr, pd / 2)
    )
    c, r, d = np.concatenate([pc, rc]), np.concatenate([pr, rr]), np.concatenate([pd, rd])
    kind = np.array(["planted"] * pc.size + ["regeneration"] * rc.size)
    colour = varied_colours(gen, (36, 60, 40), c.size, bright=(0.8, 1.2), hue=0.06)
    crowns = crowns_from(
        gen,
        c,
        r,
        d,
        colour,
        k=(5, 7, 9, 11),
        amp=(0.06, 0.14),
        texture=(0.3, 0.45),
        height=(1.4, 2.0),
        ambient=0.3,
        ragged=0.12,
        radial=0.35,
    )

    def ground(r0: int, r1: int) -> np.ndarray:
        grass = [(104, 138, 70), (124, 150, 84), (150, 148, 98), (88, 120, 60)]
        return mix_ground((r0, r1), size, grass, patch_px=150.0, seed=tex, mottle=0.12, grain=0.12)

    recipe = Recipe(
        width=size,
        height=size,
        ground=ground,
        crowns=(crowns,),
        casters=(crowns,),
        sun=Sun(160.0, 42.0),
        shadow_strength=(0.6, 0.55, 0.45),
        shadow_soft_px=1.5,
        texture_px=(2.0, 5.0),
        blur_px=0.5,
        noise_dn=(3.0, 3.0, 3.0),
        seed=tex,
    )
    return ScenePlan(recipe, ps, RGB, c, r, d, kind, (dmin, dmax))


def closed_canopy(size: int, seed: int) -> ScenePlan:
    """Closed broadleaf canopy: crowns of 2–7 m of three species touching and overlapping.

    0.1 m pixels. Crowns may overlap: centre distance at least 0.72 of the sum of the
    radii and at least the larger radius plus 0.45 of the smaller, so every centre lies
    outside the other crowns' nominal circles. Dark understorey in the few gaps.
    """
    ps, dmin, dmax = 0.1, 2.0, 7.0
    gen = np.random.default_rng([seed, 202])
    tex = seed * 1000 + 202
    lo, hi = dmin / ps, dmax / ps
    mean_area = math.pi / 4 * (hi**2 - lo**2) / (2 * math.log(hi / lo))
    c, r, d = scatter(gen, size, 1.6 / mean_area, (lo, hi), overlap=0.72, visible=0.45, tries=40)
    species = gen.integers(0, 3, c.size)
    names = np.array(["light", "dark", "yellow"])
    bases = [(62, 108, 46), (40, 74, 38), (92, 122, 48)]
    colour = np.empty((c.size, 3))
    for s, base in enumerate(bases):
        m = species == s
        colour[m] = varied_colours(gen, base, int(m.sum()), bright=(0.85, 1.15))
    crowns = crowns_from(
        gen,
        c,
        r,
        d,
        colour,
        k=(2, 3, 4, 6),
        amp=(0.015, 0.04),
        texture=(0.25, 0.4),
        height=(1.0, 2.0),
        ambient=0.35,
        ragged=0.06,
    )

    def ground(r0: int, r1: int) -> np.ndarray:
        under = [(34, 46, 30), (48, 60, 36), (60, 56, 44)]
        return mix_ground((r0, r1), size, under, patch_px=60.0, seed=tex, mottle=0.15)

    recipe = Recipe(
        width=size,
        height=size,
        ground=ground,
        crowns=(crowns,),
        casters=(crowns,),
        sun=Sun(140.0, 45.0),
        shadow_strength=(0.55, 0.5, 0.42),
        shadow_soft_px=2.0,
        texture_px=(2.5, 8.0),
        blur_px=0.5,
        noise_dn=(3.0, 3.0, 3.0),
        seed=tex,
    )
    return ScenePlan(recipe, ps, RGB, c, r, d, names[species], (dmin, dmax))
