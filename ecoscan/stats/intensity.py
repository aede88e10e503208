"""Plant density that varies over a plot: a log-linear Poisson model of habitat covariates,
or a kernel estimate when no covariate is given.

**Covariate model.** The intensity (plants per m²) at a place u is

    λ(u) = exp(β₀ + β₁ z₁(u) + … + β_p z_p(u)),

with z_k the covariates (elevation, wetness, ...) read from rasters. Its maximum likelihood
fit uses the quadrature of Berman & Turner (1992) as set out by Baddeley & Turner (2000):
the log-likelihood of an inhomogeneous Poisson process, Σᵢ log λ(xᵢ) − ∫_W λ(u) du, is
approximated by a sum over quadrature points u_j (the n plants plus a regular grid of dummy
points) with weights w_j (the area of the grid cell holding u_j, shared equally among the
quadrature points in that cell): Σ_j w_j (y_j log λ_j − λ_j) with y_j = 1(u_j is a plant) / w_j.
This is the log-likelihood of a Poisson GLM with log link, responses y_j and prior (variance)
weights w_j, so a general-purpose GLM routine (statsmodels) gives the estimates, their
standard errors (from the Fisher information Σ_j w_j λ_j z_j z_jᵀ) and Wald intervals.

**Kernel estimate.** Without covariates, λ̂(u) = Σᵢ k_h(u − xᵢ) / e_h(u) with a Gaussian kernel
of standard deviation h and Diggle's (1985) edge correction e_h(u) = ∫_W k_h(u − v) dv
(computed on the same quadrature grid). The bandwidth rule is Scott's rule for two
dimensions, h = σ̄ n^(−1/6), with σ̄ the mean of the standard deviations of the x and y
coordinates (Scott 1992, from memory).

References
----------
Berman, M. & Turner, T. R. (1992). Approximating point process likelihoods with GLIM.
Applied Statistics 41: 31–38.
Baddeley, A. & Turner, R. (2000). Practical maximum pseudolikelihood for spatial point
patterns. Australian & New Zealand Journal of Statistics 42: 283–322.
Diggle, P. J. (1985). A kernel method for smoothing point process data. Applied Statistics
34: 138–147.
Scott, D. W. (1992). Multivariate Density Estimation. Wiley (the normal-reference bandwidth
σ n^(−1/(d+4)); quoted from memory).
Lewis, P. A. W. & Shedler, G. S. (1979). Simulation of nonhomogeneous Poisson processes by
thinning. Naval Research Logistics Quarterly 26: 403–413.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import shapely
from scipy.spatial import cKDTree

from ecoscan.stats.csr import as_rng, uniform_in_polygon

__all__ = [
    "CovariateEffect",
    "CovariateSurface",
    "IntensityFit",
    "KernelIntensity",
    "Quadrature",
    "QuadratureGrid",
    "effect_step",
    "fit_intensity",
    "kernel_bandwidth",
    "kernel_intensity",
    "quadrature",
    "quadrature_grid",
    "refit_coefficients",
    "simulate_inhomogeneous",
]

#: Dummy points per plant in the quadrature (Baddeley & Turner 2000 advise several times
#: more dummy than data points; 4 is their rule of thumb, from memory), and at least this many.
DUMMY_PER_PLANT = 4
MIN_DUMMY = 2500
#: Most dummy points per plot: bounds memory whatever the plot's size.
MAX_DUMMY = 40_000
#: Largest ratio of the highest to the mean intensity that the thinning simulation accepts
#: (more would need that many candidate points per plant).
MAX_THINNING_RATIO = 200.0


@dataclass(frozen=True)
class CovariateSurface:
    """A covariate on a regular north-up grid in metres.

    Attributes
    ----------
    name : str
        Covariate name, e.g. ``elevation``.
    unit : str
        Unit of the values (e.g. ``m``), '' when unknown.
    values : numpy.ndarray, shape (rows, columns)
        Values; NaN where the raster has no data.
    x0_m, y0_m : float
        Map coordinates of the centre of the top-left cell, metres.
    cell_m : float
        Cell size, metres.

    Examples
    --------
    >>> import numpy as np
    >>> s = CovariateSurface("z", "m", np.array([[0.0, 1.0], [2.0, 3.0]]), 0.5, 1.5, 1.0)
    >>> s.at(np.array([[1.0, 1.0]])).tolist()
    [1.5]
    """

    name: str
    unit: str
    values: np.ndarray
    x0_m: float
    y0_m: float
    cell_m: float

    def at(self, xy: np.ndarray) -> np.ndarray:
        """Bilinear interpolation at points (metres); NaN outside the grid or near no data."""
        xy = np.asarray(xy, float).reshape(-1, 2)
        rows, cols = self.values.shape
        c = (xy[:, 0] - self.x0_m) / self.cell_m
        r = (self.y0_m - xy[:, 1]) / self.cell_m
        # points within half a cell of the outer centres take the edge values
        c = np.where(
            (c > -0.5) & (c < 0), 0.0, np.where((c < cols - 0.5) & (c > cols - 1), cols - 1, c)
        )
        r = np.where(
            (r > -0.5) & (r < 0), 0.0, np.where((r < rows - 0.5) & (r > rows - 1), rows - 1, r)
        )
        ok = (c >= 0) & (c <= cols - 1) & (r >= 0) & (r <= rows - 1)
        c0 = np.clip(np.floor(c).astype(np.intp), 0, max(cols - 2, 0))
        r0 = np.clip(np.floor(r).astype(np.intp), 0, max(rows - 2, 0))
        fc = np.clip(c - c0, 0.0, 1.0)
        fr = np.clip(r - r0, 0.0, 1.0)
        c1 = np.minimum(c0 + 1, cols - 1)
        r1 = np.minimum(r0 + 1, rows - 1)
        v = self.values
        out = (
            v[r0, c0] * (1 - fc) * (1 - fr)
            + v[r0, c1] * fc * (1 - fr)
            + v[r1, c0] * (1 - fc) * fr
            + v[r1, c1] * fc * fr
        )
        return np.where(ok, out, np.nan)


@dataclass(frozen=True)
class Quadrature:
    """Quadrature points of one plot: the plants, then dummy points on a grid.

    Attributes
    ----------
    xy : numpy.ndarray, shape (n + m, 2)
        The n plants first, then m dummy points, metres.
    weights_m2 : numpy.ndarray, shape (n + m,)
        Area carried by each point, m² (they sum to the plot's area).
    n_data : int
        Number of plants (the first rows).
    spacing_m : float
        Side of the grid cells, metres.
    """

    xy: np.ndarray
    weights_m2: np.ndarray
    n_data: int
    spacing_m: float

    @property
    def is_data(self) -> np.ndarray:
        """True for the plants."""
        out = np.zeros(self.weights_m2.size, bool)
        out[: self.n_data] = True
        return out

    @property
    def response(self) -> np.ndarray:
        """Berman–Turner response y_j = 1(plant) / w_j, per m²."""
        return self.is_data / self.weights_m2


@dataclass(frozen=True)
class QuadratureGrid:
    """The dummy points of a plot's quadrature, built once and reused for many patterns.

    Attributes
    ----------
    dummy_xy : numpy.ndarray, shape (m, 2)
        One dummy point per grid cell meeting the plot, metres.
    cell_area_m2 : numpy.ndarray, shape (m,)
        Area of each cell inside the plot, m².
    spacing_m : float
        Cell side, metres.
    origin : (float, float)
        Lower-left corner of the grid, metres.
    shape : (int, int)
        Cells in x and in y.
    cell_index : numpy.ndarray
        For each cell of the full grid (row-major from the lower left), its dummy point's
        row, or -1 when the cell misses the plot.
    """

    dummy_xy: np.ndarray
    cell_area_m2: np.ndarray
    spacing_m: float
    origin: tuple[float, float]
    shape: tuple[int, int]
    cell_index: np.ndarray

    def with_points(self, xy: np.ndarray) -> Quadrature:
        """The quadrature of a pattern: its points with counting weights, then the dummies."""
        xy = np.asarray(xy, float).reshape(-1, 2)
        nx, ny = self.shape
        x0, y0 = self.origin
        s = self.spacing_m
        ci = np.clip(((xy[:, 0] - x0) // s).astype(np.intp), 0, nx - 1)
        cj = np.clip(((xy[:, 1] - y0) // s).astype(np.intp), 0, ny - 1)
        data_cell = self.cell_index[cj * nx + ci]
        if np.any(data_cell < 0):  # a plant in a cell whose part of the plot has no area
            near = cKDTree(self.dummy_xy).query(xy[data_cell < 0])[1]
            data_cell[data_cell < 0] = near
        counts = 1 + np.bincount(data_cell, minlength=self.dummy_xy.shape[0])
        w_dummy = self.cell_area_m2 / counts
        return Quadrature(
            np.vstack([xy, self.dummy_xy]), np.r_[w_dummy[data_cell], w_dummy], xy.shape[0], s
        )


def quadrature_grid(
    polygon: shapely.Geometry, spacing_m: float | None = None, n: int = 0
) -> QuadratureGrid:
    """The dummy grid of a plot (see :func:`quadrature`).

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    spacing_m : float, optional
        Grid spacing, metres. Default: the spacing that gives max(4 n, 2500) cells over the
        plot's area (at most 40,000).
    n : int
        Number of plants (for the default spacing).

    Returns
    -------
    QuadratureGrid
    """
    area = float(polygon.area)
    if spacing_m is None:
        target = min(max(DUMMY_PER_PLANT * n, MIN_DUMMY), MAX_DUMMY)
        spacing_m = math.sqrt(area / target)
    s = float(spacing_m)
    x0, y0, x1, y1 = polygon.bounds
    nx = max(1, math.ceil((x1 - x0) / s))
    ny = max(1, math.ceil((y1 - y0) / s))
    if nx * ny > 4 * MAX_DUMMY:
        raise ValueError(f"quadrature spacing {s:g} m gives {nx * ny} cells; use a larger one")
    gx, gy = np.meshgrid(x0 + s * (np.arange(nx) + 0.5), y0 + s * (np.arange(ny) + 0.5))
    cx, cy = gx.ravel(), gy.ravel()
    boxes = shapely.box(cx - s / 2, cy - s / 2, cx + s / 2, cy + s / 2)
    shapely.prepare(polygon)
    inside = shapely.contains_properly(polygon, boxes)
    cell_area = np.where(inside, s * s, 0.0)
    edge = np.flatnonzero(~inside & shapely.intersects(polygon, boxes))
    dummy = np.column_stack([cx, cy])
    if edge.size:
        parts = shapely.intersection(boxes[edge], polygon)
        cell_area[edge] = shapely.area(parts)
        centre_in = shapely.contains_xy(polygon, cx[edge], cy[edge])
        moved = edge[~centre_in]
        if moved.size:
            pts = shapely.point_on_surface(parts[~centre_in])
            dummy[moved] = shapely.get_coordinates(pts)
    keep = cell_area > 1e-12 * s * s
    cell_index = np.full(cx.size, -1, np.intp)
    cell_index[keep] = np.arange(int(keep.sum()))
    return QuadratureGrid(dummy[keep], cell_area[keep], s, (x0, y0), (nx, ny), cell_index)


def quadrature(
    xy: np.ndarray, polygon: shapely.Geometry, spacing_m: float | None = None
) -> Quadrature:
    """Berman–Turner quadrature points and counting weights for a plot.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants inside the plot, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    spacing_m : float, optional
        Grid spacing, metres. Default: the spacing that gives max(4 n, 2500) cells over the
        plot's area (at most 40,000).

    Returns
    -------
    Quadrature

    Notes
    -----
    The plot is cut into square cells of side s. Each cell that meets the plot gets one dummy
    point (its centre, or a point on the cell's part of the plot when the centre falls
    outside); the area of the cell inside the plot is shared equally by all quadrature
    points (plants and dummy) in it: the "counting weights" of Berman & Turner (1992).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> q = quadrature(np.array([[1.0, 1.0]]), shapely.box(0, 0, 10, 10), 1.0)
    >>> q.n_data, round(float(q.weights_m2.sum()), 6), float(q.weights_m2[0])
    (1, 100.0, 0.5)
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    return quadrature_grid(polygon, spacing_m, xy.shape[0]).with_points(xy)


@dataclass(frozen=True)
class CovariateEffect:
    """The fitted effect of one covariate on plant density.

    Attributes
    ----------
    covariate : str
        Its name.
    unit : str
        Unit of the covariate ('' when unknown).
    coefficient : float
        β, change of log-density per unit of the covariate.
    std_error : float
        Standard error of β.
    ci_low, ci_high : float
        Wald confidence interval of β at the fit's level.
    pvalue : float
        Wald test of β = 0 (two-sided).
    step : float
        A round step of the covariate for the sentence (see :func:`effect_step`).
    """

    covariate: str
    unit: str
    coefficient: float
    std_error: float
    ci_low: float
    ci_high: float
    pvalue: float
    step: float

    @property
    def ratio_per_step(self) -> float:
        """exp(β · step): density ratio for one step up the covariate."""
        return float(np.exp(self.coefficient * self.step))

    @property
    def ratio_low(self) -> float:
        """Lower limit of the density ratio per step."""
        return float(np.exp(self.ci_low * self.step))

    @property
    def ratio_high(self) -> float:
        """Upper limit of the density ratio per step."""
        return float(np.exp(self.ci_high * self.step))

    def sentence(self, level: float = 0.95) -> str:
        """The effect in plain words, e.g. "plants are 2.3 times denser per 10 m lower
        elevation (95% interval 1.6 to 3.4)"."""
        unit = f" {self.unit}" if self.unit else (" units of" if self.step != 1 else " unit of")
        step = _fmt_num(self.step)
        lvl = f"{100 * level:g}%"
        lo, hi = self.ratio_low, self.ratio_high
        if lo <= 1.0 <= hi:
            return (
                f"no clear effect of {self.covariate}: density changes by a factor "
                f"{_fmt_num(lo)} to {_fmt_num(hi)} per {step}{unit} higher {self.covariate} "
                f"({lvl} interval)"
            )
        if self.coefficient > 0:
            return (
                f"plants are {_fmt_num(self.ratio_per_step)} times denser per {step}{unit} "
                f"higher {self.covariate} ({lvl} interval {_fmt_num(lo)} to {_fmt_num(hi)})"
            )
        return (
            f"plants are {_fmt_num(1 / self.ratio_per_step)} times denser per {step}{unit} "
            f"lower {self.covariate} ({lvl} interval {_fmt_num(1 / hi)} to {_fmt_num(1 / lo)})"
        )


def _fmt_num(v: float) -> str:
    v = float(v)
    if v >= 100:
        return f"{v:.0f}"
    if v >= 10:
        return f"{v:.1f}".rstrip("0").rstrip(".")
    return f"{v:.2g}" if v < 1 else f"{v:.2f}".rstrip("0").rstrip(".")


def effect_step(values: np.ndarray, weights: np.ndarray | None = None) -> float:
    """A round step (1, 2 or 5 times a power of ten) near the covariate's spread in the plot.

    The spread is the interquartile range of the covariate over the plot's area (weighted by
    the quadrature weights), so that a step is a change that actually occurs in the plot.

    Examples
    --------
    >>> effect_step(np.linspace(100.0, 112.0, 101))
    5.0
    """
    v = np.asarray(values, float)
    w = np.ones_like(v) if weights is None else np.asarray(weights, float)
    ok = np.isfinite(v)
    v, w = v[ok], w[ok]
    order = np.argsort(v)
    cw = np.cumsum(w[order]) / w.sum()
    q1, q3 = np.interp([0.25, 0.75], cw, v[order])
    spread = float(q3 - q1)
    if not spread > 0:
        spread = float(np.ptp(v)) or 1.0
    e = math.floor(math.log10(spread))
    cands = np.array([1.0, 2.0, 5.0, 10.0]) * 10.0**e
    return float(cands[np.argmin(np.abs(np.log(cands / spread)))])


@dataclass(frozen=True)
class IntensityFit:
    """A fitted log-linear intensity.

    Attributes
    ----------
    effects : tuple of CovariateEffect
        One per covariate, in the order given.
    intercept : float
        β₀ at the covariates' centres (log plants per m²).
    centres : numpy.ndarray
        The area-weighted mean of each covariate over the plot (subtracted before fitting).
    covariance : numpy.ndarray
        Covariance of (β₀, β₁, ..., β_p).
    level : float
        Confidence level of the intervals (e.g. 0.95).
    n : int
        Plants.
    area_m2 : float
        Plot area.
    """

    effects: tuple[CovariateEffect, ...]
    intercept: float
    centres: np.ndarray
    covariance: np.ndarray
    level: float
    n: int
    area_m2: float

    @property
    def coefficients(self) -> np.ndarray:
        """β₁..β_p."""
        return np.array([e.coefficient for e in self.effects])

    def intensity(self, z: np.ndarray) -> np.ndarray:
        """λ = exp(β₀ + Σ β_k (z_k − centre_k)) for covariate rows z (shape (m, p)), per m²."""
        z = np.asarray(z, float).reshape(-1, len(self.effects))
        return np.exp(self.intercept + (z - self.centres) @ self.coefficients)


def _design(z: np.ndarray, centres: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones(z.shape[0]), z - centres])


