"""Sensor styles: four-band multispectral, JPEG with vignetting, coarse pixels."""

from __future__ import annotations

import math

import numpy as np

from ecoscan.synthetic.compose import Recipe
from ecoscan.synthetic.crowns import Sun
from ecoscan.synthetic.noise import fbm, hash01
from ecoscan.synthetic.scene import ScenePlan
from ecoscan.synthetic.styles._kit import crowns_from, mix_ground, scatter, varied_colours

RGB = ("red", "green", "blue")
MS = ("blue", "green", "red", "nir")

#: Multispectral digital numbers: DN = dark offset + gain · reflectance (invented camera).
MS_DARK, MS_GAIN = 800.0, 30000.0


def multispectral(size: int, seed: int) -> ScenePlan:
    """Four-band uint16 (blue, green, red, near infrared) shrubland with an illumination
    gradient across the scene and a soft-edged cloud shadow.

    0.08 m pixels; crowns 0.8–2.4 m (about 900 per hectare), three quarters green and a
    quarter stressed (less near-infrared). DN = 800 + 30000 · reflectance.
    """
    ps, dmin, dmax = 0.08, 0.8, 2.4
    gen = np.random.default_rng([seed, 401])
    tex = seed * 1000 + 401
    c, r, d = scatter(gen, size, 900 / 1e4 * ps**2, (dmin / ps, dmax / ps), overlap=0.92)
    kind = np.where(gen.uniform(size=c.size) < 0.75, "green", "stressed")
    refl = {"green": (0.035, 0.075, 0.045, 0.40), "stressed": (0.05, 0.09, 0.08, 0.30)}
    colour = np.empty((c.size, 4))
    for k, base in refl.items():
        m = kind == k
        colour[m] = varied_colours(gen, tuple(MS_GAIN * np.array(base)), int(m.sum()))
    crowns = crowns_from(gen, c, r, d, colour, ambient=0.4)
    grad_dir = gen.uniform(0, 2 * np.pi)
    cloud = {
        "col": gen.uniform(0.3, 0.7) * size,
        "row": gen.uniform(0.3, 0.7) * size,
        "radius": gen.uniform(0.18, 0.26) * size,
        "soft": 0.05 * size,
    }

    def ground(r0: int, r1: int) -> np.ndarray:
        mats = [(0.09, 0.125, 0.16, 0.25), (0.12, 0.15, 0.19, 0.27), (0.07, 0.10, 0.12, 0.30)]
        return mix_ground(
            (r0, r1),
            size,
            [tuple(MS_GAIN * np.array(m)) for m in mats],
            patch_px=120.0,
            seed=tex,
            mottle=0.1,
        )

    def light(img: np.ndarray, r0: int) -> None:
        rows = np.arange(r0, r0 + img.shape[1], dtype=np.float32)[:, None] / size - 0.5
        cols = np.arange(size, dtype=np.float32)[None, :] / size - 0.5
        g = 0.95 + 0.4 * (cols * math.cos(grad_dir) + rows * math.sin(grad_dir))
        rr, cc = rows * size - (cloud["row"] - size / 2), cols * size - (cloud["col"] - size / 2)
        dist = np.hypot(rr, cc)
        edge = cloud["radius"] * (
            1
            + 0.25
            * fbm(
                (r0, r0 + img.shape[1]), (0, size), (size / 6.0, size / 20.0), (0.7, 0.3), tex + 3
            )
        )
        inside = np.clip((edge - dist) / cloud["soft"] + 0.5, 0, 1)
        # diffuse skylight is bluer: blue loses least in the cloud shadow
        keep = np.array([0.6, 0.55, 0.5, 0.45], np.float32)[:, None, None]
        img *= (g * 1.0)[None] * (1.0 - (1.0 - keep) * inside[None])
        img += np.float32(MS_DARK)

    recipe = Recipe(
        width=size,
        height=size,
        ground=ground,
        crowns=(crowns,),
        casters=(crowns,),
        sun=Sun(150.0, 45.0),
        shadow_strength=(0.5, 0.55, 0.6, 0.68),
        shadow_soft_px=1.2,
        texture_px=(2.0, 5.0),
        effects=(light,),
        blur_px=0.6,
        noise_dn=(60.0, 60.0, 60.0, 80.0),
        dtype="uint16",
        seed=tex,
    )
    return ScenePlan(
        recipe,
        ps,
        MS,
        c,
        r,
        d,
        kind,
        (dmin, dmax),
        bands_option="blue=1,green=2,red=3,nir=4",
        extras={"cloud": cloud},
    )


