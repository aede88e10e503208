"""Comparing results folders: reading the convention, recomputing, pairwise tests, CLI."""

import json
import math

import numpy as np
import pytest
import shapely
from pyproj import CRS
from scipy import stats as sps
from scipy.spatial.distance import cdist
from statsmodels.stats.multitest import multipletests

from ecoscan.analysis.compare.columns import (
    GROUP_COLUMNS,
    PAIR_COLUMNS,
    comparison_rows,
    group_rows,
)
from ecoscan.analysis.compare.compute import compare_groups, read_results
from ecoscan.cli import main
from ecoscan.errors import InputError
from ecoscan.io.outputs import write_csv
from ecoscan.io.vector import write_plots, write_points
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.report.folders import write_comparison
from ecoscan.stats.csr import uniform_in_polygon

UTM33 = CRS.from_epsg(32633)
X0, Y0 = 500_000.0, 5_000_000.0

DISPERSION_COLUMNS = [
    "plot_id", "n", "area_m2", "density_per_ha", "mean_nn_m", "expected_nn_m", "R", "z", "p",
    "R_donnelly", "z_donnelly", "p_donnelly", "p_mc", "verdict", "quadrat_size_m",
    "quadrat_chi2", "quadrat_df", "quadrat_p", "vmr", "morisita", "morisita_std", "warnings",
]  # fmt: skip


def _pattern(kind, poly, rng):
    """Invented stands: a planted grid, a random stand, a clumped thicket."""
    x0, y0, x1, y1 = poly.bounds
    if kind == "planted":
        g = np.mgrid[x0 + 1.25 : x1 : 2.5, y0 + 1.25 : y1 : 2.5].reshape(2, -1).T
        return g + rng.normal(0, 0.2, g.shape)
    if kind == "random":
        return uniform_in_polygon(poly, 250, rng=rng)
    c = uniform_in_polygon(poly, 25, rng=rng)
    xy = (c[:, None, :] + rng.normal(0, 1.0, (25, 10, 2))).reshape(-1, 2)
    return xy[shapely.contains_xy(poly, xy[:, 0], xy[:, 1])]


def make_folder(path, kinds, *, seed=0, site=None, date=None, offset=0.0):
    """A results folder following the convention (dispersion.csv, points.csv, plots.gpkg)."""
    rng = np.random.default_rng(seed)
    plots, parts, ids = [], [], []
    for k, kind in enumerate(kinds):
        poly = shapely.box(X0 + offset + 50 * k, Y0, X0 + offset + 50 * k + 40, Y0 + 40)
        pid = f"P{k + 1}"
        xy = _pattern(kind, poly, rng)
        plots.append(Plot(pid, poly))
        parts.append(xy)
        ids += [pid] * len(xy)
    xy = np.vstack(parts)
    attrs = {"plot_id": np.array(ids, dtype=object)}
    if site is not None:
        attrs = {
            "site": np.array([site] * len(ids), dtype=object),
            "date": np.array([date] * len(ids), dtype=object),
            **attrs,
        }
    write_points(PointSet(xy[:, 0], xy[:, 1], attrs, UTM33), path / "points.csv")
    write_plots(PlotLayer(plots, UTM33), path / "plots.gpkg")
    rows = []
    for p, part in zip(plots, parts, strict=True):
        row = {c: "" for c in DISPERSION_COLUMNS}
        row.update(plot_id=p.plot_id, n=len(part), area_m2=p.area_m2, R=9.99)  # R not trusted
        if site is not None:
            row = {"site": site, "date": date, **row}
        rows.append(row)
    write_csv(path / "dispersion.csv", rows)
    return path


@pytest.fixture(scope="module")
def stands(tmp_path_factory):
    base = tmp_path_factory.mktemp("stands")
    return [
        make_folder(base / "planted", ["planted"] * 3, seed=1),
        make_folder(base / "natural", ["random"] * 3, seed=2),
        make_folder(base / "thicket", ["clustered"] * 3, seed=3),
    ]