def fit_intensity(
    quad: Quadrature,
    z: np.ndarray,
    names: Sequence[str],
    units: Sequence[str] | None = None,
    *,
    level: float = 0.95,
) -> IntensityFit:
    """Fit λ(u) = exp(β₀ + Σ β_k z_k(u)) by the Berman–Turner Poisson GLM (statsmodels).

    Parameters
    ----------
    quad : Quadrature
        Quadrature of the plot (:func:`quadrature`).
    z : numpy.ndarray, shape (n + m, p)
        Covariate values at the quadrature points (finite).
    names : sequence of str
        Covariate names.
    units : sequence of str, optional
        Their units.
    level : float
        Confidence level of the Wald intervals.

    Returns
    -------
    IntensityFit

    Notes
    -----
    ``statsmodels.api.GLM(y, X, family=Poisson(), var_weights=w)`` maximises
    Σ_j w_j (y_j log μ_j − μ_j), the quadrature approximation of the Poisson process
    log-likelihood (Berman & Turner 1992; Baddeley & Turner 2000). Covariates are centred at
    their area-weighted means, which changes only β₀ and keeps the fit well conditioned.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.stats.csr import uniform_in_polygon
    >>> poly = shapely.box(0, 0, 50, 50)
    >>> xy = uniform_in_polygon(poly, 200, rng=1)
    >>> q = quadrature(xy, poly, 1.0)
    >>> fit = fit_intensity(q, q.xy[:, :1], ["east"], ["m"])
    >>> bool(fit.effects[0].ci_low < 0 < fit.effects[0].ci_high)
    True
    """
    import statsmodels.api as sm
    from scipy.stats import norm

    z = np.asarray(z, float).reshape(quad.weights_m2.size, -1)
    p = z.shape[1]
    if len(names) != p:
        raise ValueError("one name per covariate column")
    units = list(units) if units is not None else [""] * p
    w = quad.weights_m2
    centres = (w @ z) / w.sum()
    X = _design(z, centres)
    model = sm.GLM(quad.response, X, family=sm.families.Poisson(), var_weights=w)
    res = model.fit(method="newton", maxiter=100, tol=1e-10, scale=1.0)
    beta = np.asarray(res.params, float)
    cov = np.asarray(res.cov_params(), float)
    se = np.sqrt(np.diag(cov))
    zq = float(norm.ppf(0.5 + level / 2))
    pv = 2 * norm.sf(np.abs(beta / se))
    effects = tuple(
        CovariateEffect(
            str(names[k]),
            str(units[k]),
            float(beta[k + 1]),
            float(se[k + 1]),
            float(beta[k + 1] - zq * se[k + 1]),
            float(beta[k + 1] + zq * se[k + 1]),
            float(pv[k + 1]),
            effect_step(z[:, k], w),
        )
        for k in range(p)
    )
    return IntensityFit(
        effects, float(beta[0]), centres, cov, float(level), quad.n_data, float(w.sum())
    )


