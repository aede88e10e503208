"""Per-plot dispersion analysis: orchestration of the statistics in :mod:`ecoscan.stats`.

For every plot this runs the same methods whatever its size: nearest-neighbour distances
(KD-tree), the Clark–Evans index without and with Donnelly's edge correction, a guard-zone
estimate, the Monte Carlo test in the exact plot polygon (the verdict), and a quadrat
analysis on a grid clipped to the plot. Results are typed records; :func:`write_analysis`
writes the results folder (``dispersion.csv``, ``dispersion.json``, ``points.csv`` + ``.prj``,
``plots.gpkg``).

The method reference, with formulas, constants and sources, is ``docs/methods-dispersion.md``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from ecoscan.analysis.dispersion.detectable import (
    NO_DEPARTURE,
    Detectable,
    plot_detectable,
    settle_verdict,
    verdict_with_range,
)
from ecoscan.arguments import as_xy
from ecoscan.errors import InputError
from ecoscan.io.inputs import SurveyInputs
from ecoscan.progress import progress
from ecoscan.settings import Settings
from ecoscan.stats.csr import plot_rng
from ecoscan.stats.montecarlo import (
    DEFAULT_STOP_AFTER,
    DIRECTIONS,
    MonteCarloResult,
    monte_carlo_nn,
)
from ecoscan.stats.nearest import (
    MIN_POINTS_ADVISED,
    ClarkEvansResult,
    EdgeCorrectedResult,
    clark_evans,
    default_guard_m,
    donnelly,
    guard_zone,
    nn_distances,
)
from ecoscan.stats.quadrat import (
    MIN_EXPECTED,
    QuadratResult,
    default_quadrat_cells,
    quadrat_null,
    quadrat_test,
)
from ecoscan.stats.spacing import InhibitionDistance, inhibition_distance
from ecoscan.stats.thomas import ThomasFit, fit_thomas
from ecoscan.vocabulary import RENAMED_VALUES

__all__ = [
    "CAUTION",
    "DispersionSettings",
    "PlotDispersion",
    "analyse",
    "analyse_plot",
    "donnelly_strip_warning",
    "plain_summary",
    "plot_rng",
]


#: Usual caution printed with every result.
CAUTION = (
    "Automated point positions and counts need checking in the field before they drive "
    "management decisions or field work; follow local rules and licensed practice."
)


@dataclass(frozen=True)
class DispersionSettings(Settings):
    """Parameters of the dispersion analysis.

    Attributes
    ----------
    simulations : int
        Monte Carlo simulations under complete spatial randomness (default 999).
    seed : int
        Random seed (≥ 0); every plot gets its own stream from it (see :func:`plot_rng`).
    alpha : float
        Significance level for the verdict (default 0.05).
    direction : {'either', 'clustered', 'regular'}
        Alternative hypothesis of all tests.
    guard_m : float or None
        Guard-zone width in metres; None uses 1/√ρ per plot (twice the expected NN distance
        under CSR; :func:`ecoscan.stats.nearest.default_guard_m`).
    quadrat_m : float or None
        Quadrat side in metres; None fits a grid of equal cells to each plot's bounding box
        whose whole cells expect at least 5 points where n allows (Cochran's rule, common
        practice; :func:`ecoscan.stats.quadrat.default_quadrat_cells`).
    min_points : int
        Plots with fewer points get a warning (default 30, common practice).
    stop_after : int
        Besag & Clifford's (1991) sequential rule: stop simulating once this many simulated
        patterns are at least as extreme as the observed one in each tail (default 20); 0
        always runs all ``simulations``. Both give exact p-values.
    """

    simulations: int = 999
    seed: int = 1
    alpha: float = 0.05
    direction: str = "either"
    guard_m: float | None = None
    quadrat_m: float | None = None
    min_points: int = MIN_POINTS_ADVISED
    stop_after: int = DEFAULT_STOP_AFTER

    SECTION: ClassVar[str] = "dispersion"
    OPTIONAL: ClassVar[tuple[str, ...]] = ("guard_m", "quadrat_m")
    TYPES: ClassVar[dict[str, type | tuple[type, ...]]] = {
        "simulations": int,
        "seed": int,
        "alpha": (int, float),
        "direction": str,
        "guard_m": (int, float),
        "quadrat_m": (int, float),
        "min_points": int,
        "stop_after": int,
    }

    def __post_init__(self) -> None:
        if not isinstance(self.simulations, (int, np.integer)) or self.simulations < 1:
            raise InputError(
                f"simulations must be a whole number of at least 1 (got {self.simulations!r}); "
                "999 is usual"
            )
        if not isinstance(self.seed, (int, np.integer)) or self.seed < 0:
            raise InputError(f"seed must be a whole number >= 0 (got {self.seed!r})")
        if not (0.0 < float(self.alpha) < 1.0):
            raise InputError(f"alpha must lie between 0 and 1 (got {self.alpha!r}); 0.05 is usual")
        if self.direction in RENAMED_VALUES and RENAMED_VALUES[self.direction] in DIRECTIONS:
            raise InputError(
                f"direction '{self.direction}' was renamed '{RENAMED_VALUES[self.direction]}'"
            )
        if self.direction not in DIRECTIONS:
            raise InputError(
                f"direction must be one of {', '.join(DIRECTIONS)} (got {self.direction!r})"
            )
        if self.guard_m is not None and not (
            np.isfinite(float(self.guard_m)) and float(self.guard_m) >= 0
        ):
            raise InputError(
                f"guard width must be a number of metres >= 0 (got {self.guard_m!r}); "
                "leave it out for the default 1/sqrt(density)"
            )
        if self.quadrat_m is not None and not (
            np.isfinite(float(self.quadrat_m)) and float(self.quadrat_m) > 0
        ):
            raise InputError(
                f"quadrat size must be a positive number of metres (got {self.quadrat_m!r}); "
                "leave it out for equal cells fitted to the plot"
            )
        if not isinstance(self.min_points, (int, np.integer)) or self.min_points < 0:
            raise InputError(f"min_points must be a whole number >= 0 (got {self.min_points!r})")
        if not isinstance(self.stop_after, (int, np.integer)) or self.stop_after < 0:
            raise InputError(
                f"stop_after must be a whole number >= 0 (got {self.stop_after!r}); "
                "0 runs every simulation"
            )

    @property
    def smallest_p(self) -> float:
        """Smallest Monte Carlo p-value attainable with these settings."""
        k = 2.0 if self.direction == "either" else 1.0
        return min(1.0, k / (self.simulations + 1.0))

    def too_few_simulations(self) -> str:
        """A one-line warning when no Monte Carlo p can fall below alpha, else ''.

        The smallest rank p-value is 1 / (N + 1) for a one-sided test and 2 / (N + 1) for a
        two-sided one (Besag & Diggle 1977); when that is not below alpha, every plot is
        called random whatever its pattern.

        Examples
        --------
        >>> DispersionSettings(simulations=19).too_few_simulations()[:18]
        'with 19 simulation'
        """
        if self.smallest_p < self.alpha:
            return ""
        need = int(np.ceil((2.0 if self.direction == "either" else 1.0) / self.alpha))
        return (
            f"with {self.simulations} simulations the smallest possible Monte Carlo p is "
            f"{self.smallest_p:.3g}, not below alpha = {self.alpha:g}: no plot can be called "
            f"clustered or regular; use at least {need} simulations (999 is usual)"
        )


@dataclass(frozen=True)
class PlotDispersion:
    """All dispersion statistics of one plot.

    Attributes
    ----------
    plot_id : str
        The plot.
    n : int
        Points in the plot.
    area_m2, perimeter_m : float
        Plot area (m²) and perimeter (m, holes included).
    density_per_ha : float
        n / area, per hectare.
    nn_m : numpy.ndarray
        Each point's nearest-neighbour distance, metres (for histograms).
    clark_evans, donnelly, guard, monte_carlo, quadrat
        The result records, or None when the plot has fewer than 2 points.
    verdict : str
        ``'clustered'`` or ``'regular'`` when the Monte Carlo test rejects at ``alpha``;
        otherwise ``'no departure detected'``, or ``'too few plants to tell'`` when the
        plot's detectable range reaches beyond R 0.6 or 1.5
        (:data:`ecoscan.analysis.dispersion.detectable.TELL_LIMITS`); empty when not tested
        (fewer than 2 plants).
    guard_m, quadrat_m : float
        The guard width and quadrat side used, metres.
    n_coincident : int
        Points at distance 0 from another point.
    warnings : tuple of str
        What the reader should know about this plot's numbers.
    quadrat_p_mc : float
        Two-sided Monte Carlo p-value of the quadrat X² (multinomial simulation with the
        same number of simulations; exact where the chi-square approximation is not).
    summary : str
        One sentence in plain words that reconciles the tests (see :func:`plain_summary`).
    """

    plot_id: str
    n: int
    area_m2: float
    perimeter_m: float
    density_per_ha: float
    nn_m: np.ndarray
    clark_evans: ClarkEvansResult | None
    donnelly: EdgeCorrectedResult | None
    guard: EdgeCorrectedResult | None
    monte_carlo: MonteCarloResult | None
    quadrat: QuadratResult | None
    verdict: str
    guard_m: float
    quadrat_m: float
    n_coincident: int
    warnings: tuple[str, ...] = field(default_factory=tuple)
    quadrat_p_mc: float = float("nan")
    quadrat_height_m: float = float("nan")
    summary: str = ""
    detectable: Detectable | None = None
    verdict_in_words: str = ""
    cluster_fit: ThomasFit | None = None
    inhibition: InhibitionDistance | None = None

    @property
    def pattern_in_metres(self) -> str:
        """Cluster size and spacing (clustered plots) or the inhibition distance (regular
        plots) in plain words; '' otherwise."""
        if self.cluster_fit is not None:
            return self.cluster_fit.describe()
        if self.inhibition is not None:
            return self.inhibition.describe()
        return ""

    def row(self) -> dict[str, Any]:
        """One ``dispersion.csv`` row: :data:`DISPERSION_COLUMNS` then :data:`EXTRA_COLUMNS`."""
        nan = float("nan")
        ce, dn, gz, mc, qd = (
            self.clark_evans,
            self.donnelly,
            self.guard,
            self.monte_carlo,
            self.quadrat,
        )
        r: dict[str, Any] = {
            "plot_id": self.plot_id,
            "n": self.n,
            "area_m2": self.area_m2,
            "density_per_ha": self.density_per_ha,
            "mean_nn_m": ce.mean_nn_m if ce else nan,
            "expected_nn_m": ce.expected_nn_m if ce else nan,
            "R": ce.statistic if ce else nan,
            "z": ce.z if ce else nan,
            "p": ce.pvalue if ce else nan,
            "R_donnelly": dn.statistic if dn else nan,
            "z_donnelly": dn.z if dn else nan,
            "p_donnelly": dn.pvalue if dn else nan,
            "p_mc": mc.pvalue if mc else nan,
            "verdict": self.verdict,
            "quadrat_size_m": self.quadrat_m,
            "quadrat_chi2": qd.statistic if qd else nan,
            "quadrat_df": qd.df if qd else None,
            "quadrat_p": qd.pvalue if qd else nan,
            "vmr": qd.vmr if qd else nan,
            "morisita": qd.morisita if qd else nan,
            "morisita_std": qd.morisita_std if qd else nan,
            "warnings": "; ".join(self.warnings),
            "perimeter_m": self.perimeter_m,
            "expected_nn_donnelly_m": dn.expected_nn_m if dn else nan,
            "expected_nn_mc_m": mc.expected_nn_m if mc else nan,
            "p_mc_clustered": mc.p_lower if mc else nan,
            "p_mc_regular": mc.p_upper if mc else nan,
            "simulations": mc.simulations if mc else None,
            "guard_m": self.guard_m,
            "n_guard_focal": gz.n_focal if gz else None,
            "R_guard": gz.statistic if gz else nan,
            "z_guard": gz.z if gz else nan,
            "p_guard": mc.guard_pvalue if (mc and gz) else nan,
            "quadrat_p_mc": self.quadrat_p_mc,
            "quadrat_height_m": self.quadrat_height_m,
            "quadrat_cells": qd.q if qd else None,
            "quadrat_low_expected": qd.n_low_expected if qd else None,
            "n_coincident": self.n_coincident,
            "summary": self.summary,
        }
        det = self.detectable or Detectable(nan, nan, "")
        r.update(det.row())
        cf = self.cluster_fit
        r["verdict_in_words"] = self.verdict_in_words
        r["pattern_in_metres"] = self.pattern_in_metres
        r.update(
            {
                "cluster_plants": cf.mean_cluster_size if cf else nan,
                "cluster_plants_low95": cf.cluster_size_low if cf else nan,
                "cluster_plants_high95": cf.cluster_size_high if cf else nan,
                "cluster_width_m": cf.cluster_diameter_m if cf else nan,
                "cluster_width_low95_m": 2 * cf.sigma_low_m if cf else nan,
                "cluster_width_high95_m": 2 * cf.sigma_high_m if cf else nan,
                "clusters_per_ha": cf.clusters_per_ha if cf else nan,
                "clusters_per_ha_low95": cf.parent_intensity_low * 1e4 if cf else nan,
                "clusters_per_ha_high95": cf.parent_intensity_high * 1e4 if cf else nan,
                "cluster_fit_p": cf.fit_pvalue if cf else nan,
                "inhibition_m": self.inhibition.distance_m if self.inhibition else nan,
            }
        )
        return r


#: Donnelly's formulas are trusted down to a plot "half-width" 2A/P of this many typical
#: spacings 1/√ρ; below it the plot is flagged (measured sizes in docs/methods-dispersion.md).
DONNELLY_MIN_HALF_WIDTH = 1.5


def donnelly_strip_warning(n: int, area_m2: float, perimeter_m: float) -> str:
    """A one-line warning when a plot is too narrow for Donnelly's edge correction, else ''.

    Parameters
    ----------
    n : int
        Points in the plot.
    area_m2, perimeter_m : float
        Plot area (m²) and perimeter (m).

    Returns
    -------
    str
        The warning (reason and remedy) when 2A/P < 1.5/√ρ, i.e. when the plot's half-width
        2A/P (the half-width of a long strip; the radius of a disc) is below 1.5 typical
        spacings 1/√ρ; '' otherwise.

    Notes
    -----
    Donnelly (1978) fitted his formulas to simulations in rectangles of moderate elongation.
    In narrow strips most neighbours lie beyond the long edges, and the measured size of
    the Donnelly z-test grows far beyond α (see the table in docs/methods-dispersion.md);
    the Monte Carlo test in the exact polygon stays exact.

    Examples
    --------
    >>> donnelly_strip_warning(100, 400 * 5.0, 2 * 405.0)[:32]
    "plot narrower than Donnelly's co"
    >>> donnelly_strip_warning(100, 100 * 100.0, 400.0)
    ''
    """
    if n < 2 or not (area_m2 > 0 and perimeter_m > 0):
        return ""
    half_width = 2.0 * area_m2 / perimeter_m
    spacing = 1.0 / np.sqrt(n / area_m2)
    if half_width >= DONNELLY_MIN_HALF_WIDTH * spacing:
        return ""
    return (
        f"plot narrower than Donnelly's correction allows (half-width 2A/P = "
        f"{half_width:.3g} m, under {DONNELLY_MIN_HALF_WIDTH:g} plant spacings of "
        f"{spacing:.3g} m): p_donnelly is unreliable; use p_mc"
    )


def _significant(mc: MonteCarloResult, alpha: float) -> str:
    """The direction the Monte Carlo test found at ``alpha``, or '' when it did not reject."""
    if not mc.pvalue < alpha:
        return ""
    if mc.direction == "either":
        return mc.side
    return mc.direction


def analyse_plot(
    xy: np.ndarray,
    polygon,
    plot_id: str,
    settings: DispersionSettings | None = None,
) -> PlotDispersion:
    """Every dispersion statistic for one plot.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        The plot's points, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot outline, metres.
    plot_id : str
        The plot's id; with ``settings.seed`` it sets the plot's random stream.
    settings : DispersionSettings, optional
        Parameters (default: :class:`DispersionSettings()`).

    Returns
    -------
    PlotDispersion

    Raises
    ------
    InputError
        When the quadrat size asks for an impossibly fine grid.

    Notes
    -----
    The same methods run for every plot whatever its size. Fewer than ``min_points`` points is
    flagged but computed; fewer than 2 points gives no statistic, with a warning saying why.
    References: Clark & Evans (1954); Donnelly (1978); Besag & Diggle (1977); Morisita (1959);
    Smith-Gill (1975).
    """
    s = settings or DispersionSettings()
    xy = as_xy(xy)  # refuses a transposed (2, n) array
    n = xy.shape[0]
    area = float(polygon.area)
    perim = float(polygon.length)
    dens = n / area * 1e4
    warn: list[str] = []
    guard_m = float(s.guard_m) if s.guard_m is not None else default_guard_m(n, area)
    if s.quadrat_m is not None:
        quad_m = quad_h = float(s.quadrat_m)
    else:
        quad_m, quad_h = default_quadrat_cells(polygon, n)
    if n < 2:
        return _too_few_points(plot_id, n, area, perim, dens, guard_m, quad_m, quad_h)
    if n < s.min_points:
        warn.append(
            f"only {n} points (fewer than {s.min_points}): the tests have little power; "
            "read the verdict with caution"
        )
    d, n_zero, ce, dn, gz = _nearest_neighbour_statistics(xy, polygon, s, guard_m, warn)
    few = s.too_few_simulations()
    if few:
        warn.append(few)
    rng = plot_rng(s.seed, plot_id)
    mc = monte_carlo_nn(
        xy,
        polygon,
        simulations=s.simulations,
        direction=s.direction,
        rng=rng,
        observed_mean_m=float(d.mean()),
        guard_region=(polygon.buffer(-guard_m) if guard_m > 0 else polygon)
        if gz.n_focal >= 2
        else None,
        stop_after=s.stop_after,
    )
    qd, qnull = _quadrats(xy, polygon, plot_id, quad_m, quad_h, s.simulations, rng, warn)
    # the detectable range belongs to the plot's shape and plant count, not to the run: one
    # fixed stream (seed 1, then the polygon and n), so every run and seed reads the same
    detectable = plot_detectable(polygon, n, alpha=s.alpha)
    verdict = settle_verdict(_significant(mc, s.alpha), detectable)
    few_p = s.smallest_p if s.smallest_p >= s.alpha else 0.0
    res = PlotDispersion(
        plot_id,
        n,
        area,
        perim,
        dens,
        d,
        ce,
        dn,
        gz,
        mc,
        qd,
        verdict,
        guard_m,
        quad_m,
        n_zero,
        tuple(warn),
        qnull.pvalue,
        quad_h,
        detectable=detectable,
        verdict_in_words=verdict_with_range(verdict, detectable, few_simulations_p=few_p),
    )
    cluster_fit, inhibition = _pattern_in_metres(xy, polygon, res.verdict, rng)
    res = dataclasses.replace(res, cluster_fit=cluster_fit, inhibition=inhibition)
    summary = plain_summary(res, s.alpha, s.smallest_p)
    extra = res.pattern_in_metres
    return dataclasses.replace(res, summary=f"{summary}; {extra}" if extra else summary)


def _too_few_points(
    plot_id: str,
    n: int,
    area: float,
    perim: float,
    dens: float,
    guard_m: float,
    quad_m: float,
    quad_h: float,
) -> PlotDispersion:
    """The record of a plot with 0 or 1 plant: no statistics, one warning."""
    warn = (
        "no points in this plot: no statistics"
        if n == 0
        else "only 1 point: nearest-neighbour and quadrat statistics need at least 2"
    )
    return PlotDispersion(
        plot_id,
        n,
        area,
        perim,
        dens,
        np.full(n, np.inf),
        None,
        None,
        None,
        None,
        None,
        "",
        guard_m,
        quad_m,
        0,
        (warn,),
        quadrat_height_m=quad_h,
    )


def _nearest_neighbour_statistics(
    xy: np.ndarray,
    polygon: Any,
    s: DispersionSettings,
    guard_m: float,
    warn: list[str],
) -> tuple[np.ndarray, int, ClarkEvansResult, EdgeCorrectedResult, EdgeCorrectedResult]:
    """Nearest-neighbour distances, Clark–Evans R, Donnelly's correction and the guard zone."""
    n, area, perim = xy.shape[0], float(polygon.area), float(polygon.length)
    d = nn_distances(xy)
    n_zero = int(np.sum(d == 0.0))
    if n_zero:
        warn.append(
            f"{n_zero} points share their position with another point (distance 0 m); "
            "check for duplicate detections"
        )
    ce = clark_evans(xy, area, direction=s.direction, nn=d)
    dn = donnelly(xy, polygon, direction=s.direction, nn=d)
    strip = donnelly_strip_warning(n, area, perim)
    if strip:
        warn.append(strip)
    gz = guard_zone(xy, polygon, guard_m, direction=s.direction, nn=d)
    if gz.n_focal < 2:
        warn.append(
            f"the {guard_m:.3g} m guard zone leaves {gz.n_focal} focal points: "
            "no guard-zone estimate (use a smaller --guard)"
        )
    return d, n_zero, ce, dn, gz


