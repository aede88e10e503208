"""Figure of one plot's analysis across distances: summary functions with envelopes.

Panels: L(r) − r and g(r) (isotropic correction), G(r) and F(r), J(r), and, when a bivariate
test was run, the cross-L and K_BB − K_AA. Each panel shows the observed curve (black), the
value under complete spatial randomness (dotted), the global envelope (grey band) and the
pointwise envelope (dashed); distances where the observed curve leaves the global envelope
are marked along the bottom with the shared clustered / regular colours and symbols.
"""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np

from ecoscan.figures import MARKERS, PALETTE, save_figure

__all__ = ["plot_scales_figure"]

_LABELS = {
    "L_minus_r": ("L(r) − r (m)", "Besag's L(r) − r"),
    "g": ("g(r) (dimensionless)", "pair correlation g(r)"),
    "G": ("G(r) (probability)", "nearest-neighbour distances G(r)"),
    "F": ("F(r) (probability)", "empty space F(r)"),
    "J": ("J(r) (dimensionless)", "J(r) = (1 − G) / (1 − F)"),
    "K": ("K(r) (m²)", "Ripley's K(r)"),
}
_SIGN = {"K": 1, "L_minus_r": 1, "g": 1, "G": 1, "F": -1, "J": -1}


def _panel(ax, r, obs, theo, env, ylabel, title, sign=1, names=("clustered", "regular")):
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    if env is not None:
        lo, hi = env.band_low, env.band_high
        if np.any(np.isfinite(lo)):
            ax.fill_between(
                r,
                lo,
                hi,
                color="#cccccc",
                alpha=0.8,
                linewidth=0,
                label=f"global envelope ({100 * (1 - env.alpha):g}%)",
            )
        ax.plot(r, env.pointwise_low, "--", color="#777777", linewidth=0.8, label="pointwise")
        ax.plot(r, env.pointwise_high, "--", color="#777777", linewidth=0.8)
    if theo is not None and np.any(np.isfinite(theo)):
        ax.plot(r, theo, ":", color="#444444", linewidth=1.0, label="random (theory)")
    ax.plot(r, obs, "-", color="black", linewidth=1.4, label="value")
    if env is not None and np.isfinite(env.pvalue):
        up = env.above if sign > 0 else env.below
        down = env.below if sign > 0 else env.above
        ymin = np.nanmin(np.r_[obs, env.pointwise_low]) if np.any(np.isfinite(obs)) else 0
        for mask, key, lab in ((up, "clustered", names[0]), (down, "regular", names[1])):
            if np.any(mask):
                ax.plot(
                    r[mask],
                    np.full(int(mask.sum()), ymin),
                    MARKERS[key],
                    color=PALETTE[key],
                    markersize=3.5,
                    linestyle="none",
                    label=lab,
                )
        title = f"{title}  (global p = {env.pvalue:.3g})"
    ax.set_xlabel("distance r (m)")
    ax.set_ylabel(ylabel)
    ax.set_title(title, fontsize=9)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def plot_scales_figure(result, path: str | os.PathLike) -> Path:
    """Draw one plot's summary functions with their envelopes and save it as PNG.

    Parameters
    ----------
    result : ecoscan.scales.PlotScales
        The plot's result.
    path : path-like
        Destination PNG (written atomically).

    Returns
    -------
    pathlib.Path
    """
    names = [k for k in ("L_minus_r", "g", "G", "F", "J") if k in result.curves]
    if not names:
        names = [k for k in ("K",) if k in result.curves]
    extra = 2 if result.cross is not None else 0
    npan = len(names) + extra
    ncol = 2
    nrow = int(np.ceil(npan / ncol))
    fig, axes = plt.subplots(nrow, ncol, figsize=(10, 3.2 * nrow + 0.8), dpi=110, squeeze=False)
    flat = axes.ravel()
    for ax, k in zip(flat, names, strict=False):
        c = result.curves[k]
        ylabel, title = _LABELS[k]
        if k == "J":  # J runs from 0 to infinity around 1: a clipped log scale reads best
            _panel(
                ax,
                c.r_m,
                _clip(c.value),
                c.csr_value,
                _clip_env(c.envelope),
                ylabel,
                title,
                _SIGN[k],
            )
            ax.set_yscale("log")
            ax.set_ylabel("J(r) (dimensionless, log scale)")
        else:
            _panel(ax, c.r_m, c.value, c.csr_value, c.envelope, ylabel, title, _SIGN[k])
    if result.cross is not None:
        x = result.cross
        a, b = x.label_a, x.label_b
        _panel(
            flat[len(names)],
            x.r_m,
            x.L_between_kinds.value - x.r_m,
            x.L_between_kinds.centre - x.r_m,
            _shift(x.L_between_kinds, x.r_m),
            "L_between_kinds(r) − r (m)",
            f"cross-L, {b} around {a} (random labelling)",
            1,
            (f"{b} near {a}", "segregated"),
        )
        _panel(
            flat[len(names) + 1],
            x.r_m,
            x.D.value,
            x.D.centre,
            x.D,
            "K_BB(r) − K_AA(r) (m²)",
            f"K({b}) − K({a}) (random labelling)",
            1,
            (f"{b} more clustered", f"{b} more even"),
        )
    for ax in flat[npan:]:
        ax.set_visible(False)
    flat[0].legend(fontsize=7, loc="best", frameon=False)
    head = f"plot {result.plot_id}: {result.n} plants, {result.area_m2:.0f} m²"
    fig.suptitle(head + "\n" + textwrap.fill(result.verdict, 110), fontsize=9.5)
    fig.tight_layout()
    return save_figure(fig, path)


def _clip(v):
    return np.clip(v, 0.01, 100.0)


def _clip_env(env):
    from dataclasses import replace

    if env is None:
        return None
    return replace(
        env,
        value=_clip(env.value),
        band_low=_clip(env.band_low),
        band_high=_clip(env.band_high),
        pointwise_low=_clip(env.pointwise_low),
        pointwise_high=_clip(env.pointwise_high),
    )


def _shift(env, r):
    """The same envelope shifted by −r (for drawing L − r)."""
    from dataclasses import replace

    return replace(
        env,
        value=env.value - r,
        centre=env.centre - r,
        band_low=env.band_low - r,
        band_high=env.band_high - r,
        pointwise_low=env.pointwise_low - r,
        pointwise_high=env.pointwise_high - r,
    )