def refit_coefficients(
    quad: Quadrature, z: np.ndarray, centres: np.ndarray, start: np.ndarray | None = None
) -> np.ndarray:
    """(β₀, β₁..β_p) of the same Berman–Turner likelihood by Newton's method in numpy.

    The same maximiser as :func:`fit_intensity` (checked against statsmodels in the tests)
    without its bookkeeping: used to refit the model to each simulated pattern.

    Parameters
    ----------
    quad : Quadrature
    z : numpy.ndarray, shape (n + m, p)
        Covariate values at the quadrature points.
    centres : numpy.ndarray, shape (p,)
        Centring of the covariates.
    start : numpy.ndarray, optional
        Starting coefficients.

    Returns
    -------
    numpy.ndarray, shape (p + 1,)
    """
    X = _design(np.asarray(z, float).reshape(quad.weights_m2.size, -1), centres)
    w = quad.weights_m2
    y = quad.response
    beta = np.zeros(X.shape[1]) if start is None else np.array(start, float)
    if start is None:
        beta[0] = math.log(quad.n_data / w.sum())
    for _ in range(100):
        eta = np.clip(X @ beta, -700, 700)
        mu = np.exp(eta)
        grad = X.T @ (w * (y - mu))
        hess = (X * (w * mu)[:, None]).T @ X
        try:
            step = np.linalg.solve(hess, grad)
        except np.linalg.LinAlgError:
            step = np.linalg.lstsq(hess, grad, rcond=None)[0]
        beta = beta + step
        if np.max(np.abs(step)) < 1e-10:
            break
    return beta


