"""Spatial pattern across distances, per plot: second-order functions with envelopes.

For every plot this computes K, L, L − r and g (isotropic edge correction), G, F and J
(Kaplan–Meier), their reduced-sample versions, and simulation envelopes under complete
spatial randomness in the exact plot polygon with the same number of plants. A global
envelope test on one function (L by default) says whether the plot departs from randomness at
all; where the observed curve leaves the global envelope gives the distance ranges at which it
is clustered or regular, turned into plain words by :func:`interpret`.

Optionally, for two kinds of plants (a point attribute such as species or live/dead), the
cross-L and K_BB − K_AA with random-labelling envelopes (:mod:`ecoscan.stats.cross`).

Automated plant counts need field checks, and a significant pattern is a description, not a
cause: check the plots on the ground before acting on a result, and follow local rules and
licensed practice for management decisions.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
import shapely

from ecoscan.arguments import as_xy
from ecoscan.errors import InputError
from ecoscan.io.inputs import SurveyInputs
from ecoscan.io.outputs import format_value
from ecoscan.progress import progress
from ecoscan.settings import Settings
from ecoscan.stats.cross import CrossResult, random_labelling_test
from ecoscan.stats.csr import plot_rng, uniform_in_polygon
from ecoscan.stats.distance_functions import (
    EmptySpaceGrid,
    empty_space_function,
    j_function,
    nn_function,
)
from ecoscan.stats.edge import boundary_distance
from ecoscan.stats.envelopes import GLOBAL_TESTS, Envelope, distance_runs, envelope_test
from ecoscan.stats.second_order import default_max_distance, r_grid, second_order, shorter_side_m
from ecoscan.vocabulary import RENAMED_VALUES

if TYPE_CHECKING:
    from ecoscan.analysis.habitat import CovariateRasters

__all__ = [
    "FUNCTIONS",
    "FunctionCurve",
    "PlotScales",
    "ScalesSettings",
    "analyse_scales",
    "format_ranges",
    "interpret",
    "plot_rng",
    "supported_max_distance",
]

#: Functions that can be requested, and what they are.
FUNCTIONS = {
    "K": "Ripley's K, isotropic correction (m²)",
    "L": "Besag's L = sqrt(K / pi) and L(r) - r (m)",
    "g": "pair correlation function, isotropic correction",
    "G": "nearest-neighbour distance distribution, Kaplan-Meier",
    "F": "empty-space function, Kaplan-Meier",
    "J": "J = (1 - G) / (1 - F)",
}
#: Functions whose global test may drive the verdict.
TEST_FUNCTIONS = ("L", "g")
#: Sign of "clustered" for each curve: +1 when above the envelope means clustered.
_CLUSTER_SIGN = {"K": 1, "L": 1, "L_minus_r": 1, "g": 1, "G": 1, "F": -1, "J": -1}
_UNITS = {"K": "m2", "L": "m", "L_minus_r": "m", "g": "1", "G": "1", "F": "1", "J": "1"}
_FEW_PLANTS = 30


@dataclass(frozen=True)
class ScalesSettings(Settings):
    """Settings of the analysis across scales (also the ``scales`` section of a survey file).

    Attributes
    ----------
    simulations : int
        Patterns simulated under complete spatial randomness per plot (and relabellings).
    seed : int
        Random seed; each plot gets its own stream from (seed, plot id).
    alpha : float
        Level of the envelopes and the global test.
    max_distance_m : float or None
        Largest distance, metres; None for the default rule (per plot, see
        :func:`ecoscan.stats.second_order.default_max_distance`).
    steps : int
        Number of distances.
    functions : tuple of str
        Which of K, L, g, G, F, J to report.
    global_test : str
        ``"rank-length"`` (extreme rank length) or ``"max-deviation"`` (maximum absolute deviation).
    test_function : str
        ``"L"`` or ``"g"``: the function whose global test gives the verdict.
    min_points : int
        Plots with fewer plants are reported but not analysed.
    kind_field : str or None
        Point attribute with the kind of plant, for the bivariate analysis.
    kinds : tuple of str or None
        The two kinds (A, B) to compare, e.g. ``("live", "dead")``.
    covariates : tuple of (str, str)
        Habitat covariates as (name, raster path): plant density is fitted as a log-linear
        function of them and clustering beyond it is tested (:mod:`ecoscan.analysis.habitat`).
    kernel_intensity : bool
        Without covariates, test clustering beyond a kernel-smoothed density.
    mark : str or None
        Numeric point column (e.g. ``diameter_m``) for the mark correlation test.
    habitat_simulations : int or None
        Simulated patterns of the fitted density model, and permutations of the marks, per
        plot; None for ``simulations``.
    """

    simulations: int = 199
    seed: int = 1
    alpha: float = 0.05
    max_distance_m: float | None = None
    steps: int = 100
    functions: tuple[str, ...] = ("K", "L", "g", "G", "F", "J")
    global_test: str = "rank-length"
    test_function: str = "L"
    min_points: int = 10
    kind_field: str | None = None
    kinds: tuple[str, str] | None = None
    covariates: tuple[tuple[str, str], ...] = ()
    kernel_intensity: bool = False
    mark: str | None = None
    habitat_simulations: int | None = None

    def __post_init__(self) -> None:
        _check(isinstance(self.simulations, int), "simulations must be a whole number")
        need = int(np.ceil(1.0 / self.alpha - 1 - 1e-9)) if 0 < self.alpha < 1 else 19
        _check(0 < self.alpha < 1, f"alpha must be between 0 and 1, not {self.alpha}")
        _check(
            self.simulations >= need,
            f"simulations = {self.simulations} is too few for alpha = {self.alpha}; "
            f"use at least {need} (199 or more is usual)",
        )
        _check(
            self.max_distance_m is None
            or (np.isfinite(self.max_distance_m) and self.max_distance_m > 0),
            f"the largest distance must be a positive number of metres, not {self.max_distance_m}",
        )
        _check(10 <= self.steps <= 2000, f"steps must be between 10 and 2000, not {self.steps}")
        bad = [f for f in self.functions if f not in FUNCTIONS]
        _check(
            not bad and len(self.functions) > 0,
            f"unknown function(s) {', '.join(bad) or '(none given)'}; "
            f"choose from {', '.join(FUNCTIONS)}",
        )
        _check(
            RENAMED_VALUES.get(self.global_test) not in GLOBAL_TESTS,
            f"global test {self.global_test!r} was renamed "
            f"{RENAMED_VALUES.get(self.global_test)!r}",
        )
        _check(
            self.global_test in GLOBAL_TESTS,
            f"unknown global test {self.global_test!r}; use one of {', '.join(GLOBAL_TESTS)}",
        )
        _check(
            self.test_function in TEST_FUNCTIONS,
            f"test_function must be one of {', '.join(TEST_FUNCTIONS)}, not {self.test_function!r}",
        )
        _check(self.min_points >= 3, "min_points must be at least 3")
        if self.kinds is not None:
            _check(
                len(self.kinds) == 2 and self.kinds[0] != self.kinds[1],
                "kinds must be two different values, e.g. live,dead",
            )
            _check(self.kind_field is not None, "kinds were given without the kind field")
        _check(
            self.habitat_simulations is None
            or (isinstance(self.habitat_simulations, int) and self.habitat_simulations >= need),
            f"habitat_simulations = {self.habitat_simulations} is too few for alpha = "
            f"{self.alpha}; use at least {need} (99 or more is usual)",
        )
        _check(
            isinstance(self.kernel_intensity, bool),
            "kernel_intensity must be true or false",
        )
        _check(
            self.mark is None or (isinstance(self.mark, str) and bool(self.mark.strip())),
            "mark must be the name of a numeric point column, e.g. diameter_m",
        )

    SECTION: ClassVar[str] = "scales"

    @classmethod
    def _normalise(cls, d: dict[str, Any]) -> dict[str, Any]:
        """Functions and kinds as text (``"K,L"``) or lists; whole numbers as floats."""
        kw = dict(d)
        try:
            if "functions" in kw:
                f = kw["functions"]
                kw["functions"] = tuple(f.replace(",", " ").split() if isinstance(f, str) else f)
            if "covariates" in kw:
                from ecoscan.analysis.habitat import parse_covariates

                kw["covariates"] = parse_covariates(kw["covariates"])
            if kw.get("kinds") is not None:
                k = kw["kinds"]
                kw["kinds"] = tuple(
                    s.strip() for s in (k.split(",") if isinstance(k, str) else map(str, k))
                )
            for key in ("simulations", "seed", "steps", "min_points", "habitat_simulations"):
                if kw.get(key) is not None and not isinstance(kw[key], bool):
                    v = kw[key]
                    if isinstance(v, float) and v != int(v):
                        raise InputError(f"{key} must be a whole number, not {v}")
                    kw[key] = int(v)
            for key in ("alpha", "max_distance_m"):
                if kw.get(key) is not None:
                    kw[key] = float(kw[key])
        except (TypeError, ValueError) as exc:
            raise InputError(f"bad scales setting: {exc}; check the values' types") from None
        return kw

    def to_dict(self) -> dict[str, Any]:
        """The settings as plain JSON-ready values (covariates as name -> file)."""
        d = super().to_dict()
        d["covariates"] = dict(self.covariates)
        return d


def _check(ok: bool, message: str) -> None:
    if not ok:
        raise InputError(message)


@dataclass(frozen=True)
class FunctionCurve:
    """One summary function of one plot, with its envelopes.

    Attributes
    ----------
    name : str
        ``K``, ``L``, ``L_minus_r``, ``g``, ``G``, ``F``, ``J``, a ``*_border`` version
        (no envelope) or ``L_between_kinds`` / ``K_difference`` (random labelling).
    unit : str
        Unit of the values (``m2``, ``m`` or ``1``).
    r_m : numpy.ndarray
        Distances, metres.
    value, csr_value : numpy.ndarray
        Observed curve and its value under the null hypothesis (NaN when not known in
        closed form, e.g. L_between_kinds under random labelling: the mean of the
        simulations is given in ``centre``).
    envelope : Envelope or None
        Envelopes and global test, None for the border versions.
    """

    name: str
    unit: str
    r_m: np.ndarray
    value: np.ndarray
    csr_value: np.ndarray
    envelope: Envelope | None = None


@dataclass(frozen=True)
class PlotScales:
    """Result of the analysis across scales for one plot.

    Attributes
    ----------
    plot_id : str
    n : int
        Plants in the plot.
    area_m2 : float
    max_distance_m : float
        Largest distance analysed.
    bandwidth_m : float
        Kernel bandwidth of g.
    curves : dict of str to FunctionCurve
    test_function : str
    global_test : str
    p_global : float
    clustered_ranges_m, regular_ranges_m : list of (float, float)
    verdict : str
        Plain words.
    warnings : list of str
    simulations : int
        Simulated patterns (and relabellings) used.
    warnings : list of str
    cross : CrossResult or None
    kinds_verdict : str
    alpha : float
        Level of the envelopes and tests.
    habitat : ecoscan.analysis.habitat.PlotHabitat or None
        The covariate model, the test beyond it and the size test, when asked for.
    """

    plot_id: str
    n: int
    area_m2: float
    max_distance_m: float
    bandwidth_m: float
    curves: dict[str, FunctionCurve]
    test_function: str
    global_test: str
    p_global: float
    clustered_ranges_m: list[tuple[float, float]]
    regular_ranges_m: list[tuple[float, float]]
    verdict: str
    simulations: int
    warnings: list[str] = field(default_factory=list)
    cross: CrossResult | None = None
    kinds_verdict: str = ""
    alpha: float = 0.05
    # ecoscan.analysis.habitat.PlotHabitat when covariates or a mark were asked for
    habitat: Any = None


def _fmt_m(v: float) -> str:
    """A distance for people: 0.15, 1.2, 11."""
    v = float(v)
    if v >= 10:
        return f"{v:.0f}"
    if v >= 1:
        return f"{v:.1f}"
    return f"{v:.2g}"


#: Runs shorter than this many distance steps are "brief" in the verdict text.
_MIN_RUN_STEPS = 3
#: Runs of one kind separated by at most this many steps (and nothing of the other kind)
#: are one range in the verdict text.
_MERGE_GAP_STEPS = 2


def _merged_indexdistance_runs(mask: np.ndarray, other: np.ndarray) -> list[tuple[int, int]]:
    """Index runs of ``mask``, merging those split by a short gap free of ``other``."""
    m = np.asarray(mask, bool)
    o = np.asarray(other, bool)
    if not m.any():
        return []
    edges = np.diff(np.r_[0, m.astype(np.int8), 0])
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1) - 1
    out = [(int(starts[0]), int(ends[0]))]
    for a, b in zip(starts[1:], ends[1:], strict=True):
        pa, pb = out[-1]
        if a - pb - 1 <= _MERGE_GAP_STEPS and not o[pb + 1 : a].any():
            out[-1] = (pa, int(b))
        else:
            out.append((int(a), int(b)))
    return out


# ------------------------------------------------------------------------ interpretation


def format_ranges(ranges: Sequence[tuple[float, float]]) -> str:
    """Ranges as text for a table: ``"0.1-1.2; 4.0-11"`` (metres)."""
    return "; ".join(f"{_fmt_m(a)}-{_fmt_m(b)}" for a, b in ranges)


def _describe(ranges: Sequence[tuple[float, float]], r_first: float) -> str:
    parts = []
    for a, b in ranges:
        if a <= r_first * (1 + 1e-9):
            parts.append(f"up to {_fmt_m(b)} m")
        elif np.isclose(a, b):
            parts.append(f"at about {_fmt_m(a)} m")
        else:
            parts.append(f"from {_fmt_m(a)} m to {_fmt_m(b)} m")
    return " and ".join(parts)


def interpret(
    r_m: np.ndarray,
    clustered: np.ndarray,
    regular: np.ndarray,
    pvalue: float,
    alpha: float,
    *,
    n: int | None = None,
    r_start: float | None = None,
    r_start_regular: float | None = None,
) -> tuple[list[tuple[float, float]], list[tuple[float, float]], str]:
    """Turn envelope exceedances into distance ranges and a verdict in plain words.

    Parameters
    ----------
    r_m : numpy.ndarray
        Distances, metres.
    clustered, regular : numpy.ndarray of bool
        Where the observed curve is on the clustered / regular side of the global envelope.
    pvalue : float
        Global test p-value.
    alpha : float
        Significance level.
    n : int, optional
        Number of plants (adds a caution for small plots).
    r_start : float, optional
        Smallest informative distance, metres (below it no simulated pattern has a pair, so
        nothing can be significant); a clustered range starting there reads "up to".
        Default r_m[0].
    r_start_regular : float, optional
        The same for regular ranges (the first distance where the lower envelope is above
        zero). Default ``r_start``.

    Returns
    -------
    clustered_ranges, regular_ranges : list of (float, float)
        Ranges in metres (empty unless the global test rejects at ``alpha``).
    verdict : str
        E.g. "regular up to 1.2 m; clustered from 4.0 m to 11 m (global test p = 0.005)".
    """
    r = np.asarray(r_m, float)
    r_start = float(r[0]) if r_start is None else float(r_start)
    r_start_regular = r_start if r_start_regular is None else float(r_start_regular)
    sig = np.isfinite(pvalue) and pvalue <= alpha
    small = (
        f"; only {n} plants, so only strong patterns can be detected"
        if n is not None and n < _FEW_PLANTS
        else ""
    )
    p_txt = f"global test p = {format_value(round(float(pvalue), 4))}"
    if not sig:
        return (
            [],
            [],
            f"no significant departure from a random pattern at distances up to "
            f"{_fmt_m(r[-1])} m ({p_txt}){small}",
        )
    reg = distance_runs(regular, r)
    clu = distance_runs(clustered, r)
    # the verdict merges runs split by a gap of a step or two and names the main range;
    # the exact ranges stay in the *_ranges_m columns
    events = []
    for kind, mask, other in (("regular", regular, clustered), ("clustered", clustered, regular)):
        merged = _merged_indexdistance_runs(mask, other)
        if not merged:
            continue
        long = [(a, b) for a, b in merged if b - a + 1 >= _MIN_RUN_STEPS]
        short = len(merged) - len(long)
        if long:
            main = max(long, key=lambda t: (t[1] - t[0], -t[0]))
            shown = sorted(long)[:2] if len(long) <= 2 else [main]
        else:
            main = max(merged, key=lambda t: (t[1] - t[0], -t[0]))
            shown, short = [main], short - 1
        start = r_start_regular if kind == "regular" else r_start
        text = _describe([(float(r[a]), float(r[b])) for a, b in shown], start)
        if len(long) > 2:
            far = _fmt_m(r[max(long)[1]])
            text = f"mainly {text}, with {len(long) - 1} further ranges up to {far} m"
        if short > 0:
            text += f" (and briefly at {short} other distance{'s' if short > 1 else ''})"
        events.append((float(r[main[0]]), kind, text))
    events.sort()
    parts: list[str] = []
    for _x, kind, text in events:
        word = "regular (evenly spaced)" if kind == "regular" else "clustered"
        parts.append(f"{word} {text}")
    if not parts:
        return [], [], f"departs from a random pattern, without one clear distance range ({p_txt})"
    return clu, reg, "; ".join(parts) + f" ({p_txt}){small}"


# ----------------------------------------------------------------------------- analysis


def _curve(name, r, obs, theo, sims, settings, test) -> FunctionCurve:
    env = envelope_test(obs, sims, csr_value=theo, alpha=settings.alpha, test=test)
    return FunctionCurve(name, _UNITS[name], r, obs, theo, env)


def _too_few(plot_id, n, area, settings, reason) -> PlotScales:
    return PlotScales(
        plot_id,
        n,
        area,
        float("nan"),
        float("nan"),
        {},
        settings.test_function,
        settings.global_test,
        float("nan"),
        [],
        [],
        reason,
        settings.simulations,
        [reason],
        alpha=settings.alpha,
    )


def supported_max_distance(
    polygon: shapely.Geometry, n: int, requested_m: float | None
) -> tuple[float, str]:
    """The largest distance the analysis uses, capped at what the plot supports, and a note.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    n : int
        Plants in the plot.
    requested_m : float or None
        The user's largest distance (``--max-distance``), metres; None for the default.

    Returns
    -------
    max_distance_m : float
        ``requested_m`` capped at a quarter of the shorter side of the plot's minimum
        rotated rectangle, or the default (:func:`default_max_distance`).
    note : str
        A one-line note when the request was capped, else ''.

    Notes
    -----
    A quarter of the shorter side is a common rule for the largest distance of K, L and g
    (common practice): beyond it most circles around the plants leave the plot, the edge
    weights grow without bound and a few pairs decide the curve, so verdicts there can
    reverse. The rotated rectangle (not the axis-aligned box) keeps the rule meaningful for
    plots at an angle.

    Examples
    --------
    >>> import shapely
    >>> supported_max_distance(shapely.box(0, 0, 100, 40), 200, 50.0)[0]
    10.0
    """
    quarter = 0.25 * shorter_side_m(polygon)
    if requested_m is None:
        return float(default_max_distance(polygon, n)), ""
    if requested_m <= quarter * 1.0001:
        return float(requested_m), ""
    return float(quarter), (
        f"largest distance {_fmt_m(requested_m)} m is beyond what the plot supports; capped "
        f"at {_fmt_m(quarter)} m, a quarter of its shorter side (estimates further out rest on "
        "few pairs and can reverse the verdict)"
    )


def _kind_labels(values: np.ndarray) -> np.ndarray:
    return np.array([format_value(v) for v in values], dtype=object)


def analyse_plot(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    plot_id: str,
    settings: ScalesSettings,
    *,
    kinds: np.ndarray | None = None,
    surfaces: Sequence[Any] | None = None,
    marks: np.ndarray | None = None,
) -> PlotScales:
    """The analysis across scales of one plot (see :func:`analyse_scales`).

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants in the plot, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot.
    plot_id : str
        Its id (also seeds its random stream).
    settings : ScalesSettings
    kinds : numpy.ndarray of str, optional
        Kind of each plant, for the bivariate analysis.
    surfaces : sequence of CovariateSurface, optional
        The habitat covariates around the plot (``settings.covariates``).
    marks : numpy.ndarray, optional
        The numeric mark of each plant (``settings.mark``).

    Returns
    -------
    PlotScales
    """
    xy = as_xy(xy)  # refuses a transposed (2, n) array
    n = xy.shape[0]
    area = float(polygon.area)
    if n < settings.min_points:
        return _too_few(
            plot_id,
            n,
            area,
            settings,
            f"too few plants ({n}) for an analysis across distances; "
            f"at least {settings.min_points} are needed",
        )
    rng = plot_rng(settings.seed, plot_id)
    warnings: list[str] = []
    max_distance, note = supported_max_distance(polygon, n, settings.max_distance_m)
    if note:
        warnings.append(note)
    if n < _FEW_PLANTS:
        warnings.append(f"only {n} plants: only strong patterns can be detected")
    grids = _distance_grids(max_distance, n / area, settings.steps)
    obs, curves = _function_curves(xy, polygon, plot_id, settings, max_distance, grids, rng)
    r = grids.r
    env = curves[settings.test_function].envelope
    clu, reg, verdict = interpret(
        r,
        env.above,
        env.below,
        env.pvalue,
        settings.alpha,
        n=n,
        r_start=_first(r, env.band_high > env.band_low),
        r_start_regular=_first(r, env.band_low > 0),
    )
    cross, kinds_verdict = None, ""
    if kinds is not None and settings.kinds is not None:
        cross, kinds_verdict, w = _cross(xy, polygon, kinds, settings, max_distance, rng)
        warnings += w
    habitat = None
    if surfaces or settings.kernel_intensity or marks is not None:
        habitat = _habitat(xy, polygon, plot_id, settings, surfaces, marks, bool(clu), max_distance)
        warnings += habitat.warnings
    return PlotScales(
        plot_id,
        n,
        area,
        float(max_distance),
        float(obs.bandwidth_m),
        {k: curves[k] for k in sorted(curves, key=_curve_order)},
        settings.test_function,
        settings.global_test,
        float(env.pvalue),
        clu,
        reg,
        verdict,
        settings.simulations,
        warnings,
        cross,
        kinds_verdict,
        settings.alpha,
        habitat,
    )


@dataclass(frozen=True)
class _Grids:
    """The distances of one plot's functions, metres."""

    r: np.ndarray  # K, L, g: up to the maximum distance
    r_nn: np.ndarray  # G, F: up to 2.5 mean spacings
    r_j: np.ndarray  # J: up to where F under randomness reaches 0.95

    @property
    def both(self) -> np.ndarray:
        return np.concatenate([self.r_nn, self.r_j])


