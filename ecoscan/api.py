"""The public Python API: one function per job, arrays and polygons in, rows out.

``ecoscan.dispersion``, ``ecoscan.scales``, ``ecoscan.detect``, ``ecoscan.compare`` and
``ecoscan.change`` are thin functions over the engines the commands use
(:mod:`ecoscan.analysis.dispersion`, :mod:`ecoscan.analysis.scales`, :mod:`ecoscan.detect`,
:mod:`ecoscan.analysis.compare`, :mod:`ecoscan.analysis.change`), so they give the numbers the
command line writes for the same inputs and seed. They check their arguments first and say
which argument is wrong and how to fix it; results are :class:`~ecoscan.records.Row` and
:class:`~ecoscan.records.Table` objects whose attribute names are the CSV column names
(``docs/columns.md``).

Coordinates are metres in a projected CRS (or local metres). A plot is a shapely Polygon or
MultiPolygon (holes allowed) or an ``(xmin, ymin, xmax, ymax)`` tuple; several plots are a
mapping from plot id to plot. Randomness comes from ``rng=``: an int seed or a
:class:`numpy.random.Generator`; each plot (or pair of groups) gets its own stream derived
from it, so same seed, same numbers. See ``docs/api.md``.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from numbers import Real
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import shapely

from ecoscan.arguments import as_plot, as_xy, is_box
from ecoscan.errors import InputError
from ecoscan.records import Row, Table
from ecoscan.settings import whole_number

__all__ = [
    "Change",
    "Comparison",
    "Detection",
    "Dispersion",
    "Scales",
    "as_plot",
    "as_xy",
    "change",
    "compare",
    "detect",
    "dispersion",
    "scales",
]

RngLike = int | np.random.Generator | None


# ----------------------------------------------------------------------------- checking


def _as_plots(plots: Any, name: str = "plots") -> list[tuple[str, shapely.Geometry]]:
    """(id, polygon) pairs from one plot, a mapping id -> plot, or a sequence of plots."""
    if is_box(plots) or isinstance(plots, shapely.Geometry):
        return [("plot", as_plot(plots, name))]
    if isinstance(plots, Mapping):
        if not plots:
            raise InputError(f"{name} is empty; give at least one plot")
        return [(str(k), as_plot(v, f"{name}[{k!r}]")) for k, v in plots.items()]
    if isinstance(plots, Sequence) and not isinstance(plots, str) and plots:
        return [(str(i + 1), as_plot(v, f"{name}[{i}]")) for i, v in enumerate(plots)]
    raise InputError(
        f"{name} must be a plot (shapely polygon or (xmin, ymin, xmax, ymax)), a mapping "
        f"from plot id to plot, or a list of plots; got {type(plots).__name__}"
    )


def _inside(xy: np.ndarray, polygon: shapely.Geometry) -> np.ndarray:
    """Which points lie in the plot, its boundary included."""
    return shapely.intersects_xy(polygon, xy[:, 0], xy[:, 1])


def _only_inside(xy: np.ndarray, polygon: shapely.Geometry, name: str, xy_name: str = "xy") -> None:
    out = int(np.sum(~_inside(xy, polygon)))
    if not out:
        return
    if xy_name == "xy":
        raise InputError(
            f"{out} of {xy.shape[0]} points in xy lie outside {name}; pass only the plot's "
            f"points (xy[shapely.intersects_xy({name}, xy[:, 0], xy[:, 1])]) or give several "
            "plots as a mapping from plot id to plot"
        )
    raise InputError(
        f"{out} of {xy.shape[0]} points of {xy_name} lie outside its plot; pass only the "
        "plot's points (shapely.intersects_xy(plot, x, y) selects them)"
    )


def _seed(rng: RngLike) -> int:
    from ecoscan.stats.csr import run_seed

    if not (rng is None or isinstance(rng, np.random.Generator) or whole_number(rng)):
        raise InputError(
            f"rng must be a whole-number seed, a numpy.random.Generator or None; got {rng!r}"
        )
    if whole_number(rng) and int(rng) < 0:
        raise InputError(f"rng as a seed must be >= 0; got {rng!r}")
    return run_seed(rng)


# ----------------------------------------------------------------------------- results


class Dispersion(Row):
    """One plot's dispersion statistics: the columns of ``dispersion.csv``.

    ``detail`` holds the :class:`ecoscan.analysis.dispersion.compute.PlotDispersion` record
    (nearest-neighbour distances, the Monte Carlo and quadrat records).
    """

    __slots__ = ()
    SHOWN: ClassVar[tuple[str, ...]] = (
        "plot_id", "n", "density_per_ha", "R", "R_donnelly", "p_mc", "verdict",
    )  # fmt: skip


class Scales(Row):
    """One plot's analysis across distances: the columns of ``scales.csv``.

    :meth:`functions` gives the curves and their envelopes (``functions.csv``); ``detail``
    holds the :class:`ecoscan.analysis.scales.compute.PlotScales` record.
    """

    __slots__ = ()
    SHOWN: ClassVar[tuple[str, ...]] = (
        "plot_id", "n", "p_global", "clustered_ranges_m", "regular_ranges_m",
    )  # fmt: skip

    def functions(self) -> Table:
        """The observed functions with their envelopes, one row per function and distance.

        Returns
        -------
        Table
            Columns of ``functions.csv``: plot_id, function, distance_m, value, csr_value,
            band_low, band_high, pointwise_low, pointwise_high, band, unit.
        """
        from ecoscan.analysis.scales.columns import FUNCTION_COLUMNS, function_rows

        rows = function_rows([self.detail]) if self.detail is not None else []
        return Table([Row(r) for r in rows], FUNCTION_COLUMNS, name="functions")


class Detection:
    """Plants found in a raster by :func:`detect`.

    Attributes
    ----------
    points : Table
        One row per plant, columns of the points CSV (``x``, ``y`` in metres, then
        ``diameter_m``, ``height_m``, ``score``... as the detector gives them).
    n : int
        Number of plants.
    method, index : str
        Detector and vegetation layer used.
    pixel_size_m : float
        Ground pixel size, metres.
    crs : pyproj.CRS or None
        CRS of ``x``, ``y``.
    notes, warnings : list of str
    detail : ecoscan.detect.DetectionResult
    """

    def __init__(self, result: Any) -> None:
        pts = result.points
        names = list(pts.attrs)
        geoms = shapely.points(pts.x, pts.y) if pts.n else []
        rows = [
            Row(
                {"x": float(pts.x[i]), "y": float(pts.y[i]),
                 **{k: pts.attrs[k][i] for k in names}},
                geometry=geoms[i],
            )
            for i in range(pts.n)
        ]  # fmt: skip
        self.points = Table(rows, ["x", "y", *names], name="points", notes=result.notes)
        self.n = int(pts.n)
        self.method = result.method
        self.index = result.index
        self.pixel_size_m = float(result.pixel_size_m)
        self.crs = pts.crs
        self.notes = list(result.notes)
        self.warnings = list(result.warnings)
        self.detail = result

    def to_records(self) -> list[dict[str, Any]]:
        """The points as plain dicts (``pandas.DataFrame`` reads them)."""
        return self.points.to_records()

    @property
    def __geo_interface__(self) -> dict[str, Any]:
        """The points as a GeoJSON-like FeatureCollection (coordinates in ``crs``)."""
        return self.points.__geo_interface__

    def __repr__(self) -> str:
        crs = self.crs.to_string() if self.crs is not None else "local metres"
        return (
            f"Detection(n={self.n}, method={self.method!r}, index={self.index!r}, "
            f"pixel_size_m={self.pixel_size_m:.4g}, crs={crs!r})"
        )


class Comparison:
    """Groups of plots compared by :func:`compare`.

    Attributes
    ----------
    groups : Table
        One row per group, columns of ``groups.csv``.
    pairs : Table
        One row per pair of groups, columns of ``comparison.csv``.
    by : str
        What the groups are.
    notes : list of str
    detail : ecoscan.analysis.compare.compute.ComparisonResult
    """

    def __init__(self, result: Any) -> None:
        from ecoscan.analysis.compare.columns import (
            GROUP_COLUMNS,
            PAIR_COLUMNS,
            comparison_rows,
            group_rows,
        )

        self.groups = Table([Row(r) for r in group_rows(result)], GROUP_COLUMNS, name="groups")
        self.pairs = Table([Row(r) for r in comparison_rows(result)], PAIR_COLUMNS, name="pairs")
        self.by = result.by
        self.notes = list(result.notes)
        self.detail = result

    def to_dict(self) -> dict[str, list[dict[str, Any]]]:
        """``{"groups": [...], "pairs": [...]}`` as plain records."""
        return {"groups": self.groups.to_records(), "pairs": self.pairs.to_records()}

    def __repr__(self) -> str:
        return f"Comparison(by={self.by!r}, groups={len(self.groups)}, pairs={len(self.pairs)})"


class Change:
    """Plants followed between two dates by :func:`change`.

    Attributes
    ----------
    plots : Table
        One row per plot, columns of ``change.csv``.
    overall : Row
        The same over all plots (``plot_id`` = ``all``).
    plants : Table
        One row per plant, columns of ``plants.csv`` (status persisting, lost or new).
    shift_x_m, shift_y_m : float
        The co-registration shift removed before matching (later ≈ earlier + shift).
    notes, warnings : list of str
    detail : ecoscan.analysis.change.compute.ChangeResult
    """

    def __init__(self, result: Any) -> None:
        from ecoscan.analysis.change.columns import CHANGE_COLUMNS, PLANT_COLUMNS

        geom = {}
        if result.layer is not None:
            geom = {p.plot_id: p.geometry for p in result.layer.plots}
        self.plots = Table(
            [Row(r, geometry=geom.get(r["plot_id"])) for r in result.plots],
            CHANGE_COLUMNS,
            name="change",
        )
        self.overall = Row(result.overall)
        prow = result.plant_rows()
        pts = shapely.points(result.x_m, result.y_m) if prow else []
        self.plants = Table(
            [Row(r, geometry=pts[i]) for i, r in enumerate(prow)], PLANT_COLUMNS, name="plants"
        )
        self.shift_x_m = float(result.shift_x_m)
        self.shift_y_m = float(result.shift_y_m)
        self.notes = list(result.notes)
        self.warnings = list(result.warnings)
        self.detail = result

    def to_dict(self) -> dict[str, Any]:
        """``{"plots": [...], "overall": {...}, "plants": [...]}`` as plain records."""
        return {
            "plots": self.plots.to_records(),
            "overall": self.overall.to_dict(),
            "plants": self.plants.to_records(),
        }

    def __repr__(self) -> str:
        o = self.overall
        return (
            f"Change(persisting={o.persisting}, lost={o.lost}, new={o.new}, "
            f"shift_x_m={self.shift_x_m:.3g}, shift_y_m={self.shift_y_m:.3g}, "
            f"plots={len(self.plots)})"
        )


# ---------------------------------------------------------------------------- functions


def _per_plot(xy: np.ndarray, pairs: list[tuple[str, shapely.Geometry]]):
    """Each plot's points (boundary included) and a note on points outside every plot."""
    masks = [_inside(xy, g) for _, g in pairs]
    outside = int(np.sum(~np.logical_or.reduce(masks))) if masks and xy.shape[0] else 0
    notes = (
        [f"{outside} of {xy.shape[0]} points lie outside every plot and were left out"]
        if outside
        else []
    )
    return masks, notes