def simulate_inhomogeneous(
    polygon: shapely.Geometry,
    n: int,
    intensity: Callable[[np.ndarray], np.ndarray],
    max_intensity: float,
    *,
    size: int = 1,
    rng: int | np.random.Generator | None = None,
) -> np.ndarray:
    """Patterns of exactly n points from an inhomogeneous Poisson process, by thinning.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres (candidates come from :func:`ecoscan.stats.csr.uniform_in_polygon`,
        so the patterns lie in the exact plot shape).
    n : int
        Points per pattern (the process conditioned on its count: points independent with
        density λ(u) / ∫_W λ).
    intensity : callable
        λ at an array of points (shape (k, 2)), per m².
    max_intensity : float
        An upper bound of λ over the plot.
    size : int
        Number of patterns.
    rng : int or numpy.random.Generator, optional

    Returns
    -------
    numpy.ndarray, shape (size, n, 2)

    Notes
    -----
    Lewis & Shedler (1979): a uniform candidate u is kept with probability λ(u) / λ_max.
    Given their count, the points of a Poisson process are independent with density
    proportional to λ, which is what the kept candidates are.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> sims = simulate_inhomogeneous(shapely.box(0, 0, 10, 10), 30,
    ...     lambda p: np.exp(p[:, 0] / 5), np.exp(2.0), size=2, rng=1)
    >>> sims.shape
    (2, 30, 2)
    """
    gen = as_rng(rng)
    total = n * size
    out = np.empty((total, 2))
    got = 0
    drawn = kept_all = 0
    while got < total:
        need = total - got
        # acceptance so far (first guess: λ integrates to about n over the plot)
        rate = kept_all / drawn if kept_all else n / (max_intensity * polygon.area)
        block = int(min(262_144, max(64, 1.2 * need / max(rate, 1e-6))))
        cand = uniform_in_polygon(polygon, block, rng=gen)
        keep = gen.random(block) * max_intensity < intensity(cand)
        kept = cand[keep][:need]
        drawn += block
        kept_all += int(keep.sum())
        out[got : got + kept.shape[0]] = kept
        got += kept.shape[0]
    return out.reshape(size, n, 2)


