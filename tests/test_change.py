"""Change between two dates: matching, shift removal, per-plot survival, bad input, CLI."""

import json
import math

import numpy as np
import pytest
import shapely
from pyproj import CRS
from statsmodels.stats.proportion import proportion_confint

from ecoscan.analysis.change.columns import CHANGE_COLUMNS, PLANT_COLUMNS, change_rows
from ecoscan.analysis.change.compute import detect_change
from ecoscan.cli import main
from ecoscan.errors import InputError
from ecoscan.io.crs import transform_xy
from ecoscan.io.vector import read_points, write_plots, write_points
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.report.folders import write_change
from ecoscan.stats.csr import uniform_in_polygon

UTM33 = CRS.from_epsg(32633)
X0, Y0 = 500_000.0, 5_000_000.0
SHIFT = (0.3, -0.2)


def _layer():
    return PlotLayer(
        [
            Plot("A", shapely.box(X0, Y0, X0 + 40, Y0 + 40)),
            Plot("B", shapely.box(X0 + 40, Y0, X0 + 80, Y0 + 40)),
        ],
        UTM33,
    )


def _scenario(seed=0, lost=0.2, new=0.15, shift=SHIFT, noise=0.04):
    """Invented survey: 2 m planting grid; known losses, recruits away from old plants."""
    rng = np.random.default_rng(seed)
    g = np.mgrid[0:40, 0:20].reshape(2, -1).T * 2.0 + 1.0
    a = g + rng.normal(0, 0.25, g.shape) + [X0, Y0]
    is_lost = rng.uniform(size=len(a)) < lost
    recruits = []
    while len(recruits) < int(new * len(a)):
        p = rng.uniform([X0 + 0.5, Y0 + 0.5], [X0 + 79.5, Y0 + 39.5])
        if np.min(np.hypot(*(a - p).T)) > 0.9 and all(np.hypot(*(p - q)) > 0.9 for q in recruits):
            recruits.append(p)
    recruits = np.array(recruits)
    surv = a[~is_lost] + shift + rng.normal(0, noise, (int((~is_lost).sum()), 2))
    b = np.vstack([surv, recruits + shift])
    earlier = PointSet(a[:, 0], a[:, 1], {}, UTM33)
    later = PointSet(b[:, 0], b[:, 1], {}, UTM33)
    return earlier, later, is_lost, len(surv), recruits


def test_recovers_known_losses_recruits_and_shift():
    # Synthetic ground truth: which plants were removed and which were added is known
    earlier, later, is_lost, n_surv, recruits = _scenario()
    r = detect_change(earlier, later, 0.5, plots=_layer(), simulations=19)
    assert r.shift_x_m == pytest.approx(SHIFT[0], abs=0.01)
    assert r.shift_y_m == pytest.approx(SHIFT[1], abs=0.01)
    lost_rows = set(r.earlier_row[r.status == "lost"].astype(int))
    assert lost_rows == set(np.flatnonzero(is_lost) + 1)
    new_rows = set(r.later_row[r.status == "new"].astype(int))
    assert new_rows == set(range(n_surv + 1, n_surv + len(recruits) + 1))
    # persisting plants pair earlier row i with the survivor made from it
    pers = r.status == "persisting"
    survivors = np.flatnonzero(~is_lost)
    assert np.array_equal(survivors[r.later_row[pers].astype(int) - 1], r.earlier_row[pers] - 1)
    # their two positions differ by the shift, up to the noise
    dx = r.x_later_m[pers] - r.x_earlier_m[pers]
    assert np.median(dx) == pytest.approx(SHIFT[0], abs=0.01)
    assert r.counts == {"persisting": n_surv, "lost": int(is_lost.sum()), "new": len(recruits)}


