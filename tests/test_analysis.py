"""Per-plot orchestration: settings, verdicts, warnings, reproducibility, results folder."""

import csv
import json

import numpy as np
import pytest
import shapely
from pyproj import CRS

from ecoscan import __version__
from ecoscan.analysis.dispersion.columns import DISPERSION_COLUMNS, dispersion_rows
from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse, analyse_plot
from ecoscan.errors import InputError
from ecoscan.io.inputs import SurveyInputs
from ecoscan.model.membership import assign_plots
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.report.folders import write_analysis
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.nearest import clark_evans

UTM33 = CRS.from_epsg(32633)
X0, Y0 = 500_000.0, 5_000_000.0
FAST = DispersionSettings(simulations=99)


def _inputs(order=(0, 1, 2)):
    rng = np.random.default_rng(12)
    polys = [
        shapely.box(X0, Y0, X0 + 60, Y0 + 60),
        shapely.Polygon([(X0 + 100, Y0), (X0 + 170, Y0 + 10), (X0 + 150, Y0 + 70)]),
        shapely.box(X0 + 300, Y0, X0 + 320, Y0 + 20),  # no points
    ]
    ids = ["north", "east", "empty"]
    xy = np.vstack(
        [uniform_in_polygon(polys[0], 80, rng=rng), uniform_in_polygon(polys[1], 40, rng=rng)]
    )
    pts = PointSet(xy[:, 0], xy[:, 1], {"height_m": rng.uniform(1, 3, xy.shape[0])}, UTM33)
    layer = PlotLayer([Plot(ids[i], polys[i]) for i in order], UTM33)
    return SurveyInputs(pts, layer, assign_plots(pts, layer), [])


def test_settings_from_mapping_and_back():
    s = DispersionSettings.from_mapping({"simulations": 199, "seed": 7, "guard_m": 2.5})
    assert s.simulations == 199 and s.seed == 7 and s.guard_m == 2.5
    assert DispersionSettings.from_mapping(s.to_dict()) == s


@pytest.mark.parametrize(
    "d, match",
    [
        ({"simulation": 99}, "unknown dispersion setting"),
        ({"simulations": "many"}, "must be int"),
        ({"simulations": 0}, "at least 1"),
        ({"alpha": 1.5}, "between 0 and 1"),
        ({"direction": "less"}, "direction"),
        ({"quadrat_m": -1.0}, "positive"),
        ({"guard_m": True}, "must be"),
    ],
)
def test_settings_refuse_bad_values(d, match):
    with pytest.raises(InputError, match=match):
        DispersionSettings.from_mapping(d)


def test_empty_and_single_point_plots_have_no_statistics():
    poly = shapely.box(0, 0, 10, 10)
    r0 = analyse_plot(np.empty((0, 2)), poly, "a", FAST)
    r1 = analyse_plot(np.array([[5.0, 5.0]]), poly, "b", FAST)
    for r, n in ((r0, 0), (r1, 1)):
        row = r.row()
        assert row["n"] == n and np.isnan(row["R"]) and np.isnan(row["p_mc"])
        assert row["verdict"] == "" and row["warnings"]
    assert "no points" in r0.row()["warnings"]
    assert "at least 2" in r1.row()["warnings"]
    assert r1.row()["density_per_ha"] == pytest.approx(1 / 100 * 1e4)


def test_small_plot_flagged_but_computed():
    poly = shapely.box(0, 0, 30, 30)
    xy = uniform_in_polygon(poly, 12, rng=1)
    r = analyse_plot(xy, poly, "small", FAST)
    assert "fewer than 30" in r.row()["warnings"]
    assert r.row()["R"] == pytest.approx(clark_evans(xy, poly.area).statistic)
    assert r.verdict in ("clustered", "regular", "no departure detected", "too few plants to tell")


def test_duplicates_warned():
    poly = shapely.box(0, 0, 30, 30)
    xy = uniform_in_polygon(poly, 40, rng=2)
    xy = np.vstack([xy, xy[:3]])
    r = analyse_plot(xy, poly, "dup", FAST)
    assert r.n_coincident == 6
    assert "6 points share their position" in r.row()["warnings"]


def test_verdicts_follow_monte_carlo_and_alternative():
    poly = shapely.box(0, 0, 50, 50)
    rng = np.random.default_rng(3)
    parents = uniform_in_polygon(poly, 4, rng=rng)
    clus = np.repeat(parents, 25, axis=0) + rng.normal(0, 1.0, (100, 2))
    clus = clus[shapely.contains_xy(poly, clus[:, 0], clus[:, 1])]
    assert analyse_plot(clus, poly, "c", FAST).verdict == "clustered"
    only_regular = DispersionSettings(simulations=99, direction="regular")
    assert analyse_plot(clus, poly, "c", only_regular).verdict == "no departure detected"
    j, i = np.mgrid[0:10, 0:10]
    grid = np.column_stack([i.ravel() * 5 + 2.5, j.ravel() * 5 + 2.5]).astype(float)
    assert analyse_plot(grid, poly, "g", FAST).verdict == "regular"


