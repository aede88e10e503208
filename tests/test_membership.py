"""Plot membership (a plant can lie in several plots) and plots that were not surveyed.

Every count is checked against a brute-force count with plain coordinate comparisons on
axis-aligned boxes (no shapely), the outside reference here.
"""

import csv

import numpy as np
import shapely
from pyproj import CRS

from ecoscan.analysis.change.columns import change_rows
from ecoscan.analysis.change.compute import detect_change
from ecoscan.analysis.validation.compute import validate_points
from ecoscan.cli import main
from ecoscan.io.vector import write_plots
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet

UTM = CRS.from_epsg(32633)
X0, Y0 = 400_000.0, 5_000_000.0
# A = [0,100]², B = [50,150]×[0,100] overlap on [50,100]×[0,100]; C nested inside A;
# D lies 300 m beyond every plant: not surveyed
BOXES = {
    "A": (0, 0, 100, 100),
    "B": (50, 0, 150, 100),
    "C": (10, 10, 40, 40),
    "D": (400, 0, 450, 50),
}


def _layer():
    return PlotLayer(
        [Plot(k, shapely.box(X0 + a, Y0 + b, X0 + c, Y0 + d)) for k, (a, b, c, d) in BOXES.items()],
        UTM,
    )


def _brute(xy):
    # count per plot by coordinate comparison: the outside reference for membership
    return {
        k: int(np.sum((xy[:, 0] >= a) & (xy[:, 0] <= c) & (xy[:, 1] >= b) & (xy[:, 1] <= d)))
        for k, (a, b, c, d) in BOXES.items()
    }


def _plants(seed=5):
    # complete spatial randomness at 400 plants/ha over [0,150]×[0,100] (1.5 ha): 600 plants
    rng = np.random.default_rng(seed)
    return np.column_stack([rng.uniform(0, 150, 600), rng.uniform(0, 100, 600)])


def test_analyse_counts_every_plant_in_every_plot_holding_it(tmp_path, capsys):
    xy = _plants()
    pts = tmp_path / "plants.csv"
    pts.write_text("x,y\n" + "".join(f"{X0 + a:.3f},{Y0 + b:.3f}\n" for a, b in xy))
    write_plots(_layer(), tmp_path / "plots.gpkg")
    out = tmp_path / "res"
    rc = main(
        ["analyse", str(pts), "--plots", str(tmp_path / "plots.gpkg"), "--crs", "EPSG:32633",
         "-o", str(out), "--simulations", "19", "--quiet"]
    )  # fmt: skip
    err = capsys.readouterr().err
    assert rc == 0, err
    with open(out / "dispersion.csv", newline="") as fh:
        rows = {r["plot_id"]: r for r in csv.DictReader(fh)}
    want = _brute(xy)
    # before: B lost the plants of the shared half to A (n about half) and C lost all to A
    assert {k: int(rows[k]["n"]) for k in "ABC"} == {k: want[k] for k in "ABC"}
    # the unsurveyed plot D is left out, not shown as a plot with no plants
    assert "D" not in rows and want["D"] == 0
    doc = (out / "dispersion.json").read_text()
    assert "plot D lies outside" in doc and "not surveyed" in doc
    assert "2 pairs of plots overlap" in doc  # A & B, A & C
    # points.csv: one row per plant and plot holding it; plot_count undoes the repeats
    with open(out / "points.csv", newline="") as fh:
        prow = list(csv.DictReader(fh))
    per = {k: sum(r["plot_id"] == k for r in prow) for k in "ABC"}
    assert per == {k: want[k] for k in "ABC"}
    inside_any = int(np.sum((xy[:, 0] <= 150) & (xy[:, 1] <= 100)))
    assert sum(1 / int(r["plot_count"]) for r in prow) == np.float64(inside_any)


def test_validate_and_change_count_plants_of_overlapping_plots_in_each():
    xy = _plants(seed=9) + np.array([X0, Y0])
    layer = _layer()
    det = PointSet(xy[:, 0], xy[:, 1], {}, UTM)
    rows = {r.plot_id: r for r in validate_points(det, det, 0.5, plots=layer)}
    want = _brute(xy - [X0, Y0])
    assert {k: rows[k].tp for k in "ABC"} == {k: want[k] for k in "ABC"}
    assert "D" not in rows  # no plant of either set: not surveyed, not a perfect score
    assert rows["all"].tp == xy.shape[0]  # each plant once overall
    later = PointSet(xy[:500, 0], xy[:500, 1], {}, UTM)
    res = detect_change(det, later, 0.5, plots=layer, estimate_shift=False, simulations=0)
    by = {r["plot_id"]: r for r in change_rows(res, overall=False)}
    lost = xy[500:] - [X0, Y0]
    lost_want = _brute(lost)
    for k in "ABC":
        assert by[k]["n_earlier"] == want[k]
        assert by[k]["lost"] == lost_want[k]
    assert any("overlap" in w for w in res.warnings)
