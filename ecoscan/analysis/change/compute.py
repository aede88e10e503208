"""Change between two surveys of the same plants: persisting, lost and new plants per plot.

The earlier survey is the reference frame: plot membership and the map position of every
plant are taken in the earlier survey's coordinates (a recruit's position is its later
position minus the estimated shift). Both surveys' own coordinates are kept in the plants
table.

Automated counts need field checks before they drive management decisions: a "lost" plant
may be one the detector missed, a "new" one a weed or a double detection.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np
import shapely
from pyproj import CRS

from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label, transform_xy
from ecoscan.io.inputs import one_row_per_plant
from ecoscan.io.vector import reproject_geometries
from ecoscan.model.membership import assign_plots, overlap_note
from ecoscan.model.notes import WARNING, JoinedNotes, Note, codes_in
from ecoscan.model.plots import Plot, PlotLayer, id_text
from ecoscan.model.points import PointSet
from ecoscan.progress import progress
from ecoscan.settings import Settings, whole_number
from ecoscan.stats.compare_r import (
    PooledR,
    RChangeTest,
    combine_r_change,
    plot_nn,
    pooled_clark_evans,
    r_change_test,
    r_difference,
)
from ecoscan.stats.csr import keyed_rng, run_seed
from ecoscan.stats.matching import match_points
from ecoscan.stats.nearest import nn_distances
from ecoscan.stats.rates import paired_change_test, wilson_interval
from ecoscan.stats.shift import ShiftResult
from ecoscan.stats.shift import estimate_shift as _estimate_shift

__all__ = [
    "ChangeResult",
    "ChangeSettings",
    "detect_change",
]


STATUSES = ("persisting", "lost", "new")
OVERALL_ID = "all"
MIN_SHIFT_PAIRS = 10
#: Codes of the warnings in a plot's row (:class:`ecoscan.model.notes.Note`): no plants on
#: one of the dates, and too few plants for the R test's normal approximation.
NONE_EARLIER, NONE_LATER, FEW_PLANTS = "no-plants-earlier", "no-plants-later", "few-plants"
#: Code of the warning that the two surveys cover different extents.
PARTIAL_OVERLAP = "partial-overlap"


@dataclass(frozen=True)
class ChangeSettings(Settings):
    """Settings of :func:`detect_change` (also the ``change`` section of a survey file).

    Attributes
    ----------
    tolerance_m : float
        Largest distance, metres, between a plant's two positions for them to count as one
        plant (default 1.0).
    estimate_shift : bool
        Estimate and remove an overall co-registration shift first (default True).
    simulations : int
        Monte Carlo simulations of the test of a change in R (default 199; 0 skips it).
    seed : int
        Run seed (>= 0); each plot's simulations use their own stream derived from it.

    Examples
    --------
    >>> ChangeSettings.from_mapping({"tolerance_m": 0.5}).simulations
    199
    """

    tolerance_m: float = 1.0
    estimate_shift: bool = True
    simulations: int = 199
    seed: int = 1

    SECTION: ClassVar[str] = "change"
    TYPES: ClassVar[dict[str, type | tuple[type, ...]]] = {
        "tolerance_m": (int, float),
        "estimate_shift": bool,
        "simulations": int,
        "seed": int,
    }

    def __post_init__(self) -> None:
        tol = float(self.tolerance_m)
        if not (math.isfinite(tol) and tol > 0):
            raise InputError(
                f"tolerance_m must be a positive distance in metres (got {self.tolerance_m!r}), "
                "a little above the positional error between the two surveys (e.g. 0.5)"
            )
        if not whole_number(self.simulations) or self.simulations < 0:
            raise InputError(
                f"simulations must be a whole number >= 0 (got {self.simulations!r}); "
                "0 skips the test, 199 is usual"
            )
        if not whole_number(self.seed) or self.seed < 0:
            raise InputError(f"seed must be a whole number >= 0 (got {self.seed!r})")


@dataclass
class ChangeResult:
    """Everything :func:`detect_change` found.

    Attributes
    ----------
    shift_x_m, shift_y_m : float
        The shift removed before matching: later ≈ earlier + shift (0 when not estimated).
    shift : ShiftResult or None
        Details of the estimate (None when ``estimate_shift=False``).
    tolerance_m : float
        Matching tolerance, metres.
    status : numpy.ndarray of str
        Per plant: ``persisting``, ``lost`` or ``new``.
    x_m, y_m : numpy.ndarray
        Plant positions in the reference (earlier) frame, metres (columns ``x``, ``y`` of
        ``plants.csv``, so that the file reads back as points with its ``plants.prj``).
    x_earlier_m, y_earlier_m, x_later_m, y_later_m : numpy.ndarray
        Positions in each survey's own coordinates (NaN where the plant is absent).
    offset_m : numpy.ndarray
        Distance between a persisting plant's two positions after removing the shift.
    earlier_row, later_row : numpy.ndarray of float
        1-based index of the plant in each input (NaN where absent).
    plot_id : numpy.ndarray of str
        Plot holding each plant ('' outside every plot).
    plots : list of dict
        One row per plot (columns :data:`CHANGE_COLUMNS`).
    overall : dict
        The same over all plots (``plot_id`` = ``all``).
    crs : pyproj.CRS or None
        CRS of ``x_m``, ``y_m``.
    layer : PlotLayer or None
        The plots used (in ``crs``).
    notes, warnings : list of str
        What was converted or assumed; what the user should check.
    parameters : dict
        Parameters of the run.
    """

    shift_x_m: float
    shift_y_m: float
    shift: ShiftResult | None
    tolerance_m: float
    status: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    x_earlier_m: np.ndarray
    y_earlier_m: np.ndarray
    x_later_m: np.ndarray
    y_later_m: np.ndarray
    offset_m: np.ndarray
    earlier_row: np.ndarray
    later_row: np.ndarray
    plot_id: np.ndarray
    plots: list[dict[str, Any]]
    overall: dict[str, Any]
    crs: CRS | None
    layer: PlotLayer | None
    notes: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    parameters: dict[str, Any] = field(default_factory=dict)

    @property
    def counts(self) -> dict[str, int]:
        """Number of plants per status."""
        return {s: int(np.sum(self.status == s)) for s in STATUSES}

    def plant_rows(self) -> list[dict[str, Any]]:
        """The plants table as records (columns :data:`PLANT_COLUMNS`)."""
        cols = {
            "status": self.status,
            "plot_id": self.plot_id,
            "x": self.x_m,
            "y": self.y_m,
            "x_earlier_m": self.x_earlier_m,
            "y_earlier_m": self.y_earlier_m,
            "x_later_m": self.x_later_m,
            "y_later_m": self.y_later_m,
            "offset_m": self.offset_m,
            "earlier_row": self.earlier_row,
            "later_row": self.later_row,
        }
        rows = []
        for i in range(self.status.size):
            r: dict[str, Any] = {"plant_id": i + 1}
            for k, v in cols.items():
                val = v[i]
                if k.endswith("_row"):
                    val = None if not np.isfinite(val) else int(val)
                r[k] = val
            rows.append(r)
        return rows

    def plants_pointset(self) -> PointSet:
        """The plants as a :class:`PointSet` at their reference-frame positions."""
        attrs = {
            "plant_id": np.arange(1, self.status.size + 1, dtype=float),
            "status": self.status.astype(object),
            "plot_id": self.plot_id.astype(object),
            "x_earlier_m": self.x_earlier_m,
            "y_earlier_m": self.y_earlier_m,
            "x_later_m": self.x_later_m,
            "y_later_m": self.y_later_m,
            "offset_m": self.offset_m,
            "earlier_row": self.earlier_row,
            "later_row": self.later_row,
        }
        return PointSet(self.x_m, self.y_m, attrs, self.crs)


# ----------------------------------------------------------------------------- helpers


def _align_crs(earlier: PointSet, later: PointSet, notes: list[str]):
    lx, ly = later.x, later.y
    crs = earlier.crs
    if earlier.crs is not None and later.crs is not None and earlier.crs != later.crs:
        lx, ly = transform_xy(later.x, later.y, later.crs, earlier.crs)
        notes.append(
            Note(
                f"the later survey in {crs_label(later.crs)} was reprojected to the earlier "
                f"survey's {crs_label(earlier.crs)}",
                "later-reprojected",
            )
        )
    elif earlier.crs is None and later.crs is not None:
        crs = later.crs
        notes.append(
            Note(f"the earlier survey has no CRS; taken to be {crs_label(later.crs)}", "no-crs")
        )
    elif later.crs is None and earlier.crs is not None:
        notes.append(
            Note(f"the later survey has no CRS; taken to be {crs_label(earlier.crs)}", "no-crs")
        )
    return np.asarray(lx, float), np.asarray(ly, float), crs


def _align_plots(plots: PlotLayer, crs: CRS | None, notes: list[str]) -> PlotLayer:
    if plots.crs is None or crs is None or plots.crs == crs:
        return plots
    geoms = reproject_geometries(
        np.array([p.geometry for p in plots.plots], dtype=object), plots.crs, crs
    )
    notes.append(
        Note(
            f"plots in {crs_label(plots.crs)} were reprojected to {crs_label(crs)}",
            "plots-reprojected",
        )
    )
    new = [Plot(p.plot_id, g, p.attrs) for p, g in zip(plots.plots, geoms, strict=True)]
    return PlotLayer(new, crs, list(plots.notes))


def _check_overlap(a: np.ndarray, b: np.ndarray, tol: float, warnings: list[str]) -> None:
    ax0, ay0 = a.min(axis=0) - tol
    ax1, ay1 = a.max(axis=0) + tol
    bx0, by0 = b.min(axis=0)
    bx1, by1 = b.max(axis=0)
    if ax1 < bx0 or bx1 < ax0 or ay1 < by0 or by1 < ay0:
        raise InputError(
            f"the two surveys do not overlap (earlier spans x {ax0 + tol:.1f}–{ax1 - tol:.1f}, "
            f"y {ay0 + tol:.1f}–{ay1 - tol:.1f}; later x {bx0:.1f}–{bx1:.1f}, "
            f"y {by0:.1f}–{by1:.1f}); check that both files cover the same site and CRS"
        )
    ix = max(0.0, min(ax1 - tol, bx1) - max(ax0 + tol, bx0))
    iy = max(0.0, min(ay1 - tol, by1) - max(ay0 + tol, by0))
    ea = max((ax1 - ax0 - 2 * tol) * (ay1 - ay0 - 2 * tol), 1e-12)
    eb = max((bx1 - bx0) * (by1 - by0), 1e-12)
    share = ix * iy / min(ea, eb)
    if share < 0.5:
        warnings.append(
            Note(
                f"the two surveys' extents overlap by only {100 * share:.0f}% of the smaller "
                "one; plants outside the overlap show as lost or new although they were simply "
                "not surveyed twice: clip both surveys to the common area or give --plots "
                "inside it",
                PARTIAL_OVERLAP,
                WARNING,
            )
        )


def _typical_spacing(xy: np.ndarray) -> float:
    if len(xy) < 2:
        return float("nan")
    return float(np.median(nn_distances(xy)))


def _pooled_r(xys: list[np.ndarray], geoms: list[shapely.Geometry]) -> PooledR:
    """Clark–Evans R pooled over plots, each plant's neighbour searched in its own plot."""
    units = [plot_nn(xy, g.area, g.length) for xy, g in zip(xys, geoms, strict=True)]
    return pooled_clark_evans(units)