def _distance_grids(max_distance: float, lam: float, steps: int) -> _Grids:
    r_nn = r_grid(min(max_distance, 2.5 / np.sqrt(lam)), steps)
    # J only up to where F under randomness reaches 0.95: beyond, 1 − F is too small for a
    # stable ratio (common practice)
    r_j = r_grid(min(r_nn[-1], np.sqrt(-np.log(0.05) / (lam * np.pi))), steps)
    return _Grids(r_grid(max_distance, steps), r_nn, r_j)


def _function_curves(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    plot_id: str,
    settings: ScalesSettings,
    max_distance: float,
    grids: _Grids,
    rng: np.random.Generator,
) -> tuple[Any, dict[str, FunctionCurve]]:
    """The observed second-order record and every curve asked for, with its envelope."""
    n, nr = xy.shape[0], settings.steps
    r, r_nn, r_j, r_both = grids.r, grids.r_nn, grids.r_j, grids.both
    want = set(settings.functions) | {settings.test_function}
    want_dist = bool(want & {"G", "F", "J"})
    b = boundary_distance(xy, polygon)
    obs = second_order(xy, polygon, max_distance, steps=nr, reduced_sample=True, boundary_m=b)
    grid = EmptySpaceGrid(polygon) if want_dist else None
    if want_dist:
        g_obs = nn_function(xy, polygon, r_both, boundary_m=b)
        f_obs = empty_space_function(xy, polygon, r_both, grid=grid)
    s = settings.simulations
    sim_k = np.empty((s, nr))
    sim_g = np.empty((s, nr))
    sim_G = np.empty((s, 2 * nr))
    sim_F = np.empty((s, 2 * nr))
    sims = uniform_in_polygon(polygon, n, size=s, rng=rng)
    for k in progress(range(s), desc=f"{plot_id} simulations", unit="sim"):
        bk = boundary_distance(sims[k], polygon)
        so = second_order(
            sims[k], polygon, max_distance, steps=nr, reduced_sample=False, boundary_m=bk
        )
        sim_k[k] = so.K_iso_m2
        sim_g[k] = so.g_iso
        if want_dist:
            sim_G[k] = nn_function(sims[k], polygon, r_both, boundary_m=bk).km
            sim_F[k] = empty_space_function(sims[k], polygon, r_both, grid=grid).km
    test = settings.global_test
    curves: dict[str, FunctionCurve] = {}
    sim_l = np.sqrt(np.maximum(sim_k, 0) / np.pi)
    if "K" in want:
        curves["K"] = _curve("K", r, obs.K_iso_m2, np.pi * r**2, sim_k, settings, test)
    if "L" in want:
        curves["L"] = _curve("L", r, obs.L_iso_m, r.copy(), sim_l, settings, test)
        curves["L_minus_r"] = _curve(
            "L_minus_r", r, obs.L_minus_r_m, np.zeros_like(r), sim_l - r, settings, test
        )
    if "g" in want:
        curves["g"] = _curve("g", r, obs.g_iso, np.ones_like(r), sim_g, settings, test)
    if want_dist:
        theo = g_obs.csr_value[:nr]
        if "G" in want:
            curves["G"] = _curve("G", r_nn, g_obs.km[:nr], theo, sim_G[:, :nr], settings, test)
        if "F" in want:
            curves["F"] = _curve("F", r_nn, f_obs.km[:nr], theo, sim_F[:, :nr], settings, test)
        if "J" in want:
            curves["J"] = _curve(
                "J",
                r_j,
                j_function(g_obs.km[nr:], f_obs.km[nr:]),
                np.ones_like(r_j),
                j_function(sim_G[:, nr:], sim_F[:, nr:]),
                settings,
                test,
            )
    curves.update(
        _reduced_sample_curves(
            want, grids, nr, obs, g_obs if want_dist else None, f_obs if want_dist else None
        )
    )
    return obs, curves


