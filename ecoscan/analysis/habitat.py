"""Why the pattern, per plot: habitat covariates from rasters, clustering beyond habitat, and
how plant size relates to spacing.

This is the orchestration around three pure modules:

* :mod:`ecoscan.stats.intensity` fits plant density as a log-linear function of covariates
  (Berman–Turner Poisson GLM) or, without covariates, smooths it with a kernel;
* :mod:`ecoscan.stats.inhomogeneous` tests for clustering beyond that density (inhomogeneous
  L with envelopes from the fitted process in the exact plot);
* :mod:`ecoscan.stats.marks` tests whether plant size depends on how close the neighbours
  are (mark correlation with random-permutation envelopes).

Here the covariate rasters are read (a window around each plot, reprojected and resampled
bilinearly to a fine grid in the survey CRS) and checked: a raster must cover the plot,
vary over it, and be georeferenced in a way that can be trusted (no CRS with coordinates
that look like degrees is refused). A covariate's association with plant density is not
proof of its cause; check on the ground, and follow local rules and licensed practice
before acting on it.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Callable, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import shapely

from ecoscan.errors import InputError
from ecoscan.stats.inhomogeneous import HabitatTest, habitat_test, habitat_verdict
from ecoscan.stats.intensity import (
    CovariateSurface,
    IntensityFit,
    fit_intensity,
    kernel_intensity,
    quadrature_grid,
    refit_coefficients,
    simulate_inhomogeneous,
)
from ecoscan.stats.marks import MarkResult, mark_test, mark_verdict

__all__ = [
    "CovariateRasters",
    "PlotHabitat",
    "check_marks",
    "covariate_surfaces",
    "habitat_analysis",
    "parse_covariates",
]

_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
#: Largest resampled covariate grid per plot, cells per side.
MAX_GRID_SIDE = 1500


def parse_covariates(
    items: Sequence[str] | Mapping[str, Any] | None,
) -> tuple[tuple[str, str], ...]:
    """Covariates as (name, path) pairs from ``NAME=PATH`` texts or a {name: path} table.

    Raises
    ------
    InputError
        For an item without ``=``, a name that is not a plain word, or a repeated name.

    Examples
    --------
    >>> parse_covariates(["elevation=dem.tif", "wetness=twi.tif"])
    (('elevation', 'dem.tif'), ('wetness', 'twi.tif'))
    """
    if not items:
        return ()
    if isinstance(items, Mapping):
        pairs = [(str(k), str(v)) for k, v in items.items()]
    else:
        pairs = []
        for it in items:
            if isinstance(it, (tuple, list)) and len(it) == 2:
                pairs.append((str(it[0]), str(it[1])))
                continue
            name, sep, path = str(it).partition("=")
            if not sep or not name.strip() or not path.strip():
                raise InputError(
                    f"covariate {str(it)!r} should be NAME=PATH, e.g. --covariate elevation=dem.tif"
                )
            pairs.append((name.strip(), path.strip()))
    seen = set()
    for name, _p in pairs:
        if not _NAME.match(name):
            raise InputError(
                f"covariate name {name!r} should be a plain word (letters, digits, _), "
                "e.g. elevation"
            )
        if name in seen:
            raise InputError(f"covariate {name!r} is given twice; give each covariate once")
        seen.add(name)
    return tuple(pairs)


def _raster_units(src) -> str:
    try:
        u = (src.units[0] or "").strip()
    except (AttributeError, IndexError):
        u = ""
    return {"metre": "m", "meter": "m", "metres": "m", "meters": "m"}.get(u.lower(), u)


class CovariateRasters:
    """The covariate rasters of a run, each opened once; every plot reads its own window.

    A survey (or one ``ecoscan scales`` command) keeps one of these for all its plots and
    rasters, so a covariate file is opened and checked once however many plots it serves.
    Files open on first use, keyed by their resolved path; :meth:`close` (or leaving the
    ``with`` block) closes them.

    Examples
    --------
    >>> import numpy as np, shapely, rasterio, tempfile, os
    >>> from rasterio.transform import from_origin
    >>> path = os.path.join(tempfile.mkdtemp(), "dem.tif")
    >>> with rasterio.open(path, "w", driver="GTiff", width=20, height=20, count=1,
    ...                    dtype="float32", crs="EPSG:32633",
    ...                    transform=from_origin(500000, 4000020, 1, 1)) as dst:
    ...     dst.write(np.tile(np.arange(20, dtype="float32"), (20, 1))[None])
    >>> with CovariateRasters() as rasters:
    ...     for x0 in (500002, 500010):
    ...         s = covariate_surfaces([("dem", path)], shapely.box(x0, 4000002, x0 + 6,
    ...                                4000008), "p", "EPSG:32633", 1.0, rasters=rasters)
    ...     rasters.opened
    1
    """

    def __init__(self) -> None:
        self._datasets: dict[str, Any] = {}

    @property
    def opened(self) -> int:
        """How many files are open."""
        return len(self._datasets)

    def dataset(self, path: Path, label: str):
        """The open dataset of ``path``, opened and its georeferencing checked on first use.

        Raises
        ------
        InputError
            A file that cannot be read, or with no georeferencing, or no CRS and
            coordinates that look like degrees.
        """
        key = str(path.resolve())
        if key not in self._datasets:
            self._datasets[key] = _open_covariate(path, label)
        return self._datasets[key]

    def close(self) -> None:
        """Close every file opened."""
        for src in self._datasets.values():
            src.close()
        self._datasets.clear()

    def __enter__(self) -> CovariateRasters:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _open_covariate(p: Path, label: str):
    """Open a covariate raster and check that its georeferencing can be trusted."""
    import rasterio

    from ecoscan.io.crs import looks_like_degrees

    with _reading(label):
        src = rasterio.open(p)
    b = src.bounds
    if src.crs is None:
        if src.transform.is_identity:
            src.close()
            raise InputError(
                f"{label} has no georeferencing; give a GeoTIFF with a CRS "
                "and a transform in the plots' coordinates"
            )
        if looks_like_degrees(np.array([b.left, b.right]), np.array([b.bottom, b.top])):
            src.close()
            raise InputError(
                f"{label} has no CRS and its coordinates look like degrees; "
                "assign its CRS (e.g. gdal_edit.py -a_srs EPSG:4326) or "
                "reproject it to the plots' metric CRS"
            )
    return src


@contextmanager
def _reading(label: str):
    """Rasterio's read errors as one-line input errors; no warning for rasters without a
    CRS (their coordinates are taken to be the plots')."""
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning, RasterioIOError

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            yield
    except (RasterioIOError, rasterio.errors.RasterioError) as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"cannot read {label}: {msg}; give a GeoTIFF") from None


