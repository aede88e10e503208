"""Rangeland styles: mixed green and dry shrubs; rocky shrubland with tracks and litter."""

from __future__ import annotations

import numpy as np

from ecoscan.synthetic.compose import Recipe
from ecoscan.synthetic.crowns import Stamps, Sun, lobes
from ecoscan.synthetic.noise import value_noise
from ecoscan.synthetic.scene import ScenePlan
from ecoscan.synthetic.styles._kit import crowns_from, mix_ground, scatter, varied_colours

RGB = ("red", "green", "blue")


def dry_shrubs(size: int, seed: int) -> ScenePlan:
    """Green, dry (senescent, olive-yellow) and grey shrubs on mottled soil, cast shadows.

    0.05 m pixels; crowns 0.6–2.0 m, about 1300 per hectare (15 % cover); half green, 30 %
    dry, 20 % grey; small dark weed specks (0.1–0.25 m, not plants of the truth).
    """
    ps, dmin, dmax = 0.05, 0.6, 2.0
    gen = np.random.default_rng([seed, 101])
    tex = seed * 1000 + 101
    c, r, d = scatter(gen, size, 1300 / 1e4 * ps**2, (dmin / ps, dmax / ps), overlap=0.92)
    u = gen.uniform(size=c.size)
    kind = np.where(u < 0.5, "green", np.where(u < 0.8, "dry", "grey"))
    palette = {"green": (62, 108, 46), "dry": (152, 140, 96), "grey": (128, 132, 116)}
    colour = np.empty((c.size, 3))
    for k, base in palette.items():
        m = kind == k
        colour[m] = varied_colours(gen, base, int(m.sum()), bright=(0.8, 1.15))
    crowns = crowns_from(gen, c, r, d, colour, ambient=0.45)
    # weed specks: small dark plants below the stated diameter range (not in the truth)
    nw = round(600 / 1e4 * (size * ps) ** 2)
    wd = gen.uniform(0.1, 0.25, nw) / ps
    weeds = crowns_from(
        gen,
        gen.uniform(0, size - 1, nw),
        gen.uniform(0, size - 1, nw),
        wd,
        varied_colours(gen, (46, 70, 36), nw, bright=(0.8, 1.2)),
        height=(0.0, 0.0),
        texture=(0.1, 0.2),
    )

    def ground(r0: int, r1: int) -> np.ndarray:
        soils = [(178, 148, 112), (150, 116, 88), (198, 174, 138)]
        return mix_ground((r0, r1), size, soils, patch_px=140.0, seed=tex, mottle=0.1)

    recipe = Recipe(
        width=size,
        height=size,
        ground=ground,
        ground_objects=(weeds,),
        crowns=(crowns,),
        casters=(crowns,),
        sun=Sun(135.0, 45.0),
        shadow_strength=(0.58, 0.54, 0.45),
        shadow_soft_px=1.2,
        blur_px=0.5,
        noise_dn=(3.0, 3.0, 3.0),
        seed=tex,
    )
    return ScenePlan(recipe, ps, RGB, c, r, d, kind, (dmin, dmax))


def _track_rows(cols: np.ndarray, size: int, p: dict) -> np.ndarray:
    """Centre line of the vehicle track (row for each column), a gentle wave."""
    wave = np.sin(2 * np.pi * cols / p["wave"] + p["phase"])
    return p["row0"] + p["slope"] * cols + p["amp"] * wave