def _reduced_sample_curves(want, grids: _Grids, nr: int, obs, g_obs, f_obs):
    """Reduced-sample versions, observed only (a cross-check of the edge correction)."""
    r, r_nn = grids.r, grids.r_nn
    curves: dict[str, FunctionCurve] = {}
    if "K" in want:
        curves["K_reduced_sample"] = FunctionCurve(
            "K_reduced_sample", "m2", r, obs.K_reduced_sample_m2, np.pi * r**2
        )
    if "L" in want:
        curves["L_reduced_sample"] = FunctionCurve(
            "L_reduced_sample", "m", r, obs.L_reduced_sample_m, r.copy()
        )
    if "g" in want:
        curves["g_reduced_sample"] = FunctionCurve(
            "g_reduced_sample", "1", r, obs.g_reduced_sample, np.ones_like(r)
        )
    if g_obs is not None:
        theo = g_obs.csr_value[:nr]
        if "G" in want:
            curves["G_reduced_sample"] = FunctionCurve(
                "G_reduced_sample", "1", r_nn, g_obs.reduced_sample[:nr], theo
            )
        if "F" in want:
            curves["F_reduced_sample"] = FunctionCurve(
                "F_reduced_sample", "1", r_nn, f_obs.reduced_sample[:nr], theo
            )
    return curves