def dispersion(
    xy: Any,
    plot: Any,
    *,
    plot_id: str = "plot",
    simulations: int = 999,
    rng: RngLike = 1,
    alpha: float = 0.05,
    direction: str = "either",
    guard_m: float | None = None,
    quadrat_m: float | None = None,
    min_points: int = 30,
    stop_after: int = 20,
) -> Dispersion | Table:
    """Is a plot's pattern clustered, random or regular? Every dispersion statistic.

    Parameters
    ----------
    xy : array-like, shape (n, 2)
        Plant positions, metres.
    plot : shapely polygon, (xmin, ymin, xmax, ymax), or mapping of plot id to plot
        One plot (then every point must lie in it, boundary included), or several (then
        each plot takes the points inside it and the result is a :class:`Table`).
    plot_id : str
        Name of a single plot; with the seed it sets the plot's random stream.
    simulations : int
        Monte Carlo simulations under complete spatial randomness (999 usual).
    rng : int, numpy.random.Generator or None
        Seed; each plot's stream is ``SeedSequence([seed, crc32(plot_id)])``.
    alpha : float
        Significance level of the verdict.
    direction : {'either', 'clustered', 'regular'}
        Which departure from randomness the tests look for.
    guard_m, quadrat_m : float, optional
        Guard-zone width and quadrat side, metres (default: fitted to each plot).
    min_points : int
        Plots with fewer points get a warning.
    stop_after : int
        Sequential Monte Carlo stopping (Besag & Clifford 1991); 0 runs all simulations.

    Returns
    -------
    Dispersion or Table of Dispersion
        Columns of ``dispersion.csv``: ``R``, ``R_donnelly``, ``p_mc``, ``verdict``...

    Raises
    ------
    InputError
        Bad arguments (named in the message).

    Examples
    --------
    >>> import numpy as np, ecoscan
    >>> grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T   # 100 plants, 2 m apart
    >>> res = ecoscan.dispersion(grid, (0, 0, 20, 20), simulations=99)
    >>> res.verdict, round(res.R, 2)
    ('regular', 2.0)
    """
    from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot

    xy = as_xy(xy)
    settings = DispersionSettings(
        simulations=simulations,
        seed=_seed(rng),
        alpha=alpha,
        direction=direction,
        guard_m=guard_m,
        quadrat_m=quadrat_m,
        min_points=min_points,
        stop_after=stop_after,
    )
    if is_box(plot) or isinstance(plot, shapely.Geometry):
        poly = as_plot(plot)
        _only_inside(xy, poly, "plot")
        res = analyse_plot(xy, poly, str(plot_id), settings)
        return Dispersion(res.row(), geometry=poly, detail=res)
    pairs = _as_plots(plot, "plot")
    masks, notes = _per_plot(xy, pairs)
    rows = []
    for (pid, poly), m in zip(pairs, masks, strict=True):
        res = analyse_plot(xy[m], poly, pid, settings)
        rows.append(Dispersion(res.row(), geometry=poly, detail=res))
    cols = list(rows[0]) if rows else []
    return Table(rows, cols, name="dispersion", notes=notes)