def test_same_seed_same_numbers_and_plot_order_independent():
    a = dispersion_rows(analyse(_inputs(), FAST))
    b = dispersion_rows(analyse(_inputs(), FAST))
    c = {r["plot_id"]: r for r in dispersion_rows(analyse(_inputs(order=(2, 1, 0)), FAST))}
    assert [r["plot_id"] for r in a] == ["north", "east", "empty"]
    for ra, rb in zip(a, b, strict=True):
        assert ra["p_mc"] == rb["p_mc"] or (np.isnan(ra["p_mc"]) and np.isnan(rb["p_mc"]))
        rc = c[ra["plot_id"]]
        assert rc["expected_nn_mc_m"] == ra["expected_nn_mc_m"] or ra["n"] == 0
    other = dispersion_rows(analyse(_inputs(), DispersionSettings(simulations=99, seed=2)))
    assert other[0]["expected_nn_mc_m"] != a[0]["expected_nn_mc_m"]


def test_rows_have_the_convention_columns_in_order():
    rows = dispersion_rows(analyse(_inputs(), FAST))
    assert list(rows[0])[: len(DISPERSION_COLUMNS)] == list(DISPERSION_COLUMNS)
    assert rows[2]["n"] == 0 and "no points" in rows[2]["warnings"]
    assert rows[0]["area_m2"] == pytest.approx(3600.0)
    assert rows[0]["density_per_ha"] == pytest.approx(80 / 3600 * 1e4)


def test_write_analysis_folder(tmp_path):
    inputs = _inputs()
    res = analyse(inputs, FAST)
    paths = write_analysis(tmp_path / "out", inputs, res, FAST, notes=["a note"])
    names = sorted(p.name for p in paths)
    assert names == ["dispersion.csv", "dispersion.json", "plots.gpkg", "points.csv", "points.prj"]
    with open(tmp_path / "out" / "dispersion.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0][: len(DISPERSION_COLUMNS)] == list(DISPERSION_COLUMNS)
    assert [r[0] for r in rows[1:]] == ["north", "east", "empty"]
    doc = json.loads((tmp_path / "out" / "dispersion.json").read_text())
    assert doc["ecoscan_version"] == __version__
    assert doc["parameters"]["simulations"] == 99
    assert doc["notes"] == ["a note"]
    assert doc["plots"][0]["p_mc"] == pytest.approx(res[0].monte_carlo.pvalue)
    with open(tmp_path / "out" / "points.csv", newline="") as fh:
        prow = list(csv.reader(fh))
    assert prow[0] == ["x", "y", "plot_id", "plot_count", "height_m"]
    assert len(prow) == 1 + 120
    assert {r[2] for r in prow[1:]} == {"north", "east"}


def test_write_analysis_refuses_file_as_folder(tmp_path):
    f = tmp_path / "taken"
    f.write_text("x")
    inputs = _inputs()
    with pytest.raises(InputError, match="is a file"):
        write_analysis(f, inputs, analyse(inputs, FAST), FAST)


def test_multipolygon_plot_with_hole():
    # a plot in two parts, one with a hole: area by exact geometry, simulations stay inside
    part1 = shapely.box(0, 0, 40, 40).difference(shapely.box(15, 15, 25, 25))
    part2 = shapely.box(60, 0, 80, 20)
    plot = shapely.MultiPolygon([part1, part2])
    xy = uniform_in_polygon(plot, 60, rng=4)
    r = analyse_plot(xy, plot, "two-parts", FAST)
    assert r.area_m2 == pytest.approx(1600 - 100 + 400)
    assert r.perimeter_m == pytest.approx(160 + 40 + 80)
    assert r.quadrat.cell_area_m2.sum() == pytest.approx(r.area_m2)
    # Donnelly's E is an approximation here; the Monte Carlo expectation in the exact shape
    # must still be close to it (within 5 %)
    assert r.monte_carlo.expected_nn_m == pytest.approx(r.donnelly.expected_nn_m, rel=0.05)


def test_fixed_guard_and_quadrat_are_used():
    poly = shapely.box(0, 0, 50, 50)
    xy = uniform_in_polygon(poly, 50, rng=6)
    s = DispersionSettings(simulations=19, guard_m=5.0, quadrat_m=25.0)
    row = analyse_plot(xy, poly, "p", s).row()
    assert row["guard_m"] == 5.0 and row["quadrat_size_m"] == 25.0
    assert row["quadrat_cells"] == 4 and row["quadrat_df"] == 3
    inner = shapely.box(5, 5, 45, 45)
    assert row["n_guard_focal"] == int(shapely.contains_xy(inner, xy[:, 0], xy[:, 1]).sum())
