"""The survey runs in one pass: each input opened and hashed once, no output read back.

The openers are counted (tests/read_counter.py: ``rasterio.open`` by purpose, pyogrio's
layer reader, Python's ``open``) while ``run_survey`` runs a small two-date survey.

What stays, by design: each tile job opens its own window of the raster from the path
(``read_window``; that is how tiles run on other processes or a Dask cluster), threshold
selection reads a decimated copy of the raster, and the report reads a preview of each
raster (opened once per raster for all its plots). The report embeds its figures from the
PNG files just drawn; those are the only files of the output folder read in a first run.
"""

import shutil

import numpy as np
import pytest
import rasterio
import shapely
from pyproj import CRS
from rasterio.transform import from_origin
from read_counter import count_reads

from ecoscan.io.vector import write_plots
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.survey.config import load_survey
from ecoscan.survey.runner import run_survey
from ecoscan.synthetic import render_orthomosaic

UTM = CRS.from_epsg(32631)
X0, Y0, PX = 500_000.0, 4_000_000.0, 0.1


def _raster(path, seed):
    rng = np.random.default_rng(seed)
    xy = np.column_stack([rng.uniform(1, 39, 90), rng.uniform(1, 19, 90)])
    keep = [0]
    for i in range(1, len(xy)):
        if np.min(np.hypot(*(xy[keep] - xy[i]).T)) > 1.6:
            keep.append(i)
    xy = xy[keep]
    img = render_orthomosaic(
        np.column_stack([xy[:, 0] / PX - 0.5, (20 - xy[:, 1]) / PX - 0.5]),
        np.full(len(xy), 10.0),
        (200, 400),
        rng,
    )
    with rasterio.open(
        path, "w", driver="GTiff", width=400, height=200, count=3, dtype="uint8",
        transform=from_origin(X0, Y0 + 20, PX, PX), crs=UTM.to_wkt(),
    ) as dst:  # fmt: skip
        dst.write(img)


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    d = tmp_path_factory.mktemp("onepass")
    inputs = d / "inputs"
    inputs.mkdir()
    _raster(inputs / "may.tif", 3)
    _raster(inputs / "sep.tif", 4)
    plots = [
        Plot("west", shapely.box(X0 + 1, Y0 + 1, X0 + 19, Y0 + 19)),
        Plot("east", shapely.box(X0 + 21, Y0 + 1, X0 + 39, Y0 + 19)),
        Plot("away", shapely.box(X0 + 500, Y0, X0 + 510, Y0 + 10)),  # on neither raster
    ]
    write_plots(PlotLayer(plots, UTM), inputs / "plots.gpkg")
    dates = {"may.tif": "2026-05-01", "sep.tif": "2026-09-01"}
    (inputs / "s.toml").write_text(
        '[survey]\nplots = "plots.gpkg"\n[statistics]\nsimulations = 39\n'
        "[compare]\npermutations = 99\n"
        + "".join(
            f'[[raster]]\npath = "{n}"\nsite = "hill"\ndate = "{t}"\n'
            "[raster.detect]\ndiameter = [0.6, 1.5]\n"
            for n, t in dates.items()
        )
    )
    return load_survey(inputs / "s.toml"), d


def _table_reads(reads, folder):
    """Reads of files in ``folder`` other than figures (tables, layers, JSON)."""
    return {p: n for p, n in reads.under(folder).items() if not p.endswith((".png", ".jpg"))}