def jpeg_vignette(size: int, seed: int) -> ScenePlan:
    """An 8-bit orthomosaic saved through JPEG (quality 55, 4:2:0 chroma), with the
    vignetting and exposure steps of the camera frames it was stitched from.

    0.04 m pixels; shrubs 0.5–1.6 m (about 1500 per hectare) on soil with grass patches;
    frames about 17 m square, corners up to 30 % darker, ±6 % exposure between frames.
    """
    ps, dmin, dmax = 0.04, 0.5, 1.6
    gen = np.random.default_rng([seed, 402])
    tex = seed * 1000 + 402
    c, r, d = scatter(gen, size, 1500 / 1e4 * ps**2, (dmin / ps, dmax / ps), overlap=0.92)
    kind = np.where(gen.uniform(size=c.size) < 0.6, "green", "yellow-green")
    colour = np.where(
        (kind == "green")[:, None],
        varied_colours(gen, (58, 112, 44), c.size),
        varied_colours(gen, (108, 128, 56), c.size),
    )
    crowns = crowns_from(gen, c, r, d, colour, ambient=0.42)
    frame = 420.0
    f_off = gen.uniform(0, frame, 2)

    def ground(r0: int, r1: int) -> np.ndarray:
        mats = [(170, 140, 106), (140, 140, 90), (150, 118, 90)]
        return mix_ground((r0, r1), size, mats, patch_px=110.0, seed=tex, mottle=0.1)

    def vignette(img: np.ndarray, r0: int) -> None:
        rows = np.arange(r0, r0 + img.shape[1], dtype=np.float64)[:, None] + f_off[0]
        cols = np.arange(size, dtype=np.float64)[None, :] + f_off[1]
        fr, fc = np.floor(rows / frame), np.floor(cols / frame)
        dr = (rows - (fr + 0.5) * frame) / (0.5 * frame)
        dc = (cols - (fc + 0.5) * frame) / (0.5 * frame)
        # cos^4-like fall-off towards the frame corners (about 30 % at the corner)
        v = 1.0 - 0.15 * (dr * dr + dc * dc)
        expo = 1.0 + 0.12 * (hash01(fr.astype(np.int64), fc.astype(np.int64), tex) - 0.5)
        img *= (v * expo).astype(np.float32)[None]

    recipe = Recipe(
        width=size,
        height=size,
        ground=ground,
        crowns=(crowns,),
        casters=(crowns,),
        sun=Sun(110.0, 40.0),
        shadow_strength=(0.55, 0.5, 0.42),
        shadow_soft_px=1.5,
        effects=(vignette,),
        blur_px=0.7,
        noise_dn=(3.0, 3.0, 3.0),
        jpeg_quality=55,
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
        extras={"jpeg_quality": 55, "frame_px": frame, "frame_offset_px": tuple(f_off)},
    )


def coarse(size: int, seed: int) -> ScenePlan:
    """Coarse imagery (0.25 m pixels) of savanna trees 1–4 m across, so the smallest
    crowns are about 4 pixels wide; dry grass and soil, optical blur.
    """
    ps, dmin, dmax = 0.25, 1.0, 4.0
    gen = np.random.default_rng([seed, 403])
    tex = seed * 1000 + 403
    c, r, d = scatter(gen, size, 160 / 1e4 * ps**2, (dmin / ps, dmax / ps), overlap=0.95)
    kind = np.where(gen.uniform(size=c.size) < 0.6, "dark", "light")
    colour = np.where(
        (kind == "dark")[:, None],
        varied_colours(gen, (58, 84, 44), c.size),
        varied_colours(gen, (84, 104, 56), c.size),
    )
    crowns = crowns_from(gen, c, r, d, colour, ambient=0.4, height=(1.2, 2.0), edge_px=0.8)

    def ground(r0: int, r1: int) -> np.ndarray:
        mats = [(156, 144, 100), (172, 142, 110), (124, 130, 82)]
        return mix_ground(
            (r0, r1), size, mats, patch_px=60.0, seed=tex, mottle=0.08, scales=(30.0, 8.0, 2.0, 1.0)
        )

    recipe = Recipe(
        width=size,
        height=size,
        ground=ground,
        crowns=(crowns,),
        casters=(crowns,),
        sun=Sun(120.0, 50.0),
        shadow_strength=(0.5, 0.46, 0.38),
        shadow_soft_px=1.0,
        texture_px=(1.2, 2.5),
        blur_px=0.6,
        noise_dn=(2.5, 2.5, 2.5),
        seed=tex,
    )
    return ScenePlan(recipe, ps, RGB, c, r, d, kind, (dmin, dmax))