def _quadrats(
    xy: np.ndarray,
    polygon: Any,
    plot_id: str,
    quad_m: float,
    quad_h: float,
    simulations: int,
    rng: np.random.Generator,
    warn: list[str],
) -> tuple[QuadratResult, Any]:
    """The quadrat test on cells clipped to the plot, with its simulated null."""
    try:
        qd = quadrat_test(xy, polygon, quad_m, cell_height_m=quad_h)
    except ValueError as exc:
        raise InputError(f"plot {plot_id}: {exc} (--quadrat sets the side in metres)") from None
    if qd.q < 2:
        warn.append(
            f"the {quad_m:.3g} m quadrat grid gives only {qd.q} cell: no quadrat test "
            "(use a smaller --quadrat)"
        )
    elif qd.n_low_expected:
        warn.append(
            f"{qd.n_low_expected} of {qd.q} quadrats expect fewer than {MIN_EXPECTED:g} points: "
            "quadrat_p is approximate (quadrat_p_mc is exact)"
        )
    qnull = quadrat_null(qd, simulations, rng=rng)
    qd = dataclasses.replace(qd, morisita_std=qnull.morisita_std)  # exact limits, not ±χ²
    return qd, qnull


#: Plants needed before a clustered plot's clusters are described by a fitted Thomas process.
MIN_POINTS_CLUSTER_FIT = 20
#: Parametric-bootstrap replicates for the 95% intervals of a clustered plot's fitted Thomas
#: process (and its goodness-of-fit test); about 2 s for a plot of 100 plants.
CLUSTER_BOOTSTRAP = 99
#: Above this many plants the cluster fit has no bootstrap interval (each replicate refits K).
CLUSTER_BOOTSTRAP_MAX_PLANTS = 2_000


