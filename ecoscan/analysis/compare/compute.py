"""Compare groups of plots (sites, dates, plots, results folders) for density and spacing.

Inputs are results folders written by ``ecoscan analyse`` or ``ecoscan survey``
(``dispersion.csv``, ``points.csv`` + ``points.prj``, ``plots.gpkg``). Everything compared is
recomputed from the points and the plot polygons: each plant's nearest neighbour is searched
within its own plot, densities use the polygon areas. ``dispersion.csv`` supplies the list of
analysed plots (so that plots with no plants still count in the area) and the site and date
labels.

For each pair of groups: the difference in density with the exact conditional test of two
Poisson rates (Przyborowski & Wilenski 1940), the difference in pooled Clark–Evans R with its
standard error and z test (Clark & Evans 1954), Mann–Whitney U and two-sample
Kolmogorov–Smirnov tests of the nearest-neighbour distances (``scipy.stats``), and a
permutation test of the difference in R that moves whole plots between groups. With more
than two groups every test's p-values are adjusted over the pairs with Holm (1979).
"""

from __future__ import annotations

import csv
import itertools
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import pyogrio
import shapely
from scipy import stats as sps

from ecoscan.analysis.dispersion.detectable import NO_DEPARTURE
from ecoscan.errors import InputError
from ecoscan.io.crs import crs_label, parse_crs
from ecoscan.io.vector import read_points, reproject_geometries
from ecoscan.model.membership import PlotMembership
from ecoscan.model.notes import WARNING, JoinedNotes, Note, code_of, severity_of
from ecoscan.model.plots import PlotLayer, id_text
from ecoscan.model.points import PointSet
from ecoscan.settings import Settings, whole_number
from ecoscan.stats.compare_r import (
    PlotNN,
    PooledR,
    plot_nn,
    pooled_clark_evans,
    r_difference,
    r_permutation_test,
)
from ecoscan.stats.csr import keyed_rng, run_seed
from ecoscan.stats.nn_distribution import nn_distribution_test
from ecoscan.stats.paired import paired_sign_flip_test
from ecoscan.stats.rates import holm_adjust, poisson_rate_test

__all__ = [
    "BY_CHOICES",
    "CompareSettings",
    "ComparisonResult",
    "PlotUnit",
    "ResultsTable",
    "compare_groups",
    "read_results",
    "results_from_points",
]

BY_CHOICES = ("auto", "site", "date", "plot", "folder")
#: Codes of a pair's warnings and of the notes on what limits the comparisons
#: (:class:`ecoscan.model.notes.Note`): one plot in a group (no permutation test), too few
#: arrangements of whole plots for a small p-value, an empty group, too few plants for the R
#: test's normal approximation, no plot on both dates, too few sign patterns.
NO_REARRANGEMENT, FEW_ARRANGEMENTS = "no-rearrangement", "few-arrangements"
NO_DISTANCES, FEW_PLANTS = "no-distances", "few-plants"
NO_PAIRED_PLOTS, FEW_SIGN_PATTERNS = "no-paired-plots", "few-sign-patterns"


@dataclass(frozen=True)
class CompareSettings(Settings):
    """Settings of :func:`compare_groups` (also the ``compare`` section of a survey file).

    Attributes
    ----------
    by : {'auto', 'site', 'date', 'plot', 'folder'}
        What forms a group (default ``auto``).
    permutations : int
        Arrangements of the permutation tests (>= 99; default 999).
    seed : int
        Run seed (>= 0); each pair of groups uses its own stream derived from it.
    pool_dates : bool
        Pool the dates of one place into one group (default False).

    Examples
    --------
    >>> CompareSettings.from_mapping({"by": "site"}).permutations
    999
    """

    by: str = "auto"
    permutations: int = 999
    seed: int = 1
    pool_dates: bool = False

    SECTION: ClassVar[str] = "compare"
    TYPES: ClassVar[dict[str, type | tuple[type, ...]]] = {
        "by": str,
        "permutations": int,
        "seed": int,
        "pool_dates": bool,
    }

    def __post_init__(self) -> None:
        if self.by not in BY_CHOICES:
            raise InputError(f"by must be one of {', '.join(BY_CHOICES)} (got {self.by!r})")
        if not whole_number(self.permutations) or self.permutations < 99:
            raise InputError(
                f"permutations must be a whole number >= 99 (got {self.permutations!r}); "
                "999 is usual"
            )
        if not whole_number(self.seed) or self.seed < 0:
            raise InputError(f"seed must be a whole number >= 0 (got {self.seed!r})")