def _row(
    plot_id: str,
    area: float,
    status: np.ndarray,
    r_earlier,
    r_later,
    mc: RChangeTest | None = None,
) -> dict[str, Any]:
    persisting = int(np.sum(status == "persisting"))
    lost = int(np.sum(status == "lost"))
    new = int(np.sum(status == "new"))
    n1, n2 = persisting + lost, persisting + new
    lo, hi = wilson_interval(persisting, n1) if n1 > 0 else (float("nan"), float("nan"))
    surv = persisting / n1 if n1 else float("nan")
    d1 = n1 / area * 1e4 if area > 0 else float("nan")
    d2 = n2 / area * 1e4 if area > 0 else float("nan")
    diff = r_difference(r_later, r_earlier)
    warn: list[Note] = []
    if n1 == 0 and n2 > 0:
        warn.append(
            Note(
                "no plants on the earlier date: was this plot surveyed then?", NONE_EARLIER, WARNING
            )
        )
    if n2 == 0 and n1 > 0:
        warn.append(
            Note("no plants on the later date: was this plot surveyed then?", NONE_LATER, WARNING)
        )
    if 0 < min(n1, n2) < 30:
        warn.append(
            Note("fewer than 30 plants on a date: the R test is approximate", FEW_PLANTS, WARNING)
        )
    return {
        "plot_id": plot_id,
        "area_m2": area,
        "n_earlier": n1,
        "n_later": n2,
        "persisting": persisting,
        "lost": lost,
        "new": new,
        "survival": surv,
        "survival_low95": lo,
        "survival_high95": hi,
        "mortality": lost / n1 if n1 else float("nan"),
        "recruitment": new / n1 if n1 else float("nan"),
        "density_earlier_per_ha": d1,
        "density_later_per_ha": d2,
        "density_change_per_ha": d2 - d1,
        "p_count_change": paired_change_test(lost, new),
        "R_earlier": r_earlier.statistic,
        "R_later": r_later.statistic,
        "R_change": diff.statistic,
        "R_change_se": diff.se,
        "z_R_change": diff.z,
        "p_R_change": diff.pvalue,
        "R_later_null": float("nan") if mc is None else mc.expected,
        "p_R_change_mc": float("nan") if mc is None else mc.pvalue,
        "warnings": JoinedNotes(warn),
    }