def _habitat(xy, polygon, plot_id, settings, surfaces, marks, clustered, max_distance):
    """The "why" analysis of one plot (:func:`ecoscan.analysis.habitat.habitat_analysis`)."""
    from ecoscan.analysis.habitat import habitat_analysis

    return habitat_analysis(
        xy,
        polygon,
        plot_id,
        surfaces=surfaces,
        covariates=settings.covariates,
        kernel=settings.kernel_intensity,
        marks=marks,
        mark=settings.mark,
        clustered_without=clustered,
        max_distance_m=max_distance,
        steps=settings.steps,
        simulations=settings.habitat_simulations or settings.simulations,
        alpha=settings.alpha,
        test=settings.global_test,
        # its own streams, so that the results above do not change when it is asked for
        rng=plot_rng(settings.seed, plot_id),
    )


def _first(r: np.ndarray, mask: np.ndarray) -> float:
    idx = np.flatnonzero(mask)
    return float(r[idx[0]]) if idx.size else float(r[0])


_ORDER = ["K", "L", "L_minus_r", "g", "G", "F", "J"]


def _curve_order(name: str) -> tuple[int, str]:
    base = name.replace("_reduced_sample", "")
    return (_ORDER.index(base) if base in _ORDER else len(_ORDER), name)


def _cross(xy, polygon, kinds, settings, max_distance, rng):
    a, b = settings.kinds
    lab = _kind_labels(kinds)
    use = (lab == a) | (lab == b)
    n_a, n_b = int(np.sum(lab == a)), int(np.sum(lab == b))
    if n_a < 2 or n_b < 2:
        w = f"bivariate test skipped: {n_a} plants of kind {a!r} and {n_b} of kind {b!r}"
        return None, "not tested (" + w.split(": ", 1)[1] + ")", [w]
    res = random_labelling_test(
        xy[use],
        lab[use] == b,
        polygon,
        max_distance_m=max_distance,
        steps=settings.steps,
        simulations=settings.simulations,
        alpha=settings.alpha,
        test=settings.global_test,
        rng=rng,
        labels=(a, b),
    )
    return res, kinds_verdict(res, settings.alpha), []