def test_first_run_opens_each_input_once_and_reads_no_output(survey):
    cfg, d = survey
    outs = d / "first"
    outs.mkdir()
    with count_reads() as reads:
        run = run_survey(cfg, output=outs / "results")
    for e in cfg.rasters:
        # the header once (footprint, detection and provenance share it) ...
        assert reads.raster_opens(e.path, "header") == 1, reads.rasters
        # ... the bytes once (one SHA-256 for the cache key and run.json) ...
        assert reads.files[str(e.path.resolve())] == 1
        # ... and one preview dataset for all the plots of the report
        assert reads.raster_opens(e.path, "report preview") == 1
        assert reads.raster_opens(e.path, "other") == 0
        assert reads.raster_opens(e.path, "tile window") >= 1  # each tile job, from the path
    assert reads.vectors[str(cfg.plots.resolve())] == 1  # the plots, read once
    assert reads.files[str(cfg.plots.resolve())] == 1  # and hashed once
    assert _table_reads(reads, outs) == {}  # no table, layer or JSON of its own read back
    assert len(run.comparisons) == 1 and run.comparisons[0].figure.name == "comparison.png"
    assert run.changes and run.changes[0].figure.is_file()
    assert all(f.is_relative_to(outs / "results") for f in run.figures())
    # the field-check caution of each raster's detection is said once for the run, by code
    from ecoscan.model.notes import FIELD_CHECK, code_of

    said = [n for n in run.notes if "field check" in n]
    assert len(said) == 1 and code_of(said[0]) == FIELD_CHECK


def _elevation(path):
    """A 1 m covariate raster over both plots of the test rasters: a slope to the east."""
    values = np.tile(np.linspace(100.0, 104.0, 60, dtype="float32"), (40, 1))
    with rasterio.open(
        path, "w", driver="GTiff", width=60, height=40, count=1, dtype="float32",
        transform=from_origin(X0 - 10, Y0 + 30, 1.0, 1.0), crs=UTM.to_wkt(),
    ) as dst:  # fmt: skip
        dst.write(values[None])


def test_each_covariate_opened_once_and_plots_assigned_once_per_raster(survey, monkeypatch):
    # issue 14: a covariate raster was opened once per plot (here 4 plot surveys); the
    # survey now opens it once and every plot reads its window from that dataset
    import ecoscan.model.membership as membership
    import ecoscan.survey.runner as runner

    cfg, d = survey
    folder = d / "covariates"
    folder.mkdir()
    _elevation(folder / "dem.tif")
    text = cfg.path.read_text().replace('"plots.gpkg"', f'"{cfg.plots.as_posix()}"')
    for e in cfg.rasters:
        text = text.replace(f'"{e.path.name}"', f'"{e.path.as_posix()}"')
    (folder / "s.toml").write_text(
        text.replace(
            "[compare]",
            "[scales]\nenabled = true\nsimulations = 19\nhabitat_simulations = 19\n"
            '[scales.covariates]\nelevation = "dem.tif"\n[compare]',
        )
    )
    assigned = []
    real = membership.plot_membership

    def counted(*a, **k):
        assigned.append(a[0].size)
        return real(*a, **k)

    monkeypatch.setattr(membership, "plot_membership", counted)
    survey_assigns = []
    real_assign = runner.assign_plots
    monkeypatch.setattr(
        runner, "assign_plots", lambda p, lay: survey_assigns.append(p.n) or real_assign(p, lay)
    )
    with count_reads() as reads:
        run = run_survey(load_survey(folder / "s.toml"), output=folder / "out", report=False)
    assert reads.raster_opens(folder / "dem.tif", "covariate") == 1, reads.rasters
    assert reads.raster_opens(folder / "dem.tif") == 1
    surveyed = [s for rr in run.rasters for s in rr.scales]
    assert len(surveyed) == 4 and all(s.habitat is not None for s in surveyed)
    # each raster's plants are assigned to the plots once by the survey (in the survey CRS,
    # on the coordinates as stored); detect_raster assigns them once more for its own table
    # (ecoscan/detect/), and the change between the two dates once: nothing else
    assert len(survey_assigns) == len(cfg.rasters)
    assert len(assigned) == 2 * len(cfg.rasters) + len(run.changes), assigned