def scales(
    xy: Any,
    plot: Any,
    *,
    plot_id: str = "plot",
    simulations: int = 199,
    rng: RngLike = 1,
    alpha: float = 0.05,
    max_distance_m: float | None = None,
    steps: int = 100,
    functions: Sequence[str] = ("K", "L", "g", "G", "F", "J"),
    global_test: str = "rank-length",
    test_function: str = "L",
    min_points: int = 10,
    labels: Any = None,
    kinds: tuple[str, str] | None = None,
) -> Scales | Table:
    """At which distances is a plot clustered or regular? K, L, g, G, F, J with envelopes.

    Parameters
    ----------
    xy : array-like, shape (n, 2)
        Plant positions, metres.
    plot : shapely polygon, (xmin, ymin, xmax, ymax), or mapping of plot id to plot
        As for :func:`dispersion`.
    plot_id : str
        Name of a single plot (also seeds its stream).
    simulations : int
        Patterns simulated under complete spatial randomness per plot.
    rng : int, numpy.random.Generator or None
        Seed; each plot's stream is ``SeedSequence([seed, crc32(plot_id)])``.
    alpha : float
        Level of the envelopes and of the global test.
    max_distance_m : float, optional
        Largest distance, metres (default: a rule per plot, capped at a quarter of its
        shorter side).
    steps : int
        Number of distances.
    functions : sequence of str
        Which of K, L, g, G, F, J to compute.
    global_test : {'rank-length', 'max-deviation'}
        Global envelope test.
    test_function : {'L', 'g'}
        The function whose global test gives the verdict.
    min_points : int
        Plots with fewer plants are reported but not analysed.
    labels : array-like of str, optional
        Kind of each plant (e.g. live/dead), for the test between two kinds.
    kinds : (str, str), optional
        The two kinds to compare; needs ``labels``.

    Returns
    -------
    Scales or Table of Scales
        Columns of ``scales.csv`` (``p_global``, ``clustered_ranges_m``,
        ``regular_ranges_m``, ``verdict``...); ``.functions()`` gives the curves.

    Examples
    --------
    >>> import numpy as np, ecoscan
    >>> xy = np.random.default_rng(0).uniform(0, 50, (60, 2))
    >>> res = ecoscan.scales(xy, (0, 0, 50, 50), simulations=19, steps=20, functions=["L"])
    >>> res.n, res.test_function, len(res.functions()) > 0
    (60, 'L', True)
    """
    from ecoscan.analysis.scales.columns import SCALES_COLUMNS, scales_rows
    from ecoscan.analysis.scales.compute import ScalesSettings, analyse_plot

    xy = as_xy(xy)
    lab = None
    if labels is not None or kinds is not None:
        if labels is None or kinds is None:
            raise InputError("labels and kinds go together: give both, e.g. kinds=('live', 'dead')")
        lab = np.asarray(labels).astype(str)
        if lab.shape != (xy.shape[0],):
            raise InputError(
                f"labels must hold one kind per point: {xy.shape[0]} points, got shape {lab.shape}"
            )
    settings = ScalesSettings.from_mapping(
        {
            "simulations": simulations,
            "seed": _seed(rng),
            "alpha": alpha,
            "max_distance_m": max_distance_m,
            "steps": steps,
            "functions": tuple(functions),
            "global_test": global_test,
            "test_function": test_function,
            "min_points": min_points,
            "kind_field": "kind" if kinds is not None else None,
            "kinds": tuple(kinds) if kinds is not None else None,
        }
    )
    single = is_box(plot) or isinstance(plot, shapely.Geometry)
    pairs = [(str(plot_id), as_plot(plot))] if single else _as_plots(plot, "plot")
    if single:
        _only_inside(xy, pairs[0][1], "plot")
        masks, notes = [np.ones(xy.shape[0], bool)], []
    else:
        masks, notes = _per_plot(xy, pairs)
    rows = []
    for (pid, poly), m in zip(pairs, masks, strict=True):
        if lab is not None:
            m = m & np.isin(lab, list(settings.kinds))
        res = analyse_plot(xy[m], poly, pid, settings, kinds=None if lab is None else lab[m])
        rows.append(Scales(scales_rows([res])[0], geometry=poly, detail=res))
    if single:
        return rows[0]
    cols = list(dict.fromkeys([*SCALES_COLUMNS, *(k for r in rows for k in r)]))
    return Table(rows, cols, name="scales", notes=notes)