_P_COLUMNS = (
    "p_density",
    "p_R_diff",
    "p_R_donnelly_diff",
    "p_R_perm",
    "p_mw",
    "p_ks",
    "p_nn_distribution",
    "p_density_paired",
    "p_R_paired",
)


# ------------------------------------------------------------------------------ reading


@dataclass(frozen=True)
class PlotUnit:
    """One analysed plot of one results folder (on one date): the unit that is compared.

    Attributes
    ----------
    folder : str
        Label of the results folder.
    site, date : str
        Site and date labels ('' when the folder has none).
    plot_id : str
        Plot id.
    nn : PlotNN
        Its plants' nearest-neighbour distances (within the plot), count, area and perimeter.
    """

    folder: str
    site: str
    date: str
    plot_id: str
    nn: PlotNN


@dataclass
class ResultsTable:
    """A results folder read back: its analysed plots with their plants.

    Attributes
    ----------
    folder : pathlib.Path
        The folder.
    label : str
        Short name (the folder name).
    dispersion : list of dict
        Rows of ``dispersion.csv`` as text.
    points : PointSet
        The analysed points.
    units : list of PlotUnit
        One per analysed plot (and date).
    has_site, has_date : bool
        Whether the folder carries site / date labels.
    notes : list of str
        What was assumed.
    """

    folder: Path
    label: str
    dispersion: list[dict[str, str]]
    points: PointSet
    units: list[PlotUnit]
    has_site: bool
    has_date: bool
    notes: list[str] = field(default_factory=list)


def _read_dispersion(path: Path) -> list[dict[str, str]]:
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.DictReader(fh))
    except UnicodeDecodeError:
        raise InputError(f"{path} is not a UTF-8 CSV file; rewrite it with ecoscan") from None
    if not rows or "plot_id" not in rows[0]:
        raise InputError(
            f"{path} has no rows or no plot_id column; it should be an ecoscan dispersion table"
        )
    return [{k.strip(): (v or "").strip() for k, v in r.items() if k} for r in rows]


def _read_plot_geoms(path: Path, points_crs) -> dict[tuple[str, str], shapely.Geometry]:
    """Plot outlines keyed by (site, plot_id); site '' when the layer has no site field.

    Not :func:`ecoscan.io.vector.read_plots`, which rightly refuses repeated plot ids in user
    input: a survey's ``plots.gpkg`` may hold plot ``P1`` of several sites, told apart by a
    ``site`` field. The outlines were validated when the analysis wrote them.
    """
    try:
        meta, _fid, wkb, data = pyogrio.raw.read(path, layer="plots")
    except Exception:
        try:
            meta, _fid, wkb, data = pyogrio.raw.read(path)
        except Exception as exc:
            msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise InputError(f"cannot read {path}: {msg}; rerun the analysis") from None
    fields = [str(f) for f in meta.get("fields", [])]
    lower = {f.lower(): i for i, f in enumerate(fields)}
    if "plot_id" not in lower:
        raise InputError(f"{path} has no plot_id field; rerun the analysis to rewrite it")
    geoms = shapely.from_wkb(wkb)
    src = parse_crs(meta.get("crs"), what=path.name) if meta.get("crs") else None
    if src is not None and points_crs is not None and src != points_crs:
        geoms = reproject_geometries(geoms, src, points_crs)
    elif src is not None and points_crs is None and not src.is_projected:
        raise InputError(f"{path} is in {crs_label(src)} (degrees); rerun the analysis")
    ids = [id_text(v) for v in data[lower["plot_id"]]]
    sites = [id_text(v) for v in data[lower["site"]]] if "site" in lower else [""] * len(ids)
    return {(s, i): g for s, i, g in zip(sites, ids, geoms, strict=True) if g is not None}


def _attr_text(points: PointSet, name: str) -> np.ndarray | None:
    for k, v in points.attrs.items():
        if k.lower() == name:
            return np.array([id_text(x) for x in v], dtype=object)
    return None