def covariate_surfaces(
    covariates: Sequence[tuple[str, str]],
    polygon: shapely.Geometry,
    plot_id: str,
    survey_crs,
    cell_m: float,
    *,
    rasters: CovariateRasters | None = None,
) -> list[CovariateSurface]:
    """Read each covariate raster around one plot onto a common grid in the survey CRS.

    Parameters
    ----------
    covariates : sequence of (name, path)
        Covariate names and raster files.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, in the survey CRS (metres).
    plot_id : str
        Its id (for messages).
    survey_crs : pyproj.CRS or None
        The CRS of the plot; None for local coordinates in metres.
    cell_m : float
        Cell size of the common grid, metres.
    rasters : CovariateRasters, optional
        The run's open covariate files (each opened once for all plots); by default the
        files are opened for this plot only.

    Returns
    -------
    list of CovariateSurface
        One per covariate, on the same grid (cells whose centres lie within a cell of the
        plot's bounding box).

    Raises
    ------
    InputError
        A raster that cannot be read, has no CRS but coordinates in degrees, does not cover
        the plot, or is constant over it.

    Examples
    --------
    See :class:`CovariateRasters`.
    """
    if rasters is None:
        with CovariateRasters() as own:
            return covariate_surfaces(covariates, polygon, plot_id, survey_crs, cell_m, rasters=own)
    from rasterio.transform import from_origin
    from rasterio.warp import Resampling, reproject

    x0, y0, x1, y1 = polygon.bounds
    cell = float(cell_m)
    x0, y0, x1, y1 = x0 - cell, y0 - cell, x1 + cell, y1 + cell
    cols = min(MAX_GRID_SIDE, max(2, math.ceil((x1 - x0) / cell)))
    rows = min(MAX_GRID_SIDE, max(2, math.ceil((y1 - y0) / cell)))
    cell = max((x1 - x0) / cols, (y1 - y0) / rows)
    dst_transform = from_origin(x0, y0 + rows * cell, cell, cell)
    out = []
    for name, path in covariates:
        p = Path(path)
        label = f"covariate {name} ({path})"
        if not p.is_file():
            raise InputError(f"{label}: the file does not exist; check the path")
        src = rasters.dataset(p, label)
        arr, src_tr, units, work_crs = _covariate_window(
            src, label, plot_id, survey_crs, (x0, y0, x1, y1)
        )
        dst = np.full((rows, cols), np.nan)
        same = survey_crs if survey_crs is not None else work_crs
        crs_a = work_crs if work_crs is not None else "EPSG:3857"  # local: same frame both ends
        crs_b = same if same is not None else "EPSG:3857"
        reproject(
            arr,
            dst,
            src_transform=src_tr,
            src_crs=crs_a,
            dst_transform=dst_transform,
            dst_crs=crs_b,
            src_nodata=np.nan,
            dst_nodata=np.nan,
            resampling=Resampling.bilinear,
        )
        out.append(
            CovariateSurface(name, units, dst, x0 + cell / 2, y0 + rows * cell - cell / 2, cell)
        )
    return out