@dataclass(frozen=True)
class KernelIntensity:
    """A kernel estimate of the intensity.

    Attributes
    ----------
    bandwidth_m : float
        Standard deviation of the Gaussian kernel, metres.
    at_points : numpy.ndarray
        λ̂ at the plants (leave-one-out), per m².
    at_quadrature : numpy.ndarray
        λ̂ at the quadrature points, per m².
    rule : str
        How the bandwidth was chosen.
    """

    bandwidth_m: float
    at_points: np.ndarray
    at_quadrature: np.ndarray
    rule: str


def kernel_bandwidth(xy: np.ndarray) -> float:
    """Scott's rule for two dimensions: h = σ̄ n^(−1/6), metres.

    σ̄ is the mean of the standard deviations of the x and y coordinates (Scott 1992,
    normal-reference rule h = σ n^(−1/(d+4)) with d = 2; from memory).

    Examples
    --------
    >>> import numpy as np
    >>> xy = np.random.default_rng(0).normal(0, 1, (64, 2))
    >>> float(round(kernel_bandwidth(xy) * 64 ** (1 / 6) / np.mean(np.std(xy, axis=0, ddof=1)), 6))
    1.0
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    sd = float(np.mean(np.std(xy, axis=0, ddof=1)))
    return sd * xy.shape[0] ** (-1.0 / 6.0)


def _gauss_sum(src: np.ndarray, wts: np.ndarray, dst: np.ndarray, h: float) -> np.ndarray:
    # Σ_j wts_j k_h(dst_i − src_j) over neighbours within 5h (Gaussian, sd h)
    tree = cKDTree(src)
    out = np.zeros(dst.shape[0])
    for s in range(0, dst.shape[0], 4096):
        block = dst[s : s + 4096]
        nb = tree.query_ball_point(block, 5 * h)
        lens = np.fromiter((len(b) for b in nb), np.intp, len(nb))
        if lens.sum() == 0:
            continue
        rows = np.repeat(np.arange(len(nb)), lens)
        cols = np.concatenate([np.asarray(b, np.intp) for b in nb])
        d2 = np.sum((block[rows] - src[cols]) ** 2, axis=1)
        k = np.exp(-0.5 * d2 / h**2) / (2 * np.pi * h**2) * wts[cols]
        out[s : s + 4096] = np.bincount(rows, weights=k, minlength=len(nb))
    return out


def kernel_intensity(
    xy: np.ndarray,
    quad: Quadrature,
    bandwidth_m: float | None = None,
    *,
    points_only: bool = False,
) -> KernelIntensity:
    """Gaussian kernel intensity with Diggle's edge correction.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants, metres.
    quad : Quadrature
        Quadrature of the plot (its grid gives the edge correction ∫_W k_h(u − v) dv).
    bandwidth_m : float, optional
        Kernel standard deviation; default :func:`kernel_bandwidth`.
    points_only : bool
        Compute λ̂ only at the plants (``at_quadrature`` is then empty): the edge correction
        is then needed only there, which is what refitting to many simulated patterns needs.

    Returns
    -------
    KernelIntensity
        At the plants each plant's own kernel is left out (leave-one-out, as the
        inhomogeneous K requires to avoid a bias towards randomness).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> from ecoscan.stats.csr import uniform_in_polygon
    >>> poly = shapely.box(0, 0, 40, 40)
    >>> xy = uniform_in_polygon(poly, 400, rng=2)
    >>> ki = kernel_intensity(xy, quadrature(xy, poly, 1.0), 6.0)
    >>> bool(abs(np.median(ki.at_quadrature) - 400 / 1600) < 0.05)
    True
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    rule = "given"
    if bandwidth_m is None:
        bandwidth_m = kernel_bandwidth(xy)
        rule = "Scott's rule, h = mean coordinate standard deviation x n^(-1/6)"
    h = float(bandwidth_m)
    ones = np.ones(xy.shape[0])
    self_k = 1.0 / (2 * np.pi * h**2)
    if points_only:
        edge_p = _gauss_sum(quad.xy, quad.weights_m2, xy, h)
        at_p = (_gauss_sum(xy, ones, xy, h) - self_k) / np.maximum(edge_p, 1e-12)
        return KernelIntensity(h, np.maximum(at_p, 1e-12), np.empty(0), rule)
    edge = _gauss_sum(quad.xy, quad.weights_m2, quad.xy, h)
    at_q = _gauss_sum(xy, ones, quad.xy, h) / np.maximum(edge, 1e-12)
    at_p = (_gauss_sum(xy, ones, xy, h) - self_k) / np.maximum(edge[: xy.shape[0]], 1e-12)
    return KernelIntensity(h, np.maximum(at_p, 1e-12), at_q, rule)