# ------------------------------------------------------------------------------- public


def detect_change(
    earlier: PointSet,
    later: PointSet,
    tolerance_m: float,
    *,
    plots: PlotLayer | None = None,
    estimate_shift: bool = True,
    simulations: int = 199,
    rng: int | np.random.Generator | None = 1,
) -> ChangeResult:
    """Follow plants between two survey dates: which persist, which were lost, which are new.

    Parameters
    ----------
    earlier, later : PointSet
        Plant positions on the two dates (metric CRS; the later one is reprojected to the
        earlier one's CRS when they differ).
    tolerance_m : float
        Largest distance, metres, between a plant's two positions (after removing the shift)
        for them to count as the same plant. Choose it above the positional error (a few
        decimetres for drone mosaics) and well below the typical spacing between plants.
    plots : PlotLayer, optional
        Plot polygons; without them, plot membership comes from a ``plot_id`` attribute
        present in both point sets, else every plant is in one window (the convex hull of
        all plants).
    estimate_shift : bool
        Estimate and remove an overall co-registration shift first
        (:func:`ecoscan.stats.shift.estimate_shift`).
    simulations : int
        Monte Carlo simulations for the test of a change in R beyond random losses and
        recruits (:func:`ecoscan.stats.compare_r.r_change_test`); 0 skips it. Cost: about
        1 µs per plant per simulation (50 000 plants, 199 simulations: about 20 s).
    rng : int, numpy.random.Generator or None
        Seed of the run (a generator gives one draw to seed it, None fresh entropy). Each
        plot's simulations use their own stream ``SeedSequence([seed, crc32(plot_id)])``
        (:func:`ecoscan.stats.csr.keyed_rng`), so a plot's p-value does not depend on the
        other plots; same seed, same numbers.

    Returns
    -------
    ChangeResult

    Raises
    ------
    InputError
        Tolerance not a positive number, an empty survey, or surveys that do not overlap.

    Notes
    -----
    Matching is optimal one-to-one assignment within the tolerance (Kuhn 1955, via
    :func:`ecoscan.stats.matching.match_points`). Per plot: survival = persisting / n_earlier
    with a Wilson (1927) 95 % interval; recruitment = new / n_earlier; the change in count
    is tested with the exact conditional test on lost vs new (McNemar 1947); the change in
    Clark–Evans R (Clark & Evans 1954) with a z test that treats the dates as independent
    (conservative when most plants persist) and with a Monte Carlo test against random
    mortality and random recruitment that holds the earlier pattern fixed.
    """
    tol = _checked_tolerance(tolerance_m, simulations, earlier, later)
    seed = run_seed(rng)
    earlier, later = one_row_per_plant(earlier), one_row_per_plant(later)
    notes = list(dict.fromkeys([*earlier.notes, *later.notes]))
    warnings: list[Note] = []
    lx, ly, crs = _align_crs(earlier, later, notes)
    a = earlier.xy
    b = np.column_stack([lx, ly])
    _check_overlap(a, b, tol, warnings)
    spacing = min(_typical_spacing(a), _typical_spacing(b))
    if math.isfinite(spacing) and tol > spacing:
        warnings.append(
            Note(
                f"the tolerance {tol:g} m is larger than the typical spacing between plants "
                f"({spacing:.2f} m, median nearest-neighbour distance): a plant can be within "
                "reach of several others, so matches become ambiguous; use a smaller --tolerance",
                "tolerance-above-spacing",
                WARNING,
            )
        )
    shift_res = _estimate_shift(a, b, tol, rng=seed) if estimate_shift else None
    sx, sy = _shift_to_remove(shift_res, tol, notes, warnings)
    pairs = _pair_plants(a, b, tol, sx, sy)
    where = _plot_membership(plots, crs, earlier, later, pairs, notes, warnings)
    rows, overall = _change_table(pairs, where, int(simulations), seed, notes)
    missing = [r["plot_id"] for r in rows if codes_in(r["warnings"]) & {NONE_EARLIER, NONE_LATER}]
    if missing:
        warnings.append(
            Note(
                f"plot(s) {', '.join(missing[:8])} have plants on one date only: check that both "
                "surveys covered them before reading their losses or recruits",
                "one-date-only",
                WARNING,
            )
        )
    params = {
        "tolerance_m": tol,
        "estimate_shift": bool(estimate_shift),
        "reference_frame": "earlier survey",
        "matching": "optimal one-to-one assignment within the tolerance (Kuhn 1955)",
        "survival_interval": "Wilson (1927) score interval, 95%",
        "count_change_test": "exact conditional test of lost vs new (McNemar 1947)",
        "R_change_test": "z test, SE from Clark & Evans (1954), dates taken as independent; "
        "and Monte Carlo test against random losses and uniform recruits (Besag & Diggle 1977)",
        "simulations": int(simulations),
        "seed": seed,
        "random_streams": "one per plot, SeedSequence([seed, crc32(plot_id)])",
        "typical_spacing_m": spacing,
        "crs": crs_label(crs),
    }
    return ChangeResult(
        sx,
        sy,
        shift_res,
        tol,
        pairs.status.astype(str),
        pairs.xr,
        pairs.yr,
        pairs.xe,
        pairs.ye,
        pairs.xl,
        pairs.yl,
        pairs.offset,
        pairs.erow,
        pairs.lrow,
        where.plot_id.astype(str),
        rows,
        overall,
        crs,
        where.layer,
        notes,
        warnings,
        params,
    )