def kinds_verdict(res: CrossResult, alpha: float) -> str:
    """Plain words for a random-labelling test of kind B among kind A.

    Parameters
    ----------
    res : CrossResult
    alpha : float
        Significance level of the verdict.

    Notes
    -----
    The verdict rests on two global tests (the difference of K functions and the L
    function between kinds), and reports a departure when either rejects; each is
    therefore judged at α/2 (Bonferroni), so that the verdict as a whole rejects at most
    α of random labellings. Measured before this split: 8–11% at α = 5%
    (``benchmarks/validity.py``).
    """
    a, b = res.label_a, res.label_b
    r = res.r_m
    out = []
    each = alpha / 2
    pd = res.D.pvalue
    if np.isfinite(pd) and pd <= each:
        more = distance_runs(res.D.above, r)
        less = distance_runs(res.D.below, r)
        if more:
            out.append(
                f"{b} plants are more clustered among themselves than {a} plants "
                f"{_describe(more, r[0])}"
            )
        if less:
            out.append(f"{b} plants are more evenly spread than {a} plants {_describe(less, r[0])}")
    pl = res.L_between_kinds.pvalue
    if np.isfinite(pl) and pl <= each:
        near = distance_runs(res.L_between_kinds.above, r)
        far = distance_runs(res.L_between_kinds.below, r)
        if near:
            out.append(
                f"{b} plants lie closer to {a} plants than a random split gives "
                f"{_describe(near, r[0])}"
            )
        if far:
            out.append(f"{b} and {a} plants are segregated {_describe(far, r[0])}")
    ps = (
        f"random labelling: p = {format_value(round(float(pd), 4))} for {b}-{b} clustering, "
        f"{format_value(round(float(pl), 4))} for {b}-{a} spacing"
    )
    few = min(res.n_a, res.n_b)
    if few < 10:
        ps += f"; only {few} plants of one kind, so only strong effects can be detected"
    if not out:
        return f"{b} plants are placed like a random subset of all plants ({ps})"
    return "; ".join(out) + f" ({ps})"