def test_per_plot_rows_and_wilson_interval():
    earlier, later, is_lost, _n, _rec = _scenario(seed=1)
    r = detect_change(earlier, later, 0.5, plots=_layer(), simulations=19)
    rows = change_rows(r)
    assert [row["plot_id"] for row in rows] == ["A", "B", "all"]
    a_mask = earlier.x < X0 + 40
    for row, mask in ((rows[0], a_mask), (rows[1], ~a_mask), (rows[2], np.ones_like(a_mask))):
        assert row["n_earlier"] == mask.sum()
        assert row["lost"] == (is_lost & mask).sum()
        assert row["survival"] == pytest.approx(row["persisting"] / row["n_earlier"])
        # Reference: statsmodels proportion_confint(method="wilson")
        lo, hi = proportion_confint(row["persisting"], row["n_earlier"], method="wilson")
        assert (row["survival_low95"], row["survival_high95"]) == pytest.approx((lo, hi))
        assert row["recruitment"] == pytest.approx(row["new"] / row["n_earlier"])
        area = 1600.0 if row["plot_id"] != "all" else 3200.0
        assert row["density_change_per_ha"] == pytest.approx(
            (row["n_later"] - row["n_earlier"]) / area * 1e4
        )
    assert set(rows[0]) == set(CHANGE_COLUMNS)
    # 20% lost vs 15% recruited of 800: the exact test on lost vs new sees the net loss
    assert rows[2]["p_count_change"] < 0.05
    # random losses from a grid make it less regular: R falls, and random turnover explains it
    assert rows[2]["R_later"] < rows[2]["R_earlier"]


def test_no_true_change_tests_hold_their_level():
    # Balanced random turnover in CSR: Poisson numbers of random losses and of uniform
    # recruits with the same mean (the null of both tests; with binomial losses the count
    # test is more conservative still, as the losses then vary less than Poisson counts)
    rng = np.random.default_rng(2)
    poly = shapely.box(0, 0, 40, 40)
    layer = PlotLayer([Plot("P", poly)], None)
    pc, pr = [], []
    for _ in range(120):
        a = uniform_in_polygon(poly, 150, rng=rng)
        keep = np.ones(150, bool)
        keep[rng.choice(150, min(rng.poisson(30), 150), replace=False)] = False
        b = np.vstack([a[keep], uniform_in_polygon(poly, rng.poisson(30), rng=rng)])
        r = detect_change(
            PointSet(a[:, 0], a[:, 1]),
            PointSet(b[:, 0], b[:, 1]),
            0.05,
            plots=layer,
            estimate_shift=False,
            simulations=99,
            rng=rng,
        )
        pc.append(r.overall["p_count_change"])
        pr.append(r.overall["p_R_change_mc"])
    assert 0.01 < np.mean(np.array(pc) < 0.05) < 0.09
    assert 0.01 < np.mean(np.array(pr) < 0.05) < 0.1


def test_later_survey_in_another_crs_is_reprojected():
    earlier, later, is_lost, _n, _rec = _scenario(seed=3)
    utm34 = CRS.from_epsg(32634)
    x34, y34 = transform_xy(later.x, later.y, UTM33, utm34)
    r = detect_change(earlier, PointSet(x34, y34, {}, utm34), 0.5, plots=_layer(), simulations=0)
    assert any("reprojected" in n for n in r.notes)
    assert r.counts["lost"] == is_lost.sum()
    assert r.shift_x_m == pytest.approx(SHIFT[0], abs=0.01)


def test_surveys_that_do_not_overlap_are_refused():
    earlier, later, *_ = _scenario(seed=4)
    far = PointSet(later.x + 10_000, later.y, {}, UTM33)
    with pytest.raises(InputError, match="do not overlap"):
        detect_change(earlier, far, 0.5)


@pytest.mark.parametrize("tol", [0.0, -1.0, float("nan"), float("inf")])
def test_tolerance_must_be_a_positive_distance(tol):
    earlier, later, *_ = _scenario(seed=5)
    with pytest.raises(InputError, match="tolerance"):
        detect_change(earlier, later, tol)


def test_tolerance_above_spacing_warns_ambiguous():
    earlier, later, *_ = _scenario(seed=6)
    r = detect_change(earlier, later, 2.5, plots=_layer(), simulations=0)
    assert any("ambiguous" in w for w in r.warnings)
    assert [w.code for w in r.warnings if w.code == "tolerance-above-spacing"]
    assert all(w.severity == "warning" for w in r.warnings)