def _checked_tolerance(
    tolerance_m: float, simulations: int, earlier: PointSet, later: PointSet
) -> float:
    """The tolerance as a float, after checking the arguments of :func:`detect_change`."""
    tol = float(tolerance_m) if tolerance_m is not None else float("nan")
    if not (math.isfinite(tol) and tol > 0):
        raise InputError(
            f"tolerance {tolerance_m} m is not a positive distance; give --tolerance in metres, "
            "a little above the positional error between the two surveys (e.g. 0.5)"
        )
    if int(simulations) < 0:
        raise InputError(f"--simulations {simulations} is negative; use 0 (skip) or e.g. 199")
    if earlier.n == 0 or later.n == 0:
        which = "earlier" if earlier.n == 0 else "later"
        raise InputError(f"the {which} survey has no plants; check the input file")
    return tol


def _shift_to_remove(
    shift_res: ShiftResult | None, tol: float, notes: list[str], warnings: list[str]
) -> tuple[float, float]:
    """The east and north shift to remove before matching (0, 0 when none is trusted)."""
    if shift_res is None:
        return 0.0, 0.0
    if shift_res.n_pairs < MIN_SHIFT_PAIRS:
        warnings.append(
            Note(
                f"only {shift_res.n_pairs} plants pair up unambiguously, too few to estimate a "
                "shift between the surveys; no shift was removed",
                "few-shift-pairs",
                WARNING,
            )
        )
        return 0.0, 0.0
    sx, sy = shift_res.shift_x_m, shift_res.shift_y_m
    notes.append(
        Note(
            f"shift between the surveys: {sx:+.3f} m east, {sy:+.3f} m north "
            f"(from {shift_res.n_pairs} plant pairs); removed before matching",
            "shift-removed",
        )
    )
    if shift_res.length_m > tol:
        warnings.append(
            Note(
                f"the shift between the surveys ({shift_res.length_m:.2f} m) is larger than "
                "the tolerance; check the co-registration of the two mosaics",
                "shift-above-tolerance",
                WARNING,
            )
        )
    return sx, sy