def rocky_shrubland(size: int, seed: int) -> ScenePlan:
    """Olive shrubs with hard shadows among dark rocks, litter and a two-rut vehicle track.

    0.05 m pixels; shrubs 0.5–1.8 m (about 1300 per hectare); rocks 0.3–1.4 m, litter
    specks and tyre ruts are dark but not plants.
    """
    ps, dmin, dmax = 0.05, 0.5, 1.8
    gen = np.random.default_rng([seed, 102])
    tex = seed * 1000 + 102
    track = {
        "row0": gen.uniform(0.25, 0.75) * size,
        "slope": gen.uniform(-0.25, 0.25),
        "amp": gen.uniform(0.5, 1.5) / ps,
        "wave": gen.uniform(15, 30) / ps,
        "phase": gen.uniform(0, 2 * np.pi),
        "gauge_px": 1.7 / ps,
        "rut_px": 0.35 / ps,
    }
    c, r, d = scatter(gen, size, 1300 / 1e4 * ps**2, (dmin / ps, dmax / ps), overlap=0.95)
    # shrubs do not grow in the ruts: drop those on the track
    off = np.abs(r - _track_rows(c, size, track))
    ok = off > track["gauge_px"] / 2 + track["rut_px"] + d / 2
    c, r, d = c[ok], r[ok], d[ok]
    kind = np.where(gen.uniform(size=c.size) < 0.7, "olive", "dark")
    colour = np.where(
        (kind == "olive")[:, None],
        varied_colours(gen, (92, 108, 58), c.size),
        varied_colours(gen, (70, 88, 50), c.size),
    )
    crowns = crowns_from(gen, c, r, d, colour, ambient=0.35, edge_px=0.8)
    # rocks: placed after the shrubs, never under them
    rc, rr, rd = scatter(gen, size, 500 / 1e4 * ps**2, (0.3 / ps, 1.4 / ps), existing=(c, r, d / 2))
    kk, ra, rphi = lobes(gen, rc.size, (2, 3, 4), (0.08, 0.18))
    rocks = Stamps(
        col=rc,
        row=rr,
        radius=rd / 2,
        lobe_k=kk,
        lobe_a=ra,
        lobe_phi=rphi,
        colour=varied_colours(gen, (74, 71, 66), rc.size, bright=(0.7, 1.3), hue=0.03),
        texture=gen.uniform(0.1, 0.2, rc.size),
        height=rd / 2 * gen.uniform(0.3, 0.6, rc.size),
        ambient=0.5,
        edge_px=0.7,
        ragged=0.04,
        dome=0.5,
    )

    def ground(r0: int, r1: int) -> np.ndarray:
        soils = [(186, 166, 136), (168, 146, 116), (204, 186, 156)]
        img = mix_ground((r0, r1), size, soils, patch_px=160.0, seed=tex, mottle=0.08)
        # litter: small dark specks (twigs, dung, leaf litter) in patches
        speck = value_noise((r0, r1), (0, size), 1.6, tex + 5)
        patch = value_noise((r0, r1), (0, size), 40.0, tex + 6)
        lit = np.clip((speck - 0.55) * 4.0, 0, 1) * np.clip(patch * 3.0 + 0.5, 0, 1)
        litter = np.array([88, 74, 60], np.float32)[:, None, None]
        img = img * (1 - lit[None]) + litter * lit[None]
        # tyre track: two compacted, darker ruts
        cols = np.arange(size, dtype=np.float64)
        mid = _track_rows(cols, size, track)[None, :]
        rows = np.arange(r0, r1, dtype=np.float64)[:, None]
        dist = np.abs(np.abs(rows - mid) - track["gauge_px"] / 2)
        rut = np.clip(track["rut_px"] / 2 - dist + 0.5, 0, 1).astype(np.float32)
        rut *= 0.85 + 0.15 * value_noise((r0, r1), (0, size), 3.0, tex + 7)
        img *= 1.0 - 0.35 * rut[None]
        return img

    recipe = Recipe(
        width=size,
        height=size,
        ground=ground,
        ground_objects=(rocks,),
        crowns=(crowns,),
        casters=(crowns, rocks),
        sun=Sun(120.0, 32.0),
        shadow_strength=(0.68, 0.64, 0.55),
        shadow_soft_px=0.6,
        blur_px=0.45,
        noise_dn=(3.0, 3.0, 3.0),
        seed=tex,
    )
    extras = {"track": track, "rocks_col_px": rc, "rocks_row_px": rr, "rocks_d_px": rd}
    return ScenePlan(recipe, ps, RGB, c, r, d, kind, (dmin, dmax), extras=extras)