def analyse_scales(
    inputs: SurveyInputs,
    settings: ScalesSettings,
    *,
    points_label: str = "the points",
    notes: list[str] | None = None,
    covariate_rasters: CovariateRasters | None = None,
) -> list[PlotScales]:
    """The analysis across scales of every plot, in layer order.

    Parameters
    ----------
    inputs : SurveyInputs
        Points and plots in one metric CRS.
    settings : ScalesSettings
    points_label : str
        How to name the points' file in messages (e.g. its path).
    notes : list of str, optional
        When given, points without the mark column skip the size test with a note appended
        here (a survey whose detectors measure different sizes); otherwise that is an error.
    covariate_rasters : ecoscan.analysis.habitat.CovariateRasters, optional
        Open covariate files shared with other calls (a survey opens each once for all its
        rasters); by default each covariate file is opened once for this call.

    Returns
    -------
    list of PlotScales

    Raises
    ------
    InputError
        When ``settings.kind_field`` or ``settings.mark`` is not an attribute of the points,
        a mark is missing or not a number, or a covariate raster does not cover a plot, is
        constant over it or is in degrees without a CRS.

    Notes
    -----
    With ``kind_field`` and ``kinds`` set, only the plants of those two kinds are analysed
    (univariate functions included), e.g. the persisting and lost plants of a change
    analysis, which together are the plants of the first survey.

    Each plot's simulations come from ``np.random.SeedSequence([seed, zlib.crc32(plot_id)])``,
    so a plot's result does not depend on the other plots in the file.
    """
    if covariate_rasters is None and settings.covariates:
        from ecoscan.analysis.habitat import CovariateRasters

        with CovariateRasters() as own:
            return analyse_scales(
                inputs, settings, points_label=points_label, notes=notes, covariate_rasters=own
            )
    kinds_all = None
    if settings.kind_field is not None:
        attrs = inputs.points.attrs
        if settings.kind_field not in attrs:
            raise InputError(
                f"the points have no field {settings.kind_field!r} (fields: "
                f"{', '.join(attrs) or 'none'}); check --kind-field"
            )
        kinds_all = _kind_labels(attrs[settings.kind_field])
        if settings.kinds is not None:
            present = set(kinds_all)
            missing = [k for k in settings.kinds if k not in present]
            if missing:
                raise InputError(
                    f"field {settings.kind_field!r} has no value {missing[0]!r} (values: "
                    f"{', '.join(sorted(map(str, present))[:10])}); check --kinds"
                )
        else:
            raise InputError("--kind-field needs --kinds A,B: the two kinds to compare")
    marks_all = None
    if settings.mark is not None:
        attrs = inputs.points.attrs
        if settings.mark not in attrs and notes is not None:
            notes.append(
                f"{points_label} carry no {settings.mark!r} (columns: "
                f"{', '.join(attrs) or 'none'}); the size and spacing test is skipped there"
            )
        elif settings.mark not in attrs:
            raise InputError(
                f"{points_label} has no column {settings.mark!r} for the mark (columns: "
                f"{', '.join(attrs) or 'none'}); check --mark"
            )
        else:
            marks_all = attrs[settings.mark]
    out = []
    xy_all = inputs.points.xy
    for i, plot in enumerate(inputs.plots):
        m = inputs.plot_mask(i)
        kinds = None
        if kinds_all is not None:
            # only the plants of the two kinds compared (e.g. persisting and lost: the plants
            # of the first survey), for the univariate functions too
            m &= np.isin(kinds_all, list(settings.kinds))
            kinds = kinds_all[m]
        surfaces, marks = None, None
        n = int(m.sum())
        if n >= settings.min_points:
            from ecoscan.analysis.habitat import check_marks, covariate_surfaces

            if settings.covariates:
                spacing = np.sqrt(plot.geometry.area / min(max(4 * n, 2500), 40_000))
                surfaces = covariate_surfaces(
                    settings.covariates,
                    plot.geometry,
                    plot.plot_id,
                    inputs.layer.crs,
                    max(spacing / 2, 0.05),
                    rasters=covariate_rasters,
                )
            if marks_all is not None:
                marks = check_marks(marks_all[m], settings.mark, points_label, plot.plot_id)
        out.append(
            analyse_plot(
                xy_all[m],
                plot.geometry,
                plot.plot_id,
                settings,
                kinds=kinds,
                surfaces=surfaces,
                marks=marks,
            )
        )
    return out