@dataclass(frozen=True)
class _Pairs:
    """Every plant of either date once: persisting, then lost, then new (one array each)."""

    status: np.ndarray  # "persisting" | "lost" | "new"
    ea_idx: np.ndarray  # earlier row of the persisting and lost plants
    unmatched_b: np.ndarray  # later row of the new plants
    xe: np.ndarray  # earlier position (NaN for new plants)
    ye: np.ndarray
    xl: np.ndarray  # later position (NaN for lost plants)
    yl: np.ndarray
    xr: np.ndarray  # reference position: earlier, else later minus the shift
    yr: np.ndarray
    offset: np.ndarray  # distance between the two positions, metres
    erow: np.ndarray  # 1-based row in the earlier file (NaN for new)
    lrow: np.ndarray  # 1-based row in the later file (NaN for lost)


def _pair_plants(a: np.ndarray, b: np.ndarray, tol: float, sx: float, sy: float) -> _Pairs:
    """Match the earlier plants ``a`` (shifted by ``sx, sy``) to the later ``b``."""
    m = match_points(a + np.array([sx, sy]), b, tol)
    n_p, n_l, n_n = m.n_matched, m.unmatched_a.size, m.unmatched_b.size
    status = np.array(["persisting"] * n_p + ["lost"] * n_l + ["new"] * n_n, dtype=object)
    ea_idx = np.r_[m.index_a, m.unmatched_a].astype(np.int64)
    nan_p = np.full(n_n, np.nan)
    nan_l = np.full(n_l, np.nan)
    xe = np.r_[a[ea_idx, 0], nan_p]
    ye = np.r_[a[ea_idx, 1], nan_p]
    xl = np.r_[b[m.index_b, 0], nan_l, b[m.unmatched_b, 0]]
    yl = np.r_[b[m.index_b, 1], nan_l, b[m.unmatched_b, 1]]
    return _Pairs(
        status=status,
        ea_idx=ea_idx,
        unmatched_b=m.unmatched_b,
        xe=xe,
        ye=ye,
        xl=xl,
        yl=yl,
        xr=np.where(np.isfinite(xe), xe, xl - sx),
        yr=np.where(np.isfinite(ye), ye, yl - sy),
        offset=np.r_[m.distance_m, nan_l, nan_p],
        erow=np.r_[ea_idx + 1.0, nan_p],
        lrow=np.r_[m.index_b + 1.0, nan_l, m.unmatched_b + 1.0],
    )