def _nn_within_plots(folder):
    """Independent recomputation: each plant's nearest neighbour within its plot (cdist)."""
    data = np.genfromtxt(folder / "points.csv", delimiter=",", names=True, dtype=None,
                         encoding="utf-8")  # fmt: skip
    out = []
    for pid in np.unique(data["plot_id"]):
        m = data["plot_id"] == pid
        xy = np.column_stack([data["x"][m], data["y"][m]])
        d = cdist(xy, xy)
        np.fill_diagonal(d, np.inf)
        out.append(d.min(axis=1))
    return np.concatenate(out), int(data.size)


def test_ranks_regularity_as_built(stands):
    res = compare_groups([read_results(f) for f in stands], "folder", permutations=199)
    rows = {g["group"]: g for g in group_rows(res)}
    assert rows["planted"]["rank_regularity"] == 1
    assert rows["natural"]["rank_regularity"] == 2
    assert rows["thicket"]["rank_regularity"] == 3
    assert rows["planted"]["verdict"] == "regular"
    assert rows["natural"]["verdict"] == "no departure detected"
    assert rows["thicket"]["verdict"] == "clustered"
    # recomputed from the points, not the R = 9.99 written in dispersion.csv
    assert rows["planted"]["R"] < 2.2


def test_group_values_recomputed_from_points(stands):
    res = compare_groups([read_results(f) for f in stands], "folder", permutations=199)
    row = next(g for g in group_rows(res) if g["group"] == "natural")
    nn, n = _nn_within_plots(stands[1])
    assert row["n"] == n
    assert row["mean_nn_m"] == pytest.approx(nn.mean(), rel=1e-9)
    assert row["density_per_ha"] == pytest.approx(n / 4800.0 * 1e4)
    # each plot's expectation 0.5 sqrt(A/n_p) weighted by n_p (Clark & Evans 1954)
    assert row["expected_nn_m"] == pytest.approx(3 * 0.5 * math.sqrt(1600 * 250) / 750)


def test_pairwise_tests_match_references(stands):
    res = compare_groups([read_results(f) for f in stands], "folder", permutations=199)
    pair = next(
        p for p in comparison_rows(res) if {p["group_a"], p["group_b"]} == {"planted", "natural"}
    )
    a = stands[0] if pair["group_a"] == "planted" else stands[1]
    b = stands[1] if a is stands[0] else stands[0]
    nn_a, n_a = _nn_within_plots(a)
    nn_b, n_b = _nn_within_plots(b)
    # Przyborowski & Wilenski (1940) via scipy.stats.binomtest (equal areas: p = 0.5)
    assert pair["p_density"] == pytest.approx(sps.binomtest(n_a, n_a + n_b, 0.5).pvalue)
    # scipy.stats reference implementations on the within-plot NN distances
    assert pair["p_mw"] == pytest.approx(sps.mannwhitneyu(nn_a, nn_b).pvalue, rel=1e-9)
    assert pair["p_ks"] == pytest.approx(sps.ks_2samp(nn_a, nn_b).pvalue, rel=1e-9)
    assert pair["R_diff"] == pytest.approx(pair["R_a"] - pair["R_b"])
    assert pair["p_R_diff"] < 1e-6 and pair["p_R_donnelly_diff"] < 1e-6
    # 3 plots against 3: all C(6, 3) = 20 arrangements, smallest two-sided p = 2/20
    assert pair["perm_exact"] and pair["perm_arrangements"] == 20
    assert pair["p_R_perm"] == pytest.approx(0.1)
    assert "cannot go below" in pair["warnings"]
    assert "few-arrangements" in pair["warnings"].codes


def test_holm_over_three_pairs(stands):
    res = compare_groups([read_results(f) for f in stands], "folder", permutations=199)
    pairs = comparison_rows(res)
    assert len(pairs) == 3
    for col in ("p_density", "p_R_diff", "p_mw", "p_ks", "p_R_perm"):
        raw = [p[col] for p in pairs]
        ref = multipletests(raw, method="holm")[1]  # reference: statsmodels
        assert [p[f"{col}_holm"] for p in pairs] == pytest.approx(list(ref))
    assert any("Holm" in n for n in res.notes)