def read_results(folder: str | os.PathLike, *, label: str | None = None) -> ResultsTable:
    """Read an ``analyse`` or ``survey`` results folder for comparison.

    Parameters
    ----------
    folder : path-like
        A folder holding ``dispersion.csv``, ``points.csv`` (with ``points.prj``) and
        ``plots.gpkg`` (layer ``plots``, field ``plot_id``).
    label : str, optional
        Name of the folder in tables (default: the folder's name).

    Returns
    -------
    ResultsTable

    Raises
    ------
    InputError
        When the folder or one of its files is missing or malformed.
    """
    d = Path(folder)
    if not d.is_dir():
        raise InputError(f"results folder {str(d)!r} does not exist; give an analyse output folder")
    missing = [f for f in ("dispersion.csv", "points.csv", "plots.gpkg") if not (d / f).exists()]
    if missing:
        raise InputError(
            f"{d} lacks {', '.join(missing)}; give a folder written by 'ecoscan analyse' or "
            "'ecoscan survey' (rerun it if the files were moved)"
        )
    notes: list[Note] = []
    disp = _read_dispersion(d / "dispersion.csv")
    pts = read_points(d / "points.csv")
    notes += [Note(f"{d.name}: {n}", code_of(n), severity_of(n)) for n in pts.notes]
    pid = _attr_text(pts, "plot_id")
    if pid is None:
        raise InputError(f"{d / 'points.csv'} has no plot_id column; rerun the analysis")
    site = _attr_text(pts, "site")
    date = _attr_text(pts, "date")
    has_site = site is not None or "site" in disp[0]
    has_date = date is not None or "date" in disp[0]
    n = pts.n
    site = site if site is not None else np.full(n, "", dtype=object)
    date = date if date is not None else np.full(n, "", dtype=object)
    geoms = _read_plot_geoms(d / "plots.gpkg", pts.crs)
    lab = label or d.name
    keys = [(r.get("site", ""), r.get("date", ""), r["plot_id"]) for r in disp]
    area_of = {k: r.get("area_m2", "") for k, r in zip(keys, disp, strict=True)}
    point_keys = set(zip(site, date, pid, strict=True))
    extra = sorted(k for k in point_keys if k not in area_of and k[2] != "")
    if extra:
        notes.append(
            Note(
                f"{d.name}: {len(extra)} plot(s) have points but no row in dispersion.csv "
                f"({', '.join(k[2] for k in extra[:5])}); included",
                "plots-without-row",
            )
        )
    units: list[PlotUnit] = []
    xy = pts.xy
    for k in dict.fromkeys(keys + extra):
        s, t, p = k
        g = geoms.get((s, p))
        if g is None:
            g = geoms.get(("", p))
        if g is not None:
            area, perim = float(g.area), float(g.length)
        else:
            try:
                area, perim = float(area_of.get(k, "")), float("nan")
            except ValueError:
                raise InputError(
                    f"{d.name}: plot {p!r} is in neither plots.gpkg nor has an area in "
                    "dispersion.csv; rerun the analysis"
                ) from None
            notes.append(
                Note(
                    f"{d.name}: plot {p} not in plots.gpkg; its area from dispersion.csv",
                    "area-from-table",
                )
            )
        if not area > 0:
            raise InputError(f"{d.name}: plot {p!r} has no area; rerun the analysis")
        sel = (pid == p) & (site == s) & (date == t)
        units.append(PlotUnit(lab, s, t, p, plot_nn(xy[sel], area, perim)))
    return ResultsTable(d, lab, disp, pts, units, has_site, has_date, notes)