def test_plot_missing_from_later_date_warns_and_keeps_every_plant():
    earlier, later, *_ = _scenario(seed=7)
    keep = later.x < X0 + 40  # the later flight missed plot B
    r = detect_change(earlier, later.subset(keep), 0.5, plots=_layer(), simulations=0)
    assert any("B" in w and "one date only" in w for w in r.warnings)
    row_b = next(row for row in r.plots if row["plot_id"] == "B")
    assert row_b["n_later"] == 0 and "later date" in row_b["warnings"]
    # the row's cell is text in the table and records for code (issue 14: found by code)
    assert row_b["warnings"].codes == ("no-plants-later",)
    assert "one-date-only" in {w.code for w in r.warnings}
    assert r.status.size == earlier.n + int(keep.sum()) - r.counts["persisting"]


def test_plants_outside_plots_are_listed_not_lost():
    earlier, later, *_ = _scenario(seed=8)
    extra = PointSet(np.r_[earlier.x, X0 + 200], np.r_[earlier.y, Y0 + 5], {}, UTM33)
    r = detect_change(extra, later, 0.5, plots=_layer(), simulations=0)
    assert r.plot_id[r.earlier_row == earlier.n + 1][0] == ""
    assert any("outside every plot" in n for n in r.notes)
    assert r.overall["n_earlier"] == earlier.n


def test_plot_ids_from_attributes_and_missing_plot_warning():
    earlier, later, *_ = _scenario(seed=9)
    e_ids = np.where(earlier.x < X0 + 40, "A", "B").astype(object)
    l_ids = np.where(later.x < X0 + 40, "A", "B").astype(object)
    e_ids[:5] = "C"  # plot C only in the earlier survey
    e = PointSet(earlier.x, earlier.y, {"plot_id": e_ids}, UTM33)
    la = PointSet(later.x, later.y, {"plot_id": l_ids}, UTM33)
    r = detect_change(e, la, 0.5, simulations=0)
    assert {row["plot_id"] for row in r.plots} == {"A", "B", "C"}
    assert any("C" in w and "only in the earlier" in w for w in r.warnings)


def test_without_plots_uses_convex_hull_window():
    earlier, later, *_ = _scenario(seed=10)
    r = detect_change(earlier, later, 0.5, simulations=0)
    assert any("convex hull" in n for n in r.notes)
    hull = shapely.convex_hull(shapely.multipoints(np.column_stack([r.x_m, r.y_m])))
    assert r.overall["area_m2"] == pytest.approx(hull.area)


def test_same_seed_same_numbers():
    earlier, later, *_ = _scenario(seed=11)
    r1 = detect_change(earlier, later, 0.5, plots=_layer(), simulations=29, rng=5)
    r2 = detect_change(earlier, later, 0.5, plots=_layer(), simulations=29, rng=5)
    assert change_rows(r1) == change_rows(r2)


def test_write_change_files(tmp_path):
    earlier, later, is_lost, *_ = _scenario(seed=12)
    r = detect_change(earlier, later, 0.5, plots=_layer(), simulations=19)
    paths = write_change(tmp_path / "out", r)
    names = {p.name for p in paths}
    assert {"plants.csv", "plants.gpkg", "change.csv", "change.json", "change_map.png"} <= names
    lines = (tmp_path / "out" / "plants.csv").read_text().splitlines()
    assert lines[0].split(",") == list(PLANT_COLUMNS)
    assert len(lines) - 1 == r.status.size
    csv_back = read_points(tmp_path / "out" / "plants.csv")  # x, y + plants.prj sidecar
    assert csv_back.crs == UTM33
    np.testing.assert_allclose(csv_back.x, r.x_m, atol=6e-4)
    np.testing.assert_allclose(csv_back.attrs["x_later_m"], r.x_later_m, atol=6e-4)
    back = read_points(tmp_path / "out" / "plants.gpkg")
    assert back.n == r.status.size and back.crs == UTM33
    assert int(np.sum(back.attrs["status"] == "lost")) == is_lost.sum()
    doc = json.loads((tmp_path / "out" / "change.json").read_text())
    assert doc["shift_x_m"] == pytest.approx(r.shift_x_m)
    assert doc["overall"]["plot_id"] == "all" and len(doc["plots"]) == 2
    assert doc["parameters"]["tolerance_m"] == 0.5
    assert (tmp_path / "out" / "change.csv").read_text().splitlines()[-1].startswith("all,")
    assert not list((tmp_path / "out").glob(".*tmp-ecoscan*"))