def _covariate_window(
    src,
    label: str,
    plot_id: str,
    survey_crs: Any,
    bounds: tuple[float, float, float, float],
) -> tuple[np.ndarray, Any, str, Any]:
    """Read the part of an open covariate raster around ``bounds`` (survey CRS), a margin
    included.

    Returns the values (NaN where masked), their affine transform, the raster's unit and
    the CRS the values are in.
    """
    from rasterio.warp import transform_bounds
    from rasterio.windows import Window, from_bounds

    with _reading(label):
        work_crs = src.crs if src.crs is not None else survey_crs
        if survey_crs is None or work_crs is None:
            pb = bounds
        else:
            pb = transform_bounds(survey_crs, work_crs, *bounds, densify_pts=21)
        win = from_bounds(*pb, transform=src.transform)
        c0 = max(0, math.floor(win.col_off) - 2)
        r0 = max(0, math.floor(win.row_off) - 2)
        c1 = min(src.width, math.ceil(win.col_off + win.width) + 2)
        r1 = min(src.height, math.ceil(win.row_off + win.height) + 2)
        if c1 <= c0 or r1 <= r0:
            raise InputError(
                f"{label} does not cover plot {plot_id}; give a raster that "
                "covers every plot (check its CRS and extent)"
            )
        w = Window(c0, r0, c1 - c0, r1 - r0)
        data = src.read(1, window=w, out_dtype="float64", masked=True)
        arr = np.where(np.ma.getmaskarray(data), np.nan, np.ma.getdata(data))
        return arr, src.window_transform(w), _raster_units(src), work_crs


def _sample(surfaces: Sequence[CovariateSurface], xy: np.ndarray) -> np.ndarray:
    return np.column_stack([s.at(xy) for s in surfaces])


def _check_covered(
    surfaces, covariates, z_dummy: np.ndarray, z_plants: np.ndarray, plot_id: str
) -> None:
    for k, (name, path) in enumerate(covariates):
        zk = np.r_[z_plants[:, k], z_dummy[:, k]]
        bad = ~np.isfinite(zk)
        if bad.any():
            share = 100.0 * bad.mean()
            raise InputError(
                f"covariate {name} ({path}) does not cover plot {plot_id} "
                f"({share:.0f}% of the plot without data); give a raster that covers every "
                "plot, without nodata over it"
            )
        spread = float(np.ptp(zk))
        if not spread > 1e-9 * max(1.0, float(np.max(np.abs(zk)))):
            raise InputError(
                f"covariate {name} ({path}) is constant over plot {plot_id} (value "
                f"{zk[0]:.6g}); its effect cannot be estimated there: drop it or give a "
                "raster that varies over the plot"
            )


def check_marks(values: np.ndarray, mark: str, source: str, plot_id: str) -> np.ndarray:
    """The marks of one plot as floats, or a one-line error naming the file and plot.

    Raises
    ------
    InputError
        When a value is missing or not a number.

    Examples
    --------
    >>> check_marks(np.array(["1.5", "2"], dtype=object), "diameter_m", "p.csv", "A").tolist()
    [1.5, 2.0]
    """
    v = np.asarray(values)
    try:
        f = np.array(
            [
                float(x) if not (isinstance(x, str) and not x.strip()) else np.nan
                for x in v.tolist()
            ],
            float,
        )
    except (TypeError, ValueError):
        bad = next(x for x in v.tolist() if not _is_number(x))
        raise InputError(
            f"mark column {mark!r} of {source} has a value that is not a number ({bad!r}) in "
            f"plot {plot_id}; give a numeric column for --mark"
        ) from None
    missing = int(np.sum(~np.isfinite(f)))
    if missing:
        raise InputError(
            f"mark column {mark!r} of {source} has {missing} missing value"
            f"{'s' if missing > 1 else ''} in plot {plot_id}; fill them in or drop those plants"
        )
    return f