def results_from_points(
    points: PointSet,
    layer: PlotLayer,
    *,
    label: str,
    membership: PlotMembership | None = None,
) -> ResultsTable:
    """Build a :class:`ResultsTable` in memory, without a results folder.

    Parameters
    ----------
    points : PointSet
        Analysed points, metres. Optional ``site`` and ``date`` attributes split them into
        sites and dates; plot membership comes from ``membership`` or a ``plot_id``
        attribute (one row per plant and plot, as in ecoscan's points tables).
    layer : PlotLayer
        The plots, in the points' CRS. A plot belongs to a site when its ``site`` attribute
        says so or, without that attribute, when it holds plants of that site on any date;
        it then counts on every date of that site, also when it holds no plants then.
    label : str
        Name of this set of results (the group name for ``by='folder'``).
    membership : PlotMembership, optional
        Which plots hold which points (:func:`ecoscan.model.membership.assign_plots`).

    Returns
    -------
    ResultsTable
    """
    if membership is not None:
        # one row per (plant, plot): a plant in overlapping plots counts in each
        ids = np.array(layer.ids, dtype=object)
        points = points.subset(membership.point)
        pid = ids[membership.plot]
    else:
        pid = _attr_text(points, "plot_id")
        if pid is None:
            raise InputError(f"{label}: the points have no plot_id; pass membership")
    site = _attr_text(points, "site")
    date = _attr_text(points, "date")
    has_site, has_date = site is not None, date is not None
    n = points.n
    site = site if site is not None else np.full(n, "", dtype=object)
    date = date if date is not None else np.full(n, "", dtype=object)
    combos = list(dict.fromkeys(zip(site, date, strict=True))) or [("", "")]
    xy = points.xy
    units = []
    for s, t in combos:
        here = (site == s) & (date == t)
        of_site = site == s
        for plot in layer.plots:
            own = plot.attrs.get("site") if isinstance(plot.attrs, dict) else None
            if own is not None and id_text(own) != s:
                continue
            if own is None and has_site and not np.any(of_site & (pid == plot.plot_id)):
                continue
            sel = here & (pid == plot.plot_id)
            g = plot.geometry
            units.append(PlotUnit(label, s, t, plot.plot_id, plot_nn(xy[sel], g.area, g.length)))
    return ResultsTable(Path("."), label, [], points, units, has_site, has_date, [])


# ---------------------------------------------------------------------------- comparing


@dataclass(frozen=True)
class GroupSummary:
    """One group's pooled density and Clark–Evans R (see :func:`pooled_clark_evans`)."""

    name: str
    units: tuple[PlotUnit, ...]
    n: int
    area_m2: float
    r: PooledR

    @property
    def nn_m(self) -> np.ndarray:
        """All nearest-neighbour distances of the group (each within its plot), metres."""
        parts = [u.nn.nn_m for u in self.units]
        return np.concatenate(parts) if parts else np.empty(0)

    @property
    def density_per_ha(self) -> float:
        """Plants per hectare over all the group's plots."""
        return self.n / self.area_m2 * 1e4 if self.area_m2 > 0 else float("nan")


@dataclass
class ComparisonResult:
    """Result of :func:`compare_groups`.

    Attributes
    ----------
    by : str
        What the groups are: ``site``, ``date``, ``plot`` or ``folder``.
    groups : list of GroupSummary
        In input order.
    pairs : list of dict
        One row per pair (columns :data:`PAIR_COLUMNS`).
    notes : list of str
        Method notes and what was assumed (including the Holm adjustment).
    parameters : dict
        Permutations, seed, methods.
    paired : bool
        The groups are dates of the same plots (paired columns filled).
    """

    by: str
    groups: list[GroupSummary]
    pairs: list[dict[str, Any]]
    notes: list[str] = field(default_factory=list)
    parameters: dict[str, Any] = field(default_factory=dict)
    paired: bool = False


def _group_key(u: PlotUnit, by: str, multi_site: bool) -> str:
    if by == "folder":
        return u.folder
    if by == "site":
        return u.site or u.folder
    if by == "date":
        return u.date
    return f"{u.site}/{u.plot_id}" if multi_site and u.site else u.plot_id


def _label_interval(r: PooledR) -> tuple[float, float]:
    """The 95% interval the group's label is read from: edge-corrected (Donnelly 1978)
    where the plot perimeters are known, else the plain Clark–Evans one."""
    if math.isfinite(r.statistic_donnelly) and r.se_donnelly > 0:
        h = sps.norm.ppf(0.975) * r.se_donnelly
        return r.statistic_donnelly - h, r.statistic_donnelly + h
    return r.ci()


def _pattern(r: PooledR) -> str:
    """The group's label, read from the 95% interval shown beside it."""
    lo, hi = _label_interval(r)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return ""
    if lo > 1.0:
        return "regular"
    if hi < 1.0:
        return "clustered"
    return NO_DEPARTURE