def _pattern_in_metres(
    xy: np.ndarray, polygon, verdict: str, rng
) -> tuple[ThomasFit | None, InhibitionDistance | None]:
    """Fitted clusters (clustered plots) or the inhibition distance (regular plots)."""
    xy = np.asarray(xy, float).reshape(-1, 2)
    if verdict == "clustered" and xy.shape[0] >= MIN_POINTS_CLUSTER_FIT:
        reps = CLUSTER_BOOTSTRAP if xy.shape[0] <= CLUSTER_BOOTSTRAP_MAX_PLANTS else 0
        fit = fit_thomas(xy, polygon, replicates=reps, rng=rng)
        if np.isfinite(fit.sigma_m) and fit.mean_cluster_size > 1:
            return fit, None
    if verdict == "regular" and xy.shape[0] >= 2:
        return None, inhibition_distance(xy, polygon)
    return None, None


def _p_words(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.2g}"


def plain_summary(res: PlotDispersion, alpha: float = 0.05, smallest_p: float = 0.0) -> str:
    """One sentence in plain words that puts a plot's tests side by side.

    The nearest-neighbour tests look at the spacing between neighbouring plants (about
    ``mean_nn_m``); the quadrat tests look at how counts vary between cells of
    ``quadrat_m``. A pattern can be evenly spaced at one scale and patchy at the other,
    so the sentence names the scale of each finding instead of one overall verdict.

    Parameters
    ----------
    res : PlotDispersion
        One plot's results.
    alpha : float
        Significance level.
    smallest_p : float
        Smallest Monte Carlo p-value the simulations allow; above ``alpha`` the
        nearest-neighbour test cannot reject, which the sentence says.

    Returns
    -------
    str
        E.g. "no departure detected (this plot could detect R below 0.87 or above 1.25):
        R = 1.03 between neighbours, not significant; evenly spread over 5.4 m quadrats
        (variance/mean 0.37, p < 0.001): the tests look at different scales (neighbours
        about 1.6 m apart, quadrats 5.4 m), so both can hold".

    Notes
    -----
    Direction words: R > 1 means neighbours further apart than at random (evenly spaced),
    R < 1 closer (clumped) (Clark & Evans 1954); a variance-to-mean ratio of quadrat counts
    above 1 means patchy, below 1 more even than random (index of dispersion, Fisher,
    Thornton & Mackenzie 1922). The nearest-neighbour finding is the Monte Carlo verdict
    (``pattern``); the quadrat finding uses the exact p (``quadrat_p_mc``) when available.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> xy = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T
    >>> s = DispersionSettings(simulations=99)
    >>> res = analyse_plot(xy, shapely.box(0, 0, 20, 20), "grid", s)
    >>> plain_summary(res).split(" (")[0]
    'evenly spaced between neighbours'
    """
    if res.n < 2 or res.clark_evans is None:
        return f"too few plants to describe a pattern (n = {res.n})"
    r = res.clark_evans.statistic
    p_mc = res.monte_carlo.pvalue if res.monte_carlo else float("nan")
    if res.verdict == "regular":
        nn_dir, nn = 1, f"evenly spaced between neighbours (R = {r:.2f}, {_p_words(p_mc)})"
    elif res.verdict == "clustered":
        nn_dir, nn = -1, f"clumped between neighbours (R = {r:.2f}, {_p_words(p_mc)})"
    else:
        few = smallest_p >= alpha
        words = res.verdict_in_words or verdict_with_range(
            res.verdict or NO_DEPARTURE,
            res.detectable,
            few_simulations_p=smallest_p if few else 0.0,
        )
        if few:
            text = f"{words}: R = {r:.2f} between neighbours"
        else:
            text = f"{words}: R = {r:.2f} between neighbours, not significant"
        nn_dir, nn = 0, text
    qd = res.quadrat
    if qd is None or qd.q < 2 or not np.isfinite(qd.vmr):
        return nn
    qp = res.quadrat_p_mc if np.isfinite(res.quadrat_p_mc) else qd.pvalue
    side = f"{res.quadrat_m:.2g} m"
    if qp <= alpha and qd.vmr > 1:
        q_dir, q = -1, f"patchy over {side} quadrats (variance/mean {qd.vmr:.2f}, {_p_words(qp)})"
    elif qp <= alpha and qd.vmr < 1:
        q_dir, q = (
            1,
            (f"evenly spread over {side} quadrats (variance/mean {qd.vmr:.2f}, {_p_words(qp)})"),
        )
    else:
        q_dir, q = 0, f"counts per {side} quadrat as random (variance/mean {qd.vmr:.2f})"
    text = f"{nn}; {q}"
    if nn_dir != q_dir:
        text += (
            f": the tests look at different scales (neighbours about "
            f"{res.clark_evans.mean_nn_m:.2g} m apart, quadrats {side}), so both can hold"
        )
    return text


def analyse(
    inputs: SurveyInputs, settings: DispersionSettings | None = None
) -> list[PlotDispersion]:
    """Analyse every plot of the layer, in layer order, empty plots included.

    Parameters
    ----------
    inputs : SurveyInputs
        Points and plots in one metric CRS (:func:`ecoscan.io.inputs.load_points_and_plots`).
    settings : DispersionSettings, optional
        Parameters (default: :class:`DispersionSettings()`).

    Returns
    -------
    list of PlotDispersion
        One per plot. Each plot's random stream comes from
        ``SeedSequence([seed, crc32(plot_id)])``, so its numbers do not depend on the others.
    """
    s = settings or DispersionSettings()
    out = []
    plots = inputs.plots
    for i in progress(range(len(plots)), total=len(plots), desc="plots", unit="plot"):
        plot = plots[i]
        out.append(analyse_plot(inputs.plot_points(i), plot.geometry, plot.plot_id, s))
    return out