def _is_number(x: Any) -> bool:
    try:
        float(x)
        return True
    except (TypeError, ValueError):
        return False


@dataclass(frozen=True)
class PlotHabitat:
    """Why the pattern, for one plot.

    Attributes
    ----------
    plot_id : str
    model : str
        What the intensity stands for ("elevation", "the smoothed density"...).
    fit : IntensityFit or None
        The covariate model (None for the kernel estimate or without the intensity part).
    kernel_bandwidth_m : float
        Bandwidth of the kernel estimate (NaN with covariates).
    test : HabitatTest or None
        Inhomogeneous functions and envelopes.
    verdict : str
        "clustering explained by ..." or "clustering beyond what ... explains, ...".
    clustered_ranges_m, regular_ranges_m : list of (float, float)
        Where L_inhom leaves its global envelope.
    intensity_grid : tuple or None
        (x, y, λ) at the quadrature's dummy points, for the map figure.
    marks : MarkResult or None
    marks_verdict : str
    smaller_ranges_m, larger_ranges_m : list of (float, float)
        Where k_mm is below / above its global envelope.
    warnings : list of str
    xy_m : numpy.ndarray or None
        The plants, metres (for the figure).
    """

    plot_id: str
    model: str
    fit: IntensityFit | None
    kernel_bandwidth_m: float
    test: HabitatTest | None
    verdict: str
    clustered_ranges_m: list[tuple[float, float]]
    regular_ranges_m: list[tuple[float, float]]
    intensity_grid: tuple[np.ndarray, np.ndarray, np.ndarray] | None
    marks: MarkResult | None = None
    marks_verdict: str = ""
    smaller_ranges_m: list[tuple[float, float]] = field(default_factory=list)
    larger_ranges_m: list[tuple[float, float]] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    xy_m: np.ndarray | None = None


def _join(names: Sequence[str]) -> str:
    names = list(names)
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def habitat_analysis(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    plot_id: str,
    *,
    surfaces: Sequence[CovariateSurface] | None = None,
    covariates: Sequence[tuple[str, str]] = (),
    kernel: bool = False,
    marks: np.ndarray | None = None,
    mark: str | None = None,
    clustered_without: bool = False,
    max_distance_m: float,
    steps: int = 100,
    simulations: int = 199,
    alpha: float = 0.05,
    test: str = "rank-length",
    rng: np.random.Generator | None = None,
) -> PlotHabitat:
    """The intensity model, the test beyond it and the mark test of one plot.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Plants, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot.
    plot_id : str
    surfaces : sequence of CovariateSurface, optional
        Covariates around the plot (:func:`covariate_surfaces`).
    covariates : sequence of (name, path)
        Their names and files (for messages).
    kernel : bool
        Without covariates, use the kernel intensity (else no intensity part).
    marks : numpy.ndarray, optional
        Numeric mark of each plant (:func:`check_marks`).
    mark : str, optional
        The mark's name.
    clustered_without : bool
        Whether the ordinary analysis found the plot clustered (for the verdict's words).
    max_distance_m, steps, simulations, alpha, test
        As in the analysis across scales.
    rng : numpy.random.Generator, optional

    Returns
    -------
    PlotHabitat

    Raises
    ------
    InputError
        When a covariate does not cover the plot or is constant over it.
    """
    rng = np.random.default_rng() if rng is None else rng
    rng_fit, rng_marks = rng.spawn(2)
    xy = np.asarray(xy, float).reshape(-1, 2)
    n = xy.shape[0]
    warn: list[str] = []
    res = None
    verdict, clu, reg = "", [], []
    model = _IntensityModel()
    if surfaces:
        model = _covariate_model(xy, polygon, plot_id, surfaces, covariates, alpha, warn)
    elif kernel:
        model = _kernel_model(xy, polygon)
    if surfaces or kernel:
        lam_fn, lam_max = model.intensity, model.intensity_max

        def simulate(size: int, gen: np.random.Generator) -> np.ndarray:
            return simulate_inhomogeneous(polygon, n, lam_fn, lam_max, size=size, rng=gen)

        res = habitat_test(
            xy,
            polygon,
            model.fit_pattern,
            simulate,
            max_distance_m,
            steps=steps,
            simulations=simulations,
            alpha=alpha,
            test=test,
            rng=rng_fit,
        )
        clu, reg, verdict = habitat_verdict(
            res, model.words, alpha, clustered_without=clustered_without
        )
    mres, mverdict, small, large = None, "", [], []
    if marks is not None and mark:
        if float(np.ptp(marks)) == 0.0:
            mverdict = f"{mark} is the same for every plant; nothing to relate to spacing"
            warn.append(mverdict)
        else:
            mres = mark_test(
                xy,
                marks,
                polygon,
                max_distance_m,
                mark=mark,
                steps=steps,
                permutations=simulations,
                alpha=alpha,
                test=test,
                rng=rng_marks,
            )
            small, large, mverdict = mark_verdict(mres, alpha)
    return PlotHabitat(
        plot_id,
        model.words,
        model.fit,
        model.bandwidth_m,
        res,
        verdict,
        clu,
        reg,
        model.grid,
        mres,
        mverdict,
        small,
        large,
        warn,
        xy,
    )