def _paired(a: GroupSummary, b: GroupSummary, permutations: int, rng) -> dict[str, Any]:
    """Sign-flip tests on the plots that appear in both groups (same site and plot id)."""
    ua = {(u.site, u.plot_id): u for u in a.units}
    ub = {(u.site, u.plot_id): u for u in b.units}
    both = [k for k in ua if k in ub]
    nan = float("nan")
    if not both:
        return {"paired_plots": 0}
    dens = np.array([
        (ua[k].nn.n / ua[k].nn.area_m2 - ub[k].nn.n / ub[k].nn.area_m2) * 1e4 for k in both
    ])  # fmt: skip
    ra = np.array([pooled_clark_evans([ua[k].nn]).statistic for k in both])
    rb = np.array([pooled_clark_evans([ub[k].nn]).statistic for k in both])
    td = paired_sign_flip_test(dens, permutations=permutations, rng=rng)
    tr = paired_sign_flip_test(ra - rb, permutations=permutations, rng=rng)
    return {
        "paired_plots": len(both),
        "density_diff_paired_per_ha": td.statistic,
        "p_density_paired": td.pvalue,
        "R_diff_paired": tr.statistic if tr.plots else nan,
        "p_R_paired": tr.pvalue,
        "paired_arrangements": td.arrangements,
        "_paired_min_p": td.min_pvalue,
    }


def _permutation_limits(a: GroupSummary, b: GroupSummary, perm) -> list[Note]:
    """A pair's warning when whole plots cannot be permuted, or too few ways for a small p."""
    if not math.isfinite(perm.pvalue):
        return [
            Note(
                f"{len(a.units)} and {len(b.units)} plot(s): no rearrangement of whole plots "
                "exists, so the permutation tests cannot run",
                NO_REARRANGEMENT,
                WARNING,
            )
        ]
    if perm.min_pvalue > 0.05:
        return [
            Note(
                f"{len(a.units)} and {len(b.units)} plots give {perm.arrangements} "
                f"arrangements: the permutation p-values cannot go below {perm.min_pvalue:.2g}",
                FEW_ARRANGEMENTS,
                WARNING,
            )
        ]
    return []


def _pooled_distance_tests(da: np.ndarray, db: np.ndarray) -> tuple[float, float, float, float]:
    """Mann–Whitney U and its p, Kolmogorov–Smirnov D and its p on the pooled distances
    (NaN when a group has none)."""
    if da.size >= 1 and db.size >= 1:
        mw = sps.mannwhitneyu(da, db, alternative="two-sided")  # scipy keyword
        ks = sps.ks_2samp(da, db)
        return float(mw.statistic), float(mw.pvalue), float(ks.statistic), float(ks.pvalue)
    nan = float("nan")
    return nan, nan, nan, nan


def _pair_row(a: GroupSummary, b: GroupSummary, permutations: int, rng) -> dict[str, Any]:
    rate = poisson_rate_test(a.n, a.area_m2, b.n, b.area_m2)
    diff = r_difference(a.r, b.r)
    diff_d = r_difference(a.r, b.r, edge_corrected=True)
    perm = r_permutation_test(
        [u.nn for u in a.units], [u.nn for u in b.units], permutations=permutations, rng=rng
    )
    warn = _permutation_limits(a, b, perm)
    dist = nn_distribution_test(
        [u.nn.nn_m for u in a.units], [u.nn.nn_m for u in b.units],
        permutations=permutations, rng=rng,
    )  # fmt: skip
    mw_u, p_mw, ks_d, p_ks = _pooled_distance_tests(a.nn_m, b.nn_m)
    if not (a.nn_m.size >= 1 and b.nn_m.size >= 1):
        warn.append(Note("a group has no nearest-neighbour distances", NO_DISTANCES, WARNING))
    if min(a.n, b.n) < 30:
        warn.append(
            Note("fewer than 30 plants in a group: the R test is approximate", FEW_PLANTS, WARNING)
        )
    da_ha, db_ha = a.density_per_ha, b.density_per_ha
    return {
        "group_a": a.name,
        "group_b": b.name,
        "n_a": a.n,
        "n_b": b.n,
        "area_a_m2": a.area_m2,
        "area_b_m2": b.area_m2,
        "density_a_per_ha": da_ha,
        "density_b_per_ha": db_ha,
        "density_diff_per_ha": da_ha - db_ha,
        "density_ratio": rate.statistic,
        "density_ratio_low95": rate.ratio_low,
        "density_ratio_high95": rate.ratio_high,
        "p_density": rate.pvalue,
        "R_a": a.r.statistic,
        "R_b": b.r.statistic,
        "R_diff": diff.statistic,
        "R_diff_se": diff.se,
        "z_R_diff": diff.z,
        "p_R_diff": diff.pvalue,
        "R_donnelly_a": a.r.statistic_donnelly,
        "R_donnelly_b": b.r.statistic_donnelly,
        "R_donnelly_diff": diff_d.statistic,
        "R_donnelly_diff_se": diff_d.se,
        "z_R_donnelly_diff": diff_d.z,
        "p_R_donnelly_diff": diff_d.pvalue,
        "p_R_perm": perm.pvalue,
        "perm_arrangements": perm.arrangements,
        "perm_exact": perm.exact,
        "mw_u": mw_u,
        "p_mw": p_mw,
        "ks_d": ks_d,
        "p_ks": p_ks,
        "nn_distribution_gap": dist.statistic,
        "p_nn_distribution": dist.pvalue,
        "nn_distribution_arrangements": dist.arrangements,
        "_perm_min_p": perm.min_pvalue,
        "_dist_min_p": dist.min_pvalue,
        "warnings": JoinedNotes(warn),
    }


