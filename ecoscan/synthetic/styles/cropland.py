"""Row crop: rosette plants on soil rows, straw mulch between rows, small weeds."""

from __future__ import annotations

import math

import numpy as np

from ecoscan.synthetic.compose import Recipe
from ecoscan.synthetic.crowns import Sun
from ecoscan.synthetic.noise import fbm, value_noise
from ecoscan.synthetic.scene import ScenePlan
from ecoscan.synthetic.styles._kit import crowns_from, mix_ground, varied_colours
from ecoscan.synthetic.styles.forest import planting_grid

RGB = ("red", "green", "blue")


def row_crop(size: int, seed: int) -> ScenePlan:
    """Rosette crop plants in rows (0.75 m apart, 0.5 m in the row, 8 % missing) on bare
    soil bands, straw mulch between the rows, and many small weeds (not in the truth).

    0.02 m pixels; crop plants 0.22–0.45 m; weeds 0.03–0.10 m, about 8 per m².
    """
    ps, dmin, dmax = 0.02, 0.22, 0.45
    gen = np.random.default_rng([seed, 301])
    tex = seed * 1000 + 301
    row_px, step_px = 0.75 / ps, 0.5 / ps
    angle = gen.uniform(-8, 8)
    c, r = planting_grid(
        gen,
        size,
        row_px=row_px,
        step_px=step_px,
        angle_deg=angle,
        jitter_px=0.03 / ps,
        gap=0.08,
        margin=dmin / 2 / ps,
    )
    phase = _row_phase(c, r, size, angle, row_px)
    d = gen.uniform(dmin, dmax, c.size) / ps
    kind = np.full(c.size, "crop")
    crowns = _crop_rosettes(gen, c, r, d)
    weeds = _weeds(gen, size, ps)
    recipe = Recipe(
        width=size,
        height=size,
        ground=_soil_and_mulch(size, ps, angle, row_px, phase, tex),
        ground_objects=(weeds,),
        crowns=(crowns,),
        casters=(crowns,),
        sun=Sun(200.0, 50.0),
        shadow_strength=(0.5, 0.46, 0.38),
        shadow_soft_px=1.5,
        texture_px=(1.5, 4.0),
        blur_px=0.5,
        noise_dn=(3.0, 3.0, 3.0),
        seed=tex,
    )
    return ScenePlan(
        recipe,
        ps,
        RGB,
        c,
        r,
        d,
        kind,
        (dmin, dmax),
        extras={"row_spacing_m": 0.75, "row_angle_deg": angle},
    )


def _row_phase(c: np.ndarray, r: np.ndarray, size: int, angle: float, row_px: float) -> float:
    """The rows' offset in pixels across the rows, recovered from the planted positions.

    The grid's rows pass through (size/2 + v·(−sin a, cos a)); the offset is the circular
    mean of v modulo the row spacing.
    """
    a = math.radians(angle)
    vv = -(c - size / 2) * math.sin(a) + (r - size / 2) * math.cos(a)
    ang = np.angle(np.mean(np.exp(2j * np.pi * vv / row_px))) if vv.size else 0.0
    return float(np.mod(ang, 2 * np.pi) * row_px / (2 * np.pi))


def _crop_rosettes(gen: np.random.Generator, c: np.ndarray, r: np.ndarray, d: np.ndarray):
    """The crop plants: green lobed rosettes at the planted positions."""
    return crowns_from(
        gen,
        c,
        r,
        d,
        varied_colours(gen, (72, 142, 52), c.size, bright=(0.85, 1.15)),
        k=(4, 5, 6, 7),
        amp=(0.08, 0.16),
        texture=(0.15, 0.25),
        height=(0.5, 0.8),
        ambient=0.45,
        dome=0.8,
    )


def _weeds(gen: np.random.Generator, size: int, ps: float):
    """Small flat weeds scattered anywhere, about 8 per m² (not in the truth)."""
    nw = round(8.0 * (size * ps) ** 2)
    return crowns_from(
        gen,
        gen.uniform(0, size - 1, nw),
        gen.uniform(0, size - 1, nw),
        gen.uniform(0.03, 0.10, nw) / ps,
        varied_colours(gen, (84, 130, 56), nw, bright=(0.8, 1.2), hue=0.08),
        k=(3, 4, 5),
        amp=(0.1, 0.25),
        texture=(0.05, 0.1),
        height=(0.0, 0.0),
        edge_px=0.8,
    )


def _soil_and_mulch(size: int, ps: float, angle: float, row_px: float, phase: float, tex: int):
    """The ground of rows ``r0:r1``: bare soil bands along the rows, straw mulch between."""
    a = math.radians(angle)

    def ground(r0: int, r1: int) -> np.ndarray:
        rows = np.arange(r0, r1, dtype=np.float64)[:, None] - size / 2
        cols = np.arange(size, dtype=np.float64)[None, :] - size / 2
        v = -cols * math.sin(a) + rows * math.cos(a)
        off = np.abs(np.mod(v - phase + row_px / 2, row_px) - row_px / 2)  # px from a row
        wobble = 0.04 / ps * value_noise((r0, r1), (0, size), 30.0, tex + 9)
        mulch_w = np.clip((off + wobble - 0.2 / ps) / 2.0, 0, 1).astype(np.float32)
        soil = mix_ground(
            (r0, r1), size, [(112, 92, 72), (96, 78, 60)], patch_px=80.0, seed=tex, mottle=0.1
        )
        straw = mix_ground(
            (r0, r1),
            size,
            [(176, 160, 112), (150, 132, 90)],
            patch_px=25.0,
            seed=tex + 1,
            mottle=0.12,
            grain=0.15,
        )
        fibres = fbm((r0, r1), (0, size), (2.0, 1.0), (0.6, 0.4), tex + 2)
        straw *= (1.0 + 0.12 * fibres)[None]
        return soil * (1 - mulch_w[None]) + straw * mulch_w[None]

    return ground