def detect(
    path: str | os.PathLike,
    *,
    plots: Any = None,
    workers: int = 1,
    **options: Any,
) -> Detection:
    """Find plants in a raster: one point per plant, in metres.

    Parameters
    ----------
    path : path-like
        A GeoTIFF (or any GDAL raster): RGB or multispectral imagery, a canopy height
        model in metres, or a class map.
    plots : path-like, PlotLayer, shapely polygon, tuple or mapping, optional
        Plots to survey: a polygon file (GeoPackage, GeoJSON, Shapefile; reprojected as
        needed), or polygons in the raster's own projected CRS. Only tiles touching them
        are read, and each point gets its ``plot_id``.
    workers : int
        Local processes for the tiles (1: this process).
    **options
        Detector settings by name (:class:`ecoscan.detect.DetectionSettings`), e.g.
        ``method="imagery"``, ``diameter="0.5:3"``, ``index="exg"``, ``min_height_m=2``.

    Returns
    -------
    Detection
        ``.points`` has the columns of the points CSV (``x``, ``y``, ``diameter_m``...).

    Raises
    ------
    InputError
        Unreadable raster, unknown or impossible option, plots that miss the raster.

    Examples
    --------
    >>> import ecoscan, tempfile
    >>> from ecoscan.synthetic import make_scene, write_scene
    >>> files = write_scene(make_scene("coarse", 256, 0), tempfile.mkdtemp())
    >>> found = ecoscan.detect(files.raster, diameter="1:6")
    >>> found.n > 0, found.points.columns[:2], found.method
    (True, ['x', 'y'], 'imagery')
    """
    from ecoscan.detect import DetectionSettings, detect_raster

    if not isinstance(path, (str, os.PathLike)):
        raise InputError(f"path must be a raster file path; got {type(path).__name__}")
    if not Path(path).exists():
        raise InputError(f"path {str(path)!r} does not exist; give a raster file (GeoTIFF)")
    if not whole_number(workers) or workers < 1:
        raise InputError(f"workers must be a whole number >= 1; got {workers!r}")
    settings = DetectionSettings.from_mapping(options)
    layer = _plot_layer(plots)
    return Detection(detect_raster(path, settings, plots=layer, workers=int(workers)))