def test_comparison_from_memory_equals_reading_the_folder(survey):
    from ecoscan.analysis.compare.columns import group_rows
    from ecoscan.analysis.compare.compute import compare_groups, read_results

    cfg, d = survey
    run = run_survey(cfg, output=d / "cmp", report=False)
    mem = run.comparisons[0]
    # the survey's seed is 1 when [statistics] sets none, as here
    disk = compare_groups([read_results(d / "cmp")], by=mem.by, permutations=99, rng=1)
    assert len(disk.groups) == 4  # two plots on two dates
    # repr: NaN columns compare equal too
    assert repr(group_rows(disk)) == repr(group_rows(mem.result))
    assert repr(disk.pairs) == repr(mem.result.pairs)
    assert disk.notes == mem.result.notes


def test_rerun_reads_only_the_cached_detections(survey):
    cfg, d = survey
    outs = d / "again"
    outs.mkdir()
    first = run_survey(cfg, output=outs / "results", report=False)
    table = (outs / "results" / "dispersion.csv").read_bytes()
    points = (outs / "results" / "points.csv").read_bytes()
    with count_reads() as reads:
        again = run_survey(cfg, output=outs / "results", report=False, overwrite=True)
    assert all(r.cached for r in again.rasters) and not any(r.cached for r in first.rasters)
    for e in cfg.rasters:
        assert reads.raster_opens(e.path, "header") == 1
        assert reads.raster_opens(e.path, "tile window") == 0  # nothing detected again
    read = _table_reads(reads, outs)
    # the cache's deliberate reads: the key file, the detection table it reuses (its hash,
    # then its rows) and the copies of the files it carries over; nothing else of the
    # previous run, and nothing of this one
    assert read and all("/points/" in p for p in read), read
    assert all(p.endswith((".key.json", ".csv", ".prj", ".gpkg")) for p in read), read
    assert not any(p.endswith("/points.csv") for p in read)
    assert (outs / "results" / "dispersion.csv").read_bytes() == table
    assert (outs / "results" / "points.csv").read_bytes() == points