def test_two_groups_are_not_adjusted(stands):
    res = compare_groups([read_results(f) for f in stands[:2]], "folder", permutations=199)
    (pair,) = comparison_rows(res)
    assert pair["p_density_holm"] == pair["p_density"]
    assert not any("Holm" in n for n in res.notes)


def test_by_plot_within_one_folder(tmp_path):
    f = make_folder(tmp_path / "mixed", ["planted", "random", "clustered"], seed=4)
    res = compare_groups([read_results(f)], "auto", permutations=199)
    assert res.by == "plot"
    ranks = {g["group"]: g["rank_regularity"] for g in group_rows(res)}
    assert ranks == {"P1": 1, "P2": 2, "P3": 3}
    assert all(math.isnan(p["p_R_perm"]) for p in comparison_rows(res))


def test_survey_folders_by_site_and_date(tmp_path):
    folders = [
        make_folder(tmp_path / "s1", ["planted"] * 2, seed=5, site="north", date="2025-05-01"),
        make_folder(tmp_path / "s2", ["planted"] * 2, seed=6, site="north", date="2025-09-01"),
        make_folder(tmp_path / "s3", ["random"] * 2, seed=7, site="south", date="2025-05-01",
                    offset=1000),
    ]  # fmt: skip
    tables = [read_results(f) for f in folders]
    # the two dates of "north" hold the same plots: by default never pooled, so sites are
    # compared date by date (only groups of the same date form pairs)
    by_site = compare_groups(tables, "auto", permutations=199)
    assert by_site.by == "site"
    g = {r["group"]: r for r in group_rows(by_site)}
    assert set(g) == {"north 2025-05-01", "north 2025-09-01", "south 2025-05-01"}
    assert g["north 2025-05-01"]["n_plots"] == 2
    assert [(p["group_a"], p["group_b"]) for p in comparison_rows(by_site)] == [
        ("north 2025-05-01", "south 2025-05-01")
    ]
    assert any("date by date" in n for n in by_site.notes)
    pooled = compare_groups(tables, "site", permutations=199, pool_dates=True)
    g = {r["group"]: r for r in group_rows(pooled)}
    assert g["north"]["n_plots"] == 4 and g["north"]["rank_regularity"] == 1
    assert any("count" in n and "twice" in n for n in pooled.notes)
    by_date = compare_groups(tables, "date", permutations=199)
    assert {r["group"] for r in group_rows(by_date)} == {"2025-05-01", "2025-09-01"}
    (pair,) = comparison_rows(by_date)
    assert pair["paired_plots"] == 2  # north's P1 and P2 on both dates
    # 2 plots: 4 sign patterns, p cannot go below 2/4 (exact sign-flip test)
    assert pair["paired_arrangements"] == 4 and pair["p_R_paired"] >= 0.5
    assert any("cannot go below 0.5" in n for n in by_date.notes)


def test_by_date_needs_dates(stands):
    with pytest.raises(InputError, match="--by date"):
        compare_groups([read_results(f) for f in stands], "date")


def test_one_group_is_an_error(stands):
    with pytest.raises(InputError, match="only one"):
        compare_groups([read_results(stands[0])], "folder")


@pytest.mark.parametrize("missing", ["dispersion.csv", "points.csv", "plots.gpkg"])
def test_folder_lacking_a_file(tmp_path, missing):
    f = make_folder(tmp_path / "r", ["random"], seed=8)
    (f / missing).unlink()
    with pytest.raises(InputError, match=missing):
        read_results(f)


def test_write_comparison(tmp_path, stands):
    res = compare_groups([read_results(f) for f in stands], "folder", permutations=199)
    paths = write_comparison(tmp_path / "cmp", res)
    assert {p.name for p in paths} == {"comparison.csv", "groups.csv", "comparison.json",
                                       "comparison.png"}  # fmt: skip
    head = (tmp_path / "cmp" / "comparison.csv").read_text().splitlines()[0].split(",")
    assert head == list(PAIR_COLUMNS)
    head = (tmp_path / "cmp" / "groups.csv").read_text().splitlines()[0].split(",")
    assert head == list(GROUP_COLUMNS)
    doc = json.loads((tmp_path / "cmp" / "comparison.json").read_text())
    assert len(doc["pairs"]) == 3 and doc["parameters"]["adjustment"] == "Holm (1979)"


