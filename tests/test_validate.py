"""Detection accuracy: counts, precision, recall, F1 and per-plot rows."""

import csv
import math

import numpy as np
import pytest
import shapely
from pyproj import CRS

from ecoscan.analysis.validation.compute import COLUMNS, validate_points
from ecoscan.cli import main
from ecoscan.errors import InputError
from ecoscan.io.vector import write_plots, write_points
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet

UTM = CRS.from_epsg(32633)


def _ps(xy):
    xy = np.asarray(xy, float)
    return PointSet(xy[:, 0], xy[:, 1], {}, UTM)


def test_hand_worked_example():
    # 4 detections, 3 reference plants, tolerance 0.5 m: two detections lie 0.3 m and 0.4 m
    # from two plants, one detection is 0.6 m from the third plant (too far), one is alone.
    det = _ps([[0, 0.3], [10, 0.4], [20.6, 0], [50, 50]])
    ref = _ps([[0, 0], [10, 0], [20, 0]])
    (row,) = validate_points(det, ref, 0.5)
    assert (row.tp, row.fp, row.fn) == (2, 2, 1)
    # precision TP/(TP+FP), recall TP/(TP+FN), F1 = 2TP/(2TP+FP+FN) (van Rijsbergen 1979)
    assert row.precision == pytest.approx(0.5)
    assert row.recall == pytest.approx(2 / 3)
    assert row.f1 == pytest.approx(4 / 7)
    assert row.f1 == pytest.approx(2 * 0.5 * (2 / 3) / (0.5 + 2 / 3))
    assert row.count_error == 1
    assert row.mean_offset_m == pytest.approx(0.35)


def test_one_to_one_not_greedy():
    # Two detections, two plants: greedy nearest pairing would take the 0.1 m pair and leave
    # the other detection unmatched; the optimal assignment (Kuhn 1955) pairs both.
    det = _ps([[0.0, 0.0], [0.9, 0.0]])
    ref = _ps([[0.5, 0.0], [-0.4, 0.0]])
    (row,) = validate_points(det, ref, 0.5)
    assert row.tp == 2 and row.fn == 0


def test_per_plot_rows_never_match_across_plots():
    a = shapely.box(0, 0, 10, 10)
    b = shapely.box(10, 0, 20, 10)
    layer = PlotLayer([Plot("a", a), Plot("b", b)], UTM)
    det = _ps([[9.9, 5], [15, 5]])
    ref = _ps([[10.1, 5], [15.1, 5]])  # first reference plant is in plot b
    rows = validate_points(det, ref, 0.5, plots=layer)
    by = {r.plot_id: r for r in rows}
    assert (by["a"].tp, by["a"].fp, by["a"].fn) == (0, 1, 0)
    assert (by["b"].tp, by["b"].fp, by["b"].fn) == (1, 0, 1)
    assert (by["all"].tp, by["all"].fp, by["all"].fn) == (1, 1, 1)
    assert math.isnan(by["a"].recall)  # no reference plants: undefined, not zero


def test_bad_tolerance():
    with pytest.raises(InputError):
        validate_points(_ps([[0, 0]]), _ps([[0, 0]]), 0.0)


def test_cli_writes_the_table(tmp_path, capsys):
    det = _ps([[1, 1], [5, 5], [8, 8]])
    ref = _ps([[1.1, 1], [5, 5.2], [3, 3]])
    write_points(det, tmp_path / "det.csv")
    write_points(ref, tmp_path / "ref.gpkg")
    write_plots(PlotLayer([Plot("p1", shapely.box(0, 0, 10, 10))], UTM), tmp_path / "plots.gpkg")
    out = tmp_path / "acc.csv"
    code = main(
        [
            "validate",
            str(tmp_path / "det.csv"),
            str(tmp_path / "ref.gpkg"),
            "--tolerance",
            "0.5",
            "--plots",
            str(tmp_path / "plots.gpkg"),
            "-o",
            str(out),
        ]
    )
    assert code == 0
    rows = list(csv.DictReader(out.open()))
    assert tuple(rows[0].keys()) == COLUMNS
    assert [r["plot_id"] for r in rows] == ["p1", "all"]
    assert rows[1]["tp"] == "2" and rows[1]["fp"] == "1" and rows[1]["fn"] == "1"
    printed = capsys.readouterr().out
    assert "precision" in printed and "all" in printed


def test_cli_refuses_non_positive_tolerance(tmp_path, capsys):
    write_points(_ps([[1, 1]]), tmp_path / "d.csv")
    code = main(
        [
            "validate",
            str(tmp_path / "d.csv"),
            str(tmp_path / "d.csv"),
            "--tolerance",
            "-1",
            "-o",
            str(tmp_path / "x.csv"),
        ]
    )
    assert code == 2
    assert not (tmp_path / "x.csv").exists()
    err = capsys.readouterr().err
    assert err.startswith("error:") and len(err.strip().splitlines()) == 1