def _by_place(units: list[PlotUnit]) -> dict[tuple[str, str], list[PlotUnit]]:
    """Units of the same plot (same site and plot id; same folder without sites)."""
    out: dict[tuple[str, str], list[PlotUnit]] = {}
    for u in units:
        out.setdefault((u.site or u.folder, u.plot_id), []).append(u)
    return out


def _limit_notes(pairs: list[dict[str, Any]], paired: bool) -> list[Note]:
    """One note per distinct design limit (how low each test's p-value can go), naming
    the pair when only one pair has it and counting the pairs otherwise."""
    found: dict[tuple[str, str], list[str]] = {}  # (text, code) -> pairs
    for p in pairs:
        name = f"{p['group_a']} vs {p['group_b']}"
        mp = p.get("_perm_min_p", float("nan"))
        if not math.isfinite(mp):
            found.setdefault(
                (
                    "one plot in a group: no rearrangement of whole plots exists, so the "
                    "permutation tests cannot run; the z tests treat plants as independent, "
                    "which neighbours are not quite",
                    NO_REARRANGEMENT,
                ),
                [],
            ).append(name)
        elif mp > 0.05:
            found.setdefault(
                (
                    f"{p['perm_arrangements']} possible arrangements of whole plots, so the "
                    f"permutation p-values cannot go below {mp:.2g}",
                    FEW_ARRANGEMENTS,
                ),
                [],
            ).append(name)
        pm = p.get("_paired_min_p", float("nan"))
        if paired and p.get("paired_plots", 0) == 0:
            found.setdefault(
                ("no plot was surveyed on both dates: no paired test", NO_PAIRED_PLOTS), []
            ).append(name)
        elif paired and math.isfinite(pm) and pm > 0.05:
            found.setdefault(
                (
                    f"{p['paired_plots']} plots on both dates give {p['paired_arrangements']} "
                    f"sign patterns, so the paired p-values cannot go below {pm:.2g}",
                    FEW_SIGN_PATTERNS,
                ),
                [],
            ).append(name)
    out = []
    for (text, code), names in found.items():
        who = names[0] if len(names) == 1 else f"{len(names)} of {len(pairs)} pairs"
        out.append(Note(f"{who}: {text}", code, WARNING))
    return out