@dataclass
class _Membership:
    """Which plot each plant is in, in the reference (earlier) frame."""

    plot_id: np.ndarray  # per plant: its plot, the plots joined by ';', or ""
    layer: PlotLayer | None = None
    plot_list: list[Plot] | None = None
    plot_sel: dict[str, np.ndarray] = field(default_factory=dict)
    window: shapely.Geometry | None = None  # convex hull of all plants, without plots


def _plot_membership(
    plots: PlotLayer | None,
    crs: CRS | None,
    earlier: PointSet,
    later: PointSet,
    pairs: _Pairs,
    notes: list[str],
    warnings: list[str],
) -> _Membership:
    """Plot membership from the plot polygons, else the ``plot_id`` columns, else the hull."""
    if plots is not None:
        return _membership_from_plots(plots, crs, pairs, notes, warnings)
    if "plot_id" in earlier.attrs and "plot_id" in later.attrs:
        pe = np.array([id_text(v) for v in earlier.attrs["plot_id"]], dtype=object)
        pl = np.array([id_text(v) for v in later.attrs["plot_id"]], dtype=object)
        plot_id = np.r_[pe[pairs.ea_idx], pl[pairs.unmatched_b]].astype(object)
        only_e = sorted(set(pe) - set(pl) - {""})
        only_l = sorted(set(pl) - set(pe) - {""})
        for ids_, when, other in ((only_e, "earlier", "later"), (only_l, "later", "earlier")):
            if ids_:
                warnings.append(
                    Note(
                        f"plot(s) {', '.join(ids_[:8])} appear only in the {when} survey: their "
                        f"plants count as {'lost' if when == 'earlier' else 'new'}; check that "
                        f"the {other} survey covered them",
                        "plot-in-one-survey",
                        WARNING,
                    )
                )
        notes.append(
            Note(
                "plot membership taken from the plot_id column of the point files; give "
                "--plots for plot areas, densities and R",
                "plots-from-column",
            )
        )
        return _Membership(plot_id)
    plot_id = np.full(pairs.status.size, "", dtype=object)
    window = shapely.convex_hull(shapely.multipoints(np.column_stack([pairs.xr, pairs.yr])))
    if window.area <= 0:
        raise InputError("the plants lie on a line; give --plots so areas can be measured")
    notes.append(
        Note(
            "no plots given: densities and R use the convex hull of all plants as the window "
            f"({window.area:.0f} m²); R is biased upward near the hull's edge, give --plots",
            "hull-window",
        )
    )
    return _Membership(plot_id, window=window)