def _plot_layer(plots: Any):
    """A PlotLayer from a file, a layer, or polygons (crs None: in the points' own CRS)."""
    from ecoscan.io.vector import read_plots
    from ecoscan.model.plots import Plot, PlotLayer

    if plots is None or isinstance(plots, PlotLayer):
        return plots
    if isinstance(plots, (str, os.PathLike)):
        if not Path(plots).exists():
            raise InputError(f"plots {str(plots)!r} does not exist; give a polygon file")
        return read_plots(plots)
    return PlotLayer([Plot(pid, g) for pid, g in _as_plots(plots)], None)


def compare(
    groups: Any,
    *,
    by: str = "auto",
    permutations: int = 999,
    rng: RngLike = 1,
    pool_dates: bool = False,
) -> Comparison:
    """Do groups of plots differ in density and spacing? Every pair of groups compared.

    Parameters
    ----------
    groups : mapping or sequence of path-like
        Either a mapping from group name to a list of plots, each plot an ``(xy, plot)``
        pair (points in metres, shapely polygon or box), or results folders written by
        ``ecoscan analyse`` / ``ecoscan survey``.
    by : {'auto', 'site', 'date', 'plot', 'folder'}
        For results folders: what forms a group. Ignored for a mapping (its keys are the
        groups).
    permutations : int
        Arrangements of the permutation tests (>= 99).
    rng : int, numpy.random.Generator or None
        Seed; each pair of groups has its own stream ``SeedSequence([seed, crc32(a),
        crc32(b)])``.
    pool_dates : bool
        For results folders: pool the dates of one place.

    Returns
    -------
    Comparison
        ``.groups`` (columns of ``groups.csv``) and ``.pairs`` (``comparison.csv``).

    Examples
    --------
    >>> import numpy as np, ecoscan
    >>> rng = np.random.default_rng(4)
    >>> box = (0, 0, 40, 40)
    >>> grid = np.mgrid[1:40:2.0, 1:40:2.0].reshape(2, -1).T
    >>> planted = [(grid + rng.normal(0, 0.1, grid.shape), box) for _ in range(3)]
    >>> natural = [(rng.uniform(0, 40, (400, 2)), box) for _ in range(3)]
    >>> res = ecoscan.compare({"planted": planted, "natural": natural}, permutations=99)
    >>> res.pairs[0].group_a, res.pairs[0].group_b, res.pairs[0].R_diff > 0.5
    ('planted', 'natural', True)
    """
    from ecoscan.analysis.compare.compute import CompareSettings, compare_groups, read_results

    settings = CompareSettings(
        by=by if not isinstance(groups, Mapping) else "folder",
        permutations=permutations,
        seed=_seed(rng),
        pool_dates=pool_dates,
    )
    if isinstance(groups, Mapping):
        tables = [_group_table(str(k), v) for k, v in groups.items()]
    elif isinstance(groups, Sequence) and not isinstance(groups, str) and groups:
        bad = [g for g in groups if not isinstance(g, (str, os.PathLike))]
        if bad:
            raise InputError(
                "groups must be a mapping from group name to [(xy, plot), ...] or a list "
                f"of results folders; got a list holding {type(bad[0]).__name__}"
            )
        tables = [read_results(g) for g in groups]
    else:
        raise InputError(
            "groups must be a mapping from group name to [(xy, plot), ...] or a list of "
            f"results folders; got {type(groups).__name__}"
        )
    res = compare_groups(
        tables,
        settings.by,
        permutations=settings.permutations,
        rng=settings.seed,
        pool_dates=settings.pool_dates,
    )
    return Comparison(res)