def compare_groups(
    results: list[ResultsTable],
    by: str = "auto",
    *,
    permutations: int = 999,
    rng: int | np.random.Generator | None = 1,
    pool_dates: bool = False,
) -> ComparisonResult:
    """Compare every pair of groups of plots for density and Clark–Evans R.

    Parameters
    ----------
    results : list of ResultsTable
        Results folders read with :func:`read_results`.
    by : {'auto', 'site', 'date', 'plot', 'folder'}
        What forms a group. ``auto``: sites when every folder has site labels, else folders.
        ``site`` falls back to the folder name for folders without sites.
    permutations : int
        Monte Carlo arrangements for the permutation test (≥ 99).
    rng : int, numpy.random.Generator or None
        Seed of the run (a generator gives one draw to seed it, None fresh entropy). Each
        pair of groups uses its own stream ``SeedSequence([seed, crc32(a), crc32(b)])``
        (:func:`ecoscan.stats.csr.keyed_rng`), so a pair's p-values do not depend on which
        other groups are compared; same seed, same p-values.
    pool_dates : bool
        Pool the dates of one place into one group (by site, plot or folder). Off by
        default: the same plots surveyed on two dates hold largely the same plants, so
        groups are then formed per date and only groups of the same date are compared.

    Returns
    -------
    ComparisonResult
        With ``by='date'`` each pair also carries paired sign-flip tests over the plots
        surveyed on both dates.

    Raises
    ------
    InputError
        Unknown ``by``, too few permutations, no date labels for ``by='date'``, or fewer
        than two groups.

    References
    ----------
    Przyborowski & Wilenski (1940), Biometrika 31: 313–323; Clark & Evans (1954), Ecology
    35: 445–453; Mann & Whitney (1947), Ann. Math. Statist. 18: 50–60; Kolmogorov–Smirnov via
    :func:`scipy.stats.ks_2samp`; Holm (1979), Scand. J. Statist. 6: 65–70.
    """
    if by not in BY_CHOICES:
        raise InputError(f"--by {by!r} is not known; choose one of {', '.join(BY_CHOICES)}")
    if not results:
        raise InputError("no results folders given; give at least one analyse output folder")
    if int(permutations) < 99:
        raise InputError(f"--permutations {permutations} is too few; use at least 99 (e.g. 999)")
    notes: list[Note] = []
    for r in results:
        notes += [Note.from_value(n) for n in r.notes if n not in notes]
    crss = {crs_label(r.points.crs) for r in results}
    if len(crss) > 1:
        notes.append(
            Note(
                f"the folders use {len(crss)} different CRSs ({'; '.join(sorted(crss))}); each "
                "is measured in its own metric CRS, which is all that distances and areas need",
                "several-crs",
            )
        )
    by = _chosen_by(by, results, notes)
    grouped, date_of = _grouped_units(results, by, pool_dates, notes)
    groups = []
    for name, us in grouped.items():
        n = sum(u.nn.n for u in us)
        area = sum(u.nn.area_m2 for u in us)
        groups.append(
            GroupSummary(name, tuple(us), n, area, pooled_clark_evans([u.nn for u in us]))
        )
    pairs_of = [
        (a, b)
        for a, b in itertools.combinations(groups, 2)
        if date_of is None or date_of[a.name] == date_of[b.name]
    ]
    if not pairs_of:
        raise InputError(
            f"no two {by}s share a survey date, so nothing can be compared date by date; "
            "add --pool-dates to pool each one's dates (the same plants then count twice)"
        )
    paired = by == "date"
    if paired:
        notes.append(
            Note(
                "dates of the same plots are compared pair-wise: the *_paired columns test the "
                "per-plot differences by flipping their signs (plots are the units); the other "
                "tests treat the dates as independent groups and are only approximate here",
                "paired-dates",
            )
        )
    notes.append(
        Note(
            "the distance distributions are compared by permuting whole plots "
            "(p_nn_distribution); p_mw and p_ks pool the distances as if independent and "
            "reject too often (about 9% and 15% of pairs of random plots at the 5% level): "
            "approximate",
            "pooled-distance-tests",
        )
    )
    seed = run_seed(rng)
    pairs = _pair_rows(pairs_of, int(permutations), seed, paired, notes)
    params = {
        "by": by,
        "permutations": int(permutations),
        "seed": seed,
        "random_streams": "one per pair of groups, SeedSequence([seed, crc32(a), crc32(b)])",
        "R": "pooled over plots, nearest neighbours within each plot, expectation from each "
        "plot's own density (Clark & Evans 1954)",
        "density_test": "exact conditional test of two Poisson rates (Przyborowski & "
        "Wilenski 1940)",
        "permutation_test": "whole plots permuted between the two groups",
        "distance_distribution_test": "two-sample Kolmogorov-Smirnov distance between the "
        "groups' nearest-neighbour distances, whole plots permuted",
        "paired_test": "sign-flip test of per-plot differences (dates of the same plots)",
        "pool_dates": bool(pool_dates),
        "adjustment": "Holm (1979)" if len(pairs) > 1 else "none (one comparison)",
    }
    return ComparisonResult(by, groups, pairs, notes, params, paired)