def _membership_from_plots(
    plots: PlotLayer, crs: CRS | None, pairs: _Pairs, notes: list[str], warnings: list[str]
) -> _Membership:
    total = pairs.status.size
    layer = _align_plots(plots, crs, notes)
    plot_list = layer.plots
    member = assign_plots(PointSet(pairs.xr, pairs.yr), layer)
    ids = np.array([p.plot_id for p in plot_list], dtype=object)
    first = member.first_plot()
    # the plants table lists each plant once: all the plots holding it, joined by ';'
    plot_id = np.r_[ids, [""]].astype(object)[first]
    for k in np.flatnonzero(member.plots_per_point() > 1):
        plot_id[k] = ";".join(ids[member.plot[member.point == k]])
    plot_sel = {}
    for i, p in enumerate(plot_list):
        plot_sel[p.plot_id] = np.zeros(total, bool)
        plot_sel[p.plot_id][member.points_of(i)] = True
    ov = overlap_note(layer)
    if ov:
        warnings.append(Note(ov, "overlapping-plots", WARNING))
    outside = int(np.sum(first < 0))
    if outside == total:
        raise InputError(
            "no plant of either survey lies inside any plot; check that --plots covers "
            "the surveys and shares their CRS"
        )
    if outside:
        notes.append(
            Note(
                f"{outside} of {total} plants lie outside every plot: they are listed in the "
                "plants table with an empty plot_id and left out of the per-plot rows",
                "plants-outside-plots",
            )
        )
    return _Membership(plot_id, layer, plot_list, plot_sel)