def test_same_seed_same_numbers(tmp_path):
    a = make_folder(tmp_path / "a", ["random"] * 5, seed=9)
    b = make_folder(tmp_path / "b", ["random"] * 5, seed=10, offset=500)
    t = [read_results(a), read_results(b)]
    r1 = compare_groups(t, "folder", permutations=199, rng=3)
    r2 = compare_groups(t, "folder", permutations=199, rng=3)
    assert comparison_rows(r1) == comparison_rows(r2)
    assert not comparison_rows(r1)[0]["perm_exact"]  # C(10, 5) = 252 > 200: Monte Carlo


def test_cli_compare(tmp_path, stands, capsys):
    out = tmp_path / "cmp"
    code = main(["compare", *map(str, stands), "-o", str(out), "--permutations", "199"])
    text = capsys.readouterr().out
    assert code == 0
    assert "planted" in text and "Holm" in text
    assert text.index("planted") < text.index("natural") < text.index("thicket")
    assert (out / "comparison.csv").exists()


def test_cli_compare_bad_folder_exits_2_and_writes_nothing(tmp_path, stands, capsys):
    out = tmp_path / "cmp"
    code = main(["compare", str(stands[0]), str(tmp_path / "nothing"), "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith("error: ") and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_results_from_points_in_memory_matches_folder(tmp_path):
    from ecoscan.analysis.compare.compute import results_from_points
    from ecoscan.io.inputs import load_points_and_plots

    f = make_folder(tmp_path / "r", ["planted", "random"], seed=11)
    g = make_folder(tmp_path / "s", ["random", "random"], seed=12, offset=500)
    disk = compare_groups([read_results(f), read_results(g)], "folder", permutations=199)
    mem = []
    for folder in (f, g):
        si = load_points_and_plots(folder / "points.csv", folder / "plots.gpkg")
        mem.append(results_from_points(si.points, si.layer, label=folder.name,
                                       membership=si.membership))  # fmt: skip
    memory = compare_groups(mem, "folder", permutations=199)
    a, b = comparison_rows(disk)[0], comparison_rows(memory)[0]
    for k in ("n_a", "n_b", "R_a", "R_b", "p_density", "p_R_perm", "p_ks"):
        assert a[k] == pytest.approx(b[k]), k


def test_results_from_points_keeps_sites_apart():
    from ecoscan.analysis.compare.compute import results_from_points

    rng = np.random.default_rng(13)
    p1, p2 = shapely.box(0, 0, 30, 30), shapely.box(100, 0, 130, 30)
    xy = np.vstack([uniform_in_polygon(p1, 80, rng=rng), uniform_in_polygon(p2, 90, rng=rng)])
    attrs = {
        "site": np.array(["north"] * 80 + ["south"] * 90, dtype=object),
        "plot_id": np.array(["N1"] * 80 + ["S1"] * 90, dtype=object),
    }
    layer = PlotLayer([Plot("N1", p1), Plot("S1", p2)], None)
    t = results_from_points(PointSet(xy[:, 0], xy[:, 1], attrs), layer, label="survey")
    assert [(u.site, u.plot_id, u.nn.n) for u in t.units] == [
        ("north", "N1", 80),
        ("south", "S1", 90),
    ]
    res = compare_groups([t], "site", permutations=99)
    assert {g.name: g.n for g in res.groups} == {"north": 80, "south": 90}


def test_folders_in_different_crs_are_compared_in_their_own_metres(tmp_path):
    from ecoscan.io.crs import transform_xy

    a = make_folder(tmp_path / "a", ["random"] * 2, seed=14)
    b = make_folder(tmp_path / "b", ["random"] * 2, seed=14)
    # rewrite b in the neighbouring UTM zone: same plants, other CRS
    t = read_results(b)
    utm34 = CRS.from_epsg(32634)
    x, y = transform_xy(t.points.x, t.points.y, UTM33, utm34)
    write_points(PointSet(x, y, t.points.attrs, utm34), b / "points.csv")
    res = compare_groups([read_results(a), read_results(b)], "folder", permutations=99)
    assert any("different CRSs" in n for n in res.notes)
    ga, gb = res.groups
    assert ga.n == gb.n  # the plots were reprojected with the points
    assert ga.r.statistic == pytest.approx(gb.r.statistic, rel=2e-3)  # UTM scale differs a little


def test_group_label_follows_the_interval_shown_beside_it():
    # Random plants in small square plots: the plain Clark-Evans R is biased upward by the
    # edge (Donnelly 1978), so its 95% interval can exclude 1 while the edge-corrected
    # one does not. The label must agree with an interval that groups.csv shows.
    from ecoscan.analysis.compare.compute import results_from_points

    # 15 plants per plot: the edge raises the plain R by about 13% (Donnelly's expectation),
    # about three standard errors of a group of 10 plots, so the plain interval excludes 1
    # in nearly every draw whatever the sampler's random stream.
    rng = np.random.default_rng(2)
    tabs = []
    for lab, off in (("east", 0.0), ("west", 1000.0)):
        plots = [
            Plot(f"Q{k}", shapely.box(off + 20 * k, 0, off + 20 * k + 12, 12)) for k in range(10)
        ]
        xy = np.vstack([uniform_in_polygon(p.geometry, 15, rng=rng) for p in plots])
        ids = np.repeat([p.plot_id for p in plots], 15).astype(object)
        pts = PointSet(xy[:, 0], xy[:, 1], {"plot_id": ids}, UTM33)
        tabs.append(results_from_points(pts, PlotLayer(plots, UTM33), label=lab))
    rows = group_rows(compare_groups(tabs, "folder", permutations=199))
    assert any(r["R_low95"] > 1.0 for r in rows)  # the plain interval misleads here
    for r in rows:
        lo, hi = r["R_donnelly_low95"], r["R_donnelly_high95"]
        # the interval is R_donnelly ± 1.96 SE (normal quantile from scipy)
        assert (lo + hi) / 2 == pytest.approx(r["R_donnelly"])
        assert (hi - lo) / 2 == pytest.approx(sps.norm.ppf(0.975) * r["R_donnelly_se"])
        want = "regular" if lo > 1 else "clustered" if hi < 1 else "no departure detected"
        assert r["verdict"] == want


def test_group_label_in_narrow_strips_is_marked_approximate():
    # In a 400 x 5 m strip with 30 plants the plot is narrower than 1.5 plant spacings
    # (2A/P ≈ 5 m against a spacing √(A/n) ≈ 8.2 m): Donnelly's correction fails there
    # (measured size 98% in docs/validity.md), so the label must say it is approximate.
    from ecoscan.analysis.compare.compute import results_from_points

    rng = np.random.default_rng(4)
    tabs = []
    for lab, off in (("strip", 0.0), ("square", 5000.0)):
        g = (
            shapely.box(off, 0, off + 400, 5)
            if lab == "strip"
            else shapely.box(off, 0, off + 60, 60)
        )
        plots = [Plot("P1", g)]
        xy = uniform_in_polygon(g, 30, rng=rng)
        pts = PointSet(xy[:, 0], xy[:, 1], {"plot_id": np.array(["P1"] * 30, object)}, UTM33)
        tabs.append(results_from_points(pts, PlotLayer(plots, UTM33), label=lab))
    rows = {r["group"]: r for r in group_rows(compare_groups(tabs, "folder", permutations=99))}
    assert "verdict approximate" in rows["strip"]["warnings"]
    assert "verdict approximate" not in rows["square"]["warnings"]
    assert rows["strip"]["warnings"].codes == ("narrow-plot",)
    assert rows["square"]["warnings"].codes == ()