def test_cli_change(tmp_path, capsys):
    earlier, later, is_lost, *_ = _scenario(seed=13)
    write_points(earlier, tmp_path / "spring.csv")
    write_points(later, tmp_path / "autumn.gpkg")
    write_plots(_layer(), tmp_path / "plots.gpkg")
    out = tmp_path / "chg"
    code = main(
        [
            "change",
            str(tmp_path / "spring.csv"),
            str(tmp_path / "autumn.gpkg"),
            "--tolerance",
            "0.5",
            "--plots",
            str(tmp_path / "plots.gpkg"),
            "-o",
            str(out),
            "--simulations",
            "19",
        ]
    )
    captured = capsys.readouterr()
    assert code == 0
    assert "persisting" in captured.out and "survival" in captured.out
    assert f"{int(is_lost.sum())} lost" in captured.out
    assert (out / "change.csv").exists() and (out / "change_map.png").exists()


@pytest.mark.parametrize("tol", ["0", "-0.5"])
def test_cli_bad_tolerance_exits_2_and_writes_nothing(tmp_path, capsys, tol):
    earlier, later, *_ = _scenario(seed=14)
    write_points(earlier, tmp_path / "a.csv")
    write_points(later, tmp_path / "b.csv")
    out = tmp_path / "chg"
    code = main(
        [
            "change",
            str(tmp_path / "a.csv"),
            str(tmp_path / "b.csv"),
            "--tolerance",
            tol,
            "-o",
            str(out),
        ]
    )
    err = capsys.readouterr().err
    assert code == 2 and err.startswith("error: ") and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_cli_missing_file_exits_2(tmp_path, capsys):
    code = main(
        [
            "change",
            str(tmp_path / "nope.csv"),
            str(tmp_path / "nope2.csv"),
            "--tolerance",
            "0.5",
            "-o",
            str(tmp_path / "o"),
        ]
    )
    assert code == 2 and "does not exist" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_count_change_fields_are_finite():
    earlier, later, *_ = _scenario(seed=15)
    r = detect_change(earlier, later, 0.5, plots=_layer(), simulations=19)
    for row in change_rows(r):
        for k in ("survival", "R_earlier", "R_later", "p_R_change", "p_R_change_mc"):
            assert math.isfinite(row[k]), k


def test_cli_change_accepts_results_folders(tmp_path, capsys):
    earlier, later, *_ = _scenario(seed=16)
    for name, pts in (("spring", earlier), ("autumn", later)):
        (tmp_path / name).mkdir()
        write_points(pts, tmp_path / name / "points.csv")
        write_plots(_layer(), tmp_path / name / "plots.gpkg")
    out = tmp_path / "chg"
    code = main(["change", str(tmp_path / "spring"), str(tmp_path / "autumn"), "--tolerance",
                 "0.5", "-o", str(out), "--simulations", "0"])  # fmt: skip
    assert code == 0
    assert "plots taken from" in capsys.readouterr().err
    ids = [line.split(",")[0] for line in (out / "change.csv").read_text().splitlines()[1:]]
    assert ids == ["A", "B", "all"]


def test_plots_empty_on_both_dates_are_left_out():
    earlier, later, *_ = _scenario(seed=17)
    layer = _layer()
    far = Plot("elsewhere", shapely.box(X0 + 500, Y0, X0 + 540, Y0 + 40))
    r = detect_change(earlier, later, 0.5, plots=PlotLayer([*layer.plots, far], UTM33),
                      simulations=0)  # fmt: skip
    assert [row["plot_id"] for row in r.plots] == ["A", "B"]
    assert r.overall["area_m2"] == pytest.approx(3200.0)
    assert any("elsewhere" in n for n in r.notes)