def _group_table(name: str, plots: Any):
    from ecoscan.analysis.compare.compute import PlotUnit, ResultsTable
    from ecoscan.model.points import PointSet
    from ecoscan.stats.compare_r import plot_nn

    if isinstance(plots, tuple) and len(plots) == 2 and not is_box(plots):
        plots = [plots]
    if not isinstance(plots, Sequence) or not plots:
        raise InputError(f"groups[{name!r}] must be a non-empty list of (xy, plot) pairs")
    units, parts = [], []
    for i, item in enumerate(plots):
        if not (isinstance(item, (tuple, list)) and len(item) == 2):
            raise InputError(f"groups[{name!r}][{i}] must be an (xy, plot) pair")
        xy = as_xy(item[0], f"groups[{name!r}][{i}] xy")
        poly = as_plot(item[1], f"groups[{name!r}][{i}] plot")
        _only_inside(xy, poly, "plot", f"groups[{name!r}][{i}]")
        units.append(PlotUnit(name, "", "", str(i + 1), plot_nn(xy, poly.area, poly.length)))
        parts.append(xy)
    xy = np.vstack(parts)
    return ResultsTable(Path("."), name, [], PointSet(xy[:, 0], xy[:, 1]), units, False, False)


def change(
    earlier: Any,
    later: Any,
    tolerance_m: float,
    *,
    plots: Any = None,
    estimate_shift: bool = True,
    simulations: int = 199,
    rng: RngLike = 1,
) -> Change:
    """Which plants persist, which were lost, which are new between two surveys?

    Parameters
    ----------
    earlier, later : array-like, shape (n, 2)
        Plant positions on the two dates, metres, in one CRS.
    tolerance_m : float
        Largest distance between a plant's two positions (after removing the shift) for
        them to be one plant: above the positional error, below the plant spacing.
    plots : shapely polygon, tuple, or mapping of plot id to plot, optional
        Plots for per-plot rows, densities and R (default: the convex hull of all plants).
    estimate_shift : bool
        Estimate and remove an overall co-registration shift first.
    simulations : int
        Monte Carlo simulations of the test of a change in R (0 skips it).
    rng : int, numpy.random.Generator or None
        Seed; each plot's stream is ``SeedSequence([seed, crc32(plot_id)])``.

    Returns
    -------
    Change
        ``.plots`` (columns of ``change.csv``), ``.overall`` and ``.plants``
        (``plants.csv``).

    Examples
    --------
    >>> import numpy as np, ecoscan
    >>> earlier = np.mgrid[1:30:3.0, 1:30:3.0].reshape(2, -1).T       # 100 plants
    >>> later = np.vstack([earlier[10:], [[15.5, 15.5]]]) + 0.05      # 10 lost, 1 new
    >>> res = ecoscan.change(earlier, later, 0.5, plots=(0, 0, 30, 30), simulations=0)
    >>> res.overall.persisting, res.overall.lost, res.overall.new
    (90, 10, 1)
    """
    from ecoscan.analysis.change.compute import ChangeSettings, detect_change
    from ecoscan.model.points import PointSet

    a = as_xy(earlier, "earlier")
    b = as_xy(later, "later")
    if not isinstance(tolerance_m, Real) or isinstance(tolerance_m, bool):
        raise InputError(f"tolerance_m must be a number of metres; got {tolerance_m!r}")
    settings = ChangeSettings(
        tolerance_m=float(tolerance_m),
        estimate_shift=bool(estimate_shift),
        simulations=simulations,
        seed=_seed(rng),
    )
    for name, arr in (("earlier", a), ("later", b)):
        if arr.shape[0] == 0:
            raise InputError(f"{name} holds no plants; give at least one position")
    res = detect_change(
        PointSet(a[:, 0], a[:, 1]),
        PointSet(b[:, 0], b[:, 1]),
        settings.tolerance_m,
        plots=_plot_layer(plots) if plots is not None else None,
        estimate_shift=settings.estimate_shift,
        simulations=settings.simulations,
        rng=settings.seed,
    )
    return Change(res)