def test_damaged_cached_table_is_detected_again(survey):
    cfg, d = survey
    out = d / "damaged" / "results"
    run_survey(cfg, output=out, report=False)
    csv = out / "points" / "may.csv"
    lines = csv.read_text().splitlines()
    csv.write_text("\n".join(lines[: len(lines) // 2]) + "\n")
    gpkg = out / "points" / "sep.gpkg"
    shutil.copyfile(gpkg, gpkg.with_suffix(".bak"))
    with open(gpkg, "ab") as fh:  # an edited GeoPackage: its size changes
        fh.write(b"\0")
    again = run_survey(cfg, output=out, report=False, overwrite=True)
    assert [r.cached for r in again.rasters] == [False, False]


@pytest.mark.parametrize(
    "name",
    [
        "ecoscan.model.notes",
        "ecoscan.survey.model",
        "ecoscan.survey.cache",
        "ecoscan.survey.thumbnails",
        "ecoscan.survey.reporting",
    ],
)
def test_docstring_examples_run(name):
    import doctest
    import importlib

    res = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert res.attempted and res.failed == 0


def test_points_kept_as_stored_equal_the_table_read_back(tmp_path):
    from ecoscan.io.vector import as_stored, points_csv_text, read_points, write_points
    from ecoscan.model.points import PointSet

    rng = np.random.default_rng(1)
    pts = PointSet(
        rng.uniform(5e5, 5e5 + 100, 50),
        rng.uniform(4e6, 4e6 + 100, 50),
        {
            "diameter_m": rng.uniform(0.5, 2, 50),
            "tile": np.arange(50),
            "plot_id": np.array(["1", "a, b"] * 25, dtype=object),  # text, and a quoted cell
        },
        UTM,
    )
    back = read_points(write_points(pts, tmp_path / "p.csv"))
    mem = as_stored(pts)
    assert np.array_equal(back.x, mem.x) and np.array_equal(back.y, mem.y)
    assert back.attrs.keys() == mem.attrs.keys()
    for k in back.attrs:
        assert back.attrs[k].dtype == mem.attrs[k].dtype and np.array_equal(
            back.attrs[k], mem.attrs[k]
        ), k
    assert (tmp_path / "p.csv").read_text() == points_csv_text(pts)


def test_notes_keep_code_and_severity_through_pickle_and_json():
    import json
    import pickle

    from ecoscan.model.notes import CAUTION, FIELD_CHECK, Note, is_warning

    n = Note("automated counts need field checks", FIELD_CHECK, CAUTION)
    again = pickle.loads(pickle.dumps(n))  # process pools and Dask pickle results
    assert (again.code, again.severity, str(again)) == (FIELD_CHECK, CAUTION, str(n))
    assert json.loads(json.dumps([n])) == ["automated counts need field checks"]
    assert Note.from_value(json.loads(json.dumps(n.to_dict()))).code == FIELD_CHECK
    assert not is_warning(n) and "; ".join([n, "x"]).endswith("; x")
    with pytest.raises(ValueError):
        Note("x", "y", "severe")


def test_plot_warnings_are_records_the_report_reads_by_code():
    from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot
    from ecoscan.model.notes import code_of
    from ecoscan.survey.reporting import plot_flags

    settings = DispersionSettings.from_mapping({"simulations": 19})
    sq = shapely.box(0, 0, 20, 20)
    xy = np.array([[2.0, 3.0], [2.0, 3.0], [11.0, 14.0], [17.0, 5.0], [6.0, 16.0]])
    res = analyse_plot(xy, sq, "p", settings)
    codes = [code_of(w) for w in res.warnings]
    # 5 plants (< 30), two at one position, 19 simulations (p cannot reach 0.05)
    assert {"few-points", "duplicates", "few-simulations"} <= set(codes), codes
    assert plot_flags(res.warnings) == "few plants, duplicates?"
    one = analyse_plot(xy[:1], sq, "p", settings)
    # its text names quadrats, but it is not a quadrat note: flagged, not hidden
    assert [code_of(w) for w in one.warnings] == ["one-point"]
    assert plot_flags(one.warnings) == "too few for a test"


def test_plots_in_another_crs_compare_from_memory_as_from_the_folder(tmp_path):
    # the plots file in Lambert-93 (EPSG:2154), the raster in UTM 31N: the manifest
    # reprojects the plots into the raster's CRS once, the plants come back to the survey's
    # CRS, and the comparison uses them at the millimetres points.csv stores
    from pyproj import Transformer

    from ecoscan.analysis.compare.columns import group_rows
    from ecoscan.analysis.compare.compute import compare_groups, read_results

    _raster(tmp_path / "may.tif", 3)
    t = Transformer.from_crs(32631, 2154, always_xy=True)

    def lambert(g):
        return shapely.transform(
            g.segmentize(1.0), lambda c: np.column_stack(t.transform(c[:, 0], c[:, 1]))
        )

    boxes = {"west": (1, 19), "east": (21, 39)}
    plots = [
        Plot(k, lambert(shapely.box(X0 + a, Y0 + 1, X0 + b, Y0 + 19)))
        for k, (a, b) in boxes.items()
    ]
    write_plots(PlotLayer(plots, CRS.from_epsg(2154)), tmp_path / "plots.gpkg")
    (tmp_path / "s.toml").write_text(
        '[survey]\nplots = "plots.gpkg"\n[statistics]\nsimulations = 19\n[compare]\n'
        'permutations = 99\n[[raster]]\npath = "may.tif"\n[raster.detect]\ndiameter = [0.6, 1.5]\n'
    )
    with count_reads() as reads:
        run = run_survey(load_survey(tmp_path / "s.toml"), output=tmp_path / "out", report=False)
    assert reads.raster_opens(tmp_path / "may.tif", "header") == 1
    assert run.rasters[0].reprojected and run.rasters[0].points.crs.to_epsg() == 2154
    mem = run.comparisons[0]
    disk = compare_groups([read_results(tmp_path / "out")], by=mem.by, permutations=99, rng=1)
    assert repr(group_rows(disk)) == repr(group_rows(mem.result))
    assert repr(disk.pairs) == repr(mem.result.pairs)