@dataclass
class _IntensityModel:
    """A plot's fitted density: how to refit it to a pattern, evaluate and bound it."""

    words: str = ""  # the model in words ("the smoothed density ...", covariate names)
    fit: IntensityFit | None = None
    bandwidth_m: float = float("nan")
    grid: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None  # x, y, density per m²
    intensity_max: float = float("nan")
    fit_pattern: Callable[[np.ndarray], np.ndarray] | None = None
    intensity: Callable[[np.ndarray], np.ndarray] | None = None


def _covariate_model(
    xy: np.ndarray,
    polygon: shapely.Geometry,
    plot_id: str,
    surfaces: Sequence[CovariateSurface],
    covariates: Sequence[tuple[str, str]],
    alpha: float,
    warn: list[str],
) -> _IntensityModel:
    """Density as a log-linear function of the habitat covariates (Berman–Turner fit)."""
    n = xy.shape[0]
    grid = quadrature_grid(polygon, None, n)
    z_dummy = _sample(surfaces, grid.dummy_xy)
    z_plants = _sample(surfaces, xy)
    _check_covered(surfaces, covariates, z_dummy, z_plants, plot_id)
    quad = grid.with_points(xy)
    fit = fit_intensity(
        quad,
        np.vstack([z_plants, z_dummy]),
        [s.name for s in surfaces],
        [s.unit for s in surfaces],
        level=1 - alpha,
    )
    # the linear predictor is bilinear in each cell of the common grid: its largest value
    # over the plot is at a grid node
    nodes = np.column_stack([s.values.ravel() for s in surfaces])
    nodes = nodes[np.all(np.isfinite(nodes), axis=1)]
    lam_max = float(np.max(fit.intensity(nodes))) * 1.0001
    lam_dummy = fit.intensity(z_dummy)
    ratio = lam_max / (n / polygon.area)
    if ratio > 200:
        warn.append(
            f"the fitted density varies {ratio:.0f}-fold over the plot; the simulations "
            "behind the test beyond habitat are slow and rest on few plants in places"
        )
    beta0 = np.r_[fit.intercept, fit.coefficients]
    centres = fit.centres

    def fit_pattern(p: np.ndarray) -> np.ndarray:
        zp = _sample(surfaces, p)
        q = grid.with_points(p)
        beta = refit_coefficients(q, np.vstack([zp, z_dummy]), centres, start=beta0)
        return np.exp(beta[0] + (zp - centres) @ beta[1:])

    def lam_fn(p: np.ndarray) -> np.ndarray:
        zp = _sample(surfaces, p)
        return np.where(np.all(np.isfinite(zp), axis=1), fit.intensity(np.nan_to_num(zp)), 0.0)

    return _IntensityModel(
        words=_join([s.name for s in surfaces]),
        fit=fit,
        grid=(grid.dummy_xy[:, 0], grid.dummy_xy[:, 1], lam_dummy),
        intensity_max=lam_max,
        fit_pattern=fit_pattern,
        intensity=lam_fn,
    )