def _chosen_by(by: str, results: Sequence[ResultsTable], notes: list[str]) -> str:
    """``by`` with ``"auto"`` resolved, after checking the tables carry what it needs."""
    if by == "auto":
        by = "site" if all(r.has_site for r in results) else "folder"
        if by == "folder" and len(results) == 1:
            by = "plot"
        notes.append(Note(f"groups are {by}s (choose with --by)", "groups-chosen"))
    if by == "date" and not all(r.has_date for r in results):
        lacking = [r.label for r in results if not r.has_date]
        raise InputError(
            f"--by date needs dates, but {', '.join(lacking)} has no date column; "
            "compare survey folders, or use --by folder"
        )
    if by == "site" and not all(r.has_site for r in results):
        notes.append(
            Note(
                "folders without site labels are grouped under their folder name",
                "folder-as-site",
            )
        )
    return by


def _grouped_units(
    results: Sequence[ResultsTable], by: str, pool_dates: bool, notes: list[str]
) -> tuple[dict[str, list[PlotUnit]], dict[str, str] | None]:
    """The plots of each group, and each group's date when dates are compared one by one."""
    units = [u for r in results for u in r.units]
    multi_site = len({u.site for u in units if u.site}) > 1
    # dates of one site hold the same plants: never pooled unless asked
    split_dates = (
        by in ("site", "plot", "folder")
        and not pool_dates
        and any(len({u.date for u in us}) > 1 for us in _by_place(units).values())
    )
    grouped: dict[str, list[PlotUnit]] = {}
    date_of: dict[str, str] = {}
    for u in units:
        key = _group_key(u, by, multi_site)
        if split_dates:
            key = f"{key} {u.date}".strip()
            date_of[key] = u.date
        grouped.setdefault(key, []).append(u)
    if by == "date":  # ISO 8601 dates (the survey file insists): text order is time order
        grouped = dict(sorted(grouped.items()))
    if split_dates:
        notes.append(
            Note(
                "the same plots were surveyed on several dates: groups are compared date by "
                "date (pooling dates would count the same plants twice); --pool-dates pools "
                "them",
                "dates-apart",
            )
        )
    elif pool_dates and any(len({u.date for u in us}) > 1 for us in _by_place(units).values()):
        notes.append(
            Note(
                "dates pooled on request (--pool-dates): a plant surveyed on two dates counts "
                "twice, so n and the tests overstate the evidence",
                "dates-pooled",
                WARNING,
            )
        )
    if len(grouped) < 2:
        raise InputError(
            f"only one {by} ({next(iter(grouped), '?')}) in the results; give more folders or "
            "choose another --by"
        )
    return grouped, (date_of if split_dates else None)


def _pair_rows(
    pairs_of: list[tuple[GroupSummary, GroupSummary]],
    permutations: int,
    seed: int,
    paired: bool,
    notes: list[str],
) -> list[dict[str, Any]]:
    """Every pair's tests, each from its own random stream, with Holm-adjusted p-values."""
    pairs = []
    for a, b in pairs_of:
        pair_rng = keyed_rng(seed, a.name, b.name)
        row = _pair_row(a, b, permutations, pair_rng)
        if paired:
            row.update(_paired(a, b, permutations, pair_rng))
        pairs.append(row)
    notes += _limit_notes(pairs, paired)
    for p in pairs:
        for k in [k for k in p if k.startswith("_")]:
            del p[k]
    for col in _P_COLUMNS:
        if not all(col in p for p in pairs):
            continue
        vals = [p[col] for p in pairs]
        adj = holm_adjust(vals) if len(pairs) > 1 else vals
        for p, v in zip(pairs, adj, strict=True):
            p[f"{col}_holm"] = float(v)
    if len(pairs) > 1:
        notes.append(
            Note(
                f"{len(pairs)} pairwise comparisons: the *_holm columns "
                "hold p-values adjusted with Holm's (1979) step-down method within each test; "
                "read those, not the raw p-values",
                "holm-adjusted",
            )
        )
    return pairs