def _change_table(
    pairs: _Pairs, where: _Membership, nsim: int, seed: int, notes: list[str]
) -> tuple[list[dict[str, Any]], dict[str, Any]]:
    """The per-plot rows of ``change.csv`` and the overall row."""
    status = pairs.status
    b_ref = np.column_stack([pairs.xl, pairs.yl])
    a_ref = np.column_stack([pairs.xe, pairs.ye])
    has_e, has_l = np.isfinite(pairs.xe), np.isfinite(pairs.xl)
    survived = status == "persisting"

    def mc(sel: np.ndarray, geom: shapely.Geometry, unit: str) -> RChangeTest | None:
        if nsim == 0:
            return None
        data = [(a_ref[sel & has_e], survived[sel & has_e], b_ref[sel & has_l], geom)]
        return r_change_test(data, simulations=nsim, rng=keyed_rng(seed, unit))

    rows: list[dict[str, Any]] = []
    if where.plot_list is not None:
        plot_sel = where.plot_sel
        e_xys, l_xys, tests = [], [], []
        empty = [p.plot_id for p in where.plot_list if not np.any(plot_sel[p.plot_id])]
        if empty:
            notes.append(
                Note(
                    f"plot(s) {', '.join(empty[:8])} hold no plant on either date (another site, "
                    "or outside both surveys) and are left out of the rows and of the overall "
                    "area",
                    "empty-plots",
                )
            )
        plot_list = [p for p in where.plot_list if p.plot_id not in set(empty)]
        for p in progress(plot_list, total=len(plot_list), desc="plots", unit="plot"):
            sel = plot_sel[p.plot_id]
            e_xys.append(a_ref[sel & has_e])
            l_xys.append(b_ref[sel & has_l])
            tests.append(mc(sel, p.geometry, p.plot_id))
            r1 = _pooled_r([e_xys[-1]], [p.geometry])
            r2 = _pooled_r([l_xys[-1]], [p.geometry])
            rows.append(_row(p.plot_id, p.area_m2, status[sel], r1, r2, tests[-1]))
        inside = where.plot_id != ""
        geoms = [p.geometry for p in plot_list]
        overall = _row(
            OVERALL_ID,
            float(sum(p.area_m2 for p in plot_list)),
            status[inside],
            _pooled_r(e_xys, geoms),
            _pooled_r(l_xys, geoms),
            None if nsim == 0 else combine_r_change([t for t in tests if t is not None]),
        )
    elif where.window is None:  # plot ids from attributes, no areas
        nanr = pooled_clark_evans([])
        parts = [set(str(v).split(";")) - {""} for v in where.plot_id]
        for pid in sorted(set().union(*parts)):
            sel = np.array([pid in q for q in parts], dtype=bool)
            rows.append(_row(pid, float("nan"), status[sel], nanr, nanr))
        overall = _row(OVERALL_ID, float("nan"), status, nanr, nanr)
    else:
        everything = np.ones(status.size, bool)
        overall = _row(
            OVERALL_ID,
            float(where.window.area),
            status,
            _pooled_r([a_ref[has_e]], [where.window]),
            _pooled_r([b_ref[has_l]], [where.window]),
            mc(everything, where.window, OVERALL_ID),
        )
    return rows, overall
