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

from ecoscan.report.figures import FIGURE_DPI, MARKERS, PALETTE, save_figure

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
                label=f"global {100 * (1 - env.alpha):g}% band of random patterns",
            )
        ax.plot(r, env.pointwise_low, "--", color="#777777", linewidth=0.8, label="pointwise band")
        ax.plot(r, env.pointwise_high, "--", color="#777777", linewidth=0.8)
    if theo is not None and np.any(np.isfinite(theo)):
        ax.plot(r, theo, ":", color="#444444", linewidth=1.0, label="random pattern")
    ax.plot(r, obs, "-", color="black", linewidth=1.4, label="measured")
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
                    markersize=4,
                    linestyle="none",
                    label=lab,
                )
        p = "<0.001" if env.pvalue < 0.001 else f"= {env.pvalue:.3f}"
        title = f"{title}  (global p {p})"
    ax.set_xlabel("distance r (m)")
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def plot_scales_figure(result, path: str | os.PathLike) -> Path:
    """Draw one plot's summary functions with their envelopes and save it as PNG.

    Parameters
    ----------
    result : ecoscan.analysis.scales.compute.PlotScales
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
    fig, axes = plt.subplots(
        nrow, ncol, figsize=(10, 3.3 * nrow + 1.4), dpi=FIGURE_DPI, squeeze=False
    )
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
            ax.set_ylim(*_j_limits(c))
            ax.set_ylabel("J(r) (log scale)")
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
            "L between kinds, L(r) − r (m)",
            f"L between kinds: {b} around {a} (random labelling)",
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
    # one legend for all panels, above them (never over a curve)
    seen: dict[str, object] = {}
    for ax in flat[:npan]:
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            seen.setdefault(lab, h)
    head = f"plot {result.plot_id}: {result.n} plants, {result.area_m2:.0f} m²"
    fig.suptitle(head + "\n" + textwrap.fill(result.verdict, 100))
    fig.tight_layout(rect=(0, 0, 1, 1 - 1.05 / fig.get_figheight()))
    fig.legend(
        list(seen.values()),
        list(seen),
        loc="upper center",
        bbox_to_anchor=(0.5, 1 - 0.62 / fig.get_figheight()),
        ncol=min(4, len(seen)),
        frameon=False,
    )
    return save_figure(fig, path)


def _j_limits(curve) -> tuple[float, float]:
    """Log-axis limits for J from the measured curve and its band (not the clip values)."""
    vals = [curve.value]
    if curve.envelope is not None:
        vals += [curve.envelope.band_low, curve.envelope.band_high]
    v = np.concatenate([np.asarray(a, float) for a in vals])
    v = v[np.isfinite(v) & (v > 0)]
    if v.size == 0:
        return 0.1, 10.0
    lo, hi = float(v.min()), float(v.max())
    lo, hi = max(0.01, lo / 1.3), min(100.0, hi * 1.3)
    return (lo, hi) if hi > lo * 1.5 else (lo / 1.5, hi * 1.5)


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