def _kernel_model(xy: np.ndarray, polygon: shapely.Geometry) -> _IntensityModel:
    """Density smoothed from the plants themselves (kernel estimate)."""
    from scipy.spatial import cKDTree

    n = xy.shape[0]
    grid = quadrature_grid(polygon, None, n)
    quad = grid.with_points(xy)
    ki = kernel_intensity(xy, quad)
    bw = ki.bandwidth_m
    lam_dummy = ki.at_quadrature[n:]
    tree = cKDTree(grid.dummy_xy)

    def fit_pattern(p: np.ndarray) -> np.ndarray:
        return kernel_intensity(p, grid.with_points(p), bw, points_only=True).at_points

    def lam_fn(p: np.ndarray) -> np.ndarray:
        return lam_dummy[tree.query(p)[1]]

    return _IntensityModel(
        words=f"the smoothed density (kernel bandwidth {bw:.1f} m)",
        bandwidth_m=bw,
        grid=(grid.dummy_xy[:, 0], grid.dummy_xy[:, 1], lam_dummy),
        intensity_max=float(lam_dummy.max()) * 1.0001,
        fit_pattern=fit_pattern,
        intensity=lam_fn,
    )


# ------------------------------------------------------------------------------- output

#: Columns added to ``scales.csv`` for plots with a habitat or mark analysis.
HABITAT_COLUMNS = [
    "intensity_model",
    "p_habitat",
    "beyond_clustered_m",
    "beyond_regular_m",
    "habitat_verdict",
    "mark",
    "p_marks",
    "marks_smaller_m",
    "marks_larger_m",
    "marks_verdict",
]
#: Columns of ``effects.csv``: one row per plot and covariate.
EFFECT_COLUMNS = [
    "plot_id",
    "covariate",
    "covariate_unit",
    "coefficient_per_unit",
    "std_error",
    "coefficient_low",
    "coefficient_high",
    "p_covariate",
    "step",
    "ratio_per_step",
    "ratio_low",
    "ratio_high",
    "effect",
]


def _ranges(ranges: Sequence[tuple[float, float]]) -> str:
    from ecoscan.analysis.scales.compute import format_ranges

    return format_ranges(ranges)


def habitat_row(h: PlotHabitat | None) -> dict[str, Any]:
    """The :data:`HABITAT_COLUMNS` of one plot ('' where not analysed)."""
    row: dict[str, Any] = dict.fromkeys(HABITAT_COLUMNS, "")
    if h is None:
        return row
    if h.test is not None:
        row.update(
            intensity_model=h.model,
            p_habitat=h.test.pvalue,
            beyond_clustered_m=_ranges(h.clustered_ranges_m),
            beyond_regular_m=_ranges(h.regular_ranges_m),
            habitat_verdict=h.verdict,
        )
    if h.marks is not None or h.marks_verdict:
        row.update(
            mark=h.marks.mark if h.marks else "",
            p_marks=h.marks.pvalue if h.marks else "",
            marks_smaller_m=_ranges(h.smaller_ranges_m),
            marks_larger_m=_ranges(h.larger_ranges_m),
            marks_verdict=h.marks_verdict,
        )
    return row


def effect_rows(plot_id: str, h: PlotHabitat | None) -> list[dict[str, Any]]:
    """Rows of ``effects.csv`` for one plot (columns :data:`EFFECT_COLUMNS`)."""
    if h is None or h.fit is None:
        return []
    return [
        {
            "plot_id": plot_id,
            "covariate": e.covariate,
            "covariate_unit": e.unit,
            "coefficient_per_unit": e.coefficient,
            "std_error": e.std_error,
            "coefficient_low": e.ci_low,
            "coefficient_high": e.ci_high,
            "p_covariate": e.pvalue,
            "step": e.step,
            "ratio_per_step": e.ratio_per_step,
            "ratio_low": e.ratio_low,
            "ratio_high": e.ratio_high,
            "effect": e.sentence(h.fit.level),
        }
        for e in h.fit.effects
    ]


def habitat_curves(h: PlotHabitat | None) -> list[tuple[str, str, np.ndarray, Any]]:
    """(name, unit, r, envelope) of the inhomogeneous and mark curves of one plot."""
    if h is None:
        return []
    out = []
    if h.test is not None:
        t = h.test
        out += [
            ("K_inhomogeneous", "m2", t.r_m, t.K),
            ("L_inhomogeneous", "m", t.r_m, t.L),
            ("g_inhomogeneous", "1", t.r_m, t.g),
        ]
    if h.marks is not None:
        mk = h.marks
        out += [
            ("mark_correlation", "1", mk.r_m, mk.k_mm),
            ("mark_variogram", f"({mk.mark})^2", mk.r_m, mk.variogram),
        ]
    return out
