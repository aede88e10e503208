"""A survey with awkward plots: one empty, one with a single plant, one outside the raster."""

import numpy as np
import rasterio
import shapely
from pyproj import CRS
from rasterio.transform import from_origin

from ecoscan.io.vector import write_plots
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.survey.config import load_survey
from ecoscan.survey.runner import run_survey
from ecoscan.synthetic import render_orthomosaic, write_geotiff

UTM = CRS.from_epsg(32631)
X0, Y0, PX = 500_000.0, 4_000_000.0, 0.1


def _scene(tmp_path):
    rng = np.random.default_rng(5)
    # 40 shrubs at random in the west half, one alone in the east, nothing in the north-east
    xy = np.column_stack([rng.uniform(1, 19, 40), rng.uniform(1, 19, 40)])
    keep = [0]
    for i in range(1, len(xy)):
        if np.min(np.hypot(*(xy[keep] - xy[i]).T)) > 1.6:
            keep.append(i)
    xy = np.vstack([xy[keep], [[30.0, 5.0]]])
    shape = (200, 400)  # 20 m x 40 m at 0.1 m
    img = render_orthomosaic(
        np.column_stack([xy[:, 0] / PX - 0.5, (20 - xy[:, 1]) / PX - 0.5]),
        np.full(len(xy), 10.0),
        shape,
        rng,
    )
    with rasterio.open(
        tmp_path / "rgb.tif",
        "w",
        driver="GTiff",
        width=400,
        height=200,
        count=3,
        dtype="uint8",
        transform=from_origin(X0, Y0 + 20, PX, PX),
        crs=UTM.to_wkt(),
    ) as dst:
        dst.write(img)
    plots = PlotLayer(
        [
            Plot("west", shapely.box(X0, Y0, X0 + 20, Y0 + 20)),
            Plot("lone", shapely.box(X0 + 25, Y0, X0 + 35, Y0 + 10)),
            Plot("bare", shapely.box(X0 + 25, Y0 + 11, X0 + 39, Y0 + 19)),
            Plot("away", shapely.box(X0 + 500, Y0, X0 + 510, Y0 + 10)),  # not on the raster
        ],
        UTM,
    )
    write_plots(plots, tmp_path / "plots.gpkg")
    (tmp_path / "s.toml").write_text(
        '[survey]\nplots = "plots.gpkg"\n[statistics]\nsimulations = 99\n'
        "[scales]\nenabled = true\nsimulations = 19\n"
        '[[raster]]\npath = "rgb.tif"\nsite = "test"\ndate = "2026-05-01"\n'
        "[raster.detect]\ndiameter = [0.6, 1.5]\n"
    )
    return len(keep)


def test_empty_single_and_uncovered_plots(tmp_path):
    n_west = _scene(tmp_path)
    run = run_survey(load_survey(tmp_path / "s.toml"), output=tmp_path / "out")
    rows = {r["plot_id"]: r for r in run.rows}
    assert set(rows) == {"west", "lone", "bare"}  # "away" is not on the raster
    assert rows["bare"]["n"] == 0 and rows["bare"]["warnings"]
    assert rows["lone"]["n"] == 1 and rows["lone"]["verdict"] == ""
    assert abs(rows["west"]["n"] - n_west) <= 1
    html = (tmp_path / "out" / "report.html").read_text()
    assert "Plot bare" in html and "Plot lone" in html


def test_survey_with_too_few_simulations_says_so(tmp_path):
    # issue 10, case 12: with 19 simulations the smallest two-sided Monte Carlo p is
    # 2 / 20 = 0.1 (Besag & Diggle 1977), so no plot can be called clustered or regular at
    # α = 0.05; the survey labelled every plot "random" without a word
    _scene(tmp_path)
    toml = (tmp_path / "s.toml").read_text()
    toml = toml.replace("simulations = 99", "simulations = 19").replace(
        "enabled = true", "enabled = false"
    )
    (tmp_path / "s.toml").write_text(toml)
    run = run_survey(load_survey(tmp_path / "s.toml"), output=tmp_path / "out")
    assert any("smallest possible Monte Carlo p is 0.1" in n for n in run.notes)
    west = next(r for r in run.rows if r["plot_id"] == "west")
    assert "use at least 40 simulations" in west["warnings"]


def test_raster_without_any_plant_gives_zero_counts(tmp_path):
    # A later height model over ground cleared of every tree (all heights 0.1 m, under the
    # 2 m lowest tree top): detection finds nothing, and the plots it covers hold a real
    # zero (they were surveyed). The survey used to stop with "<raster>.csv has a header but
    # no points" when it read its own empty table back.
    _scene(tmp_path)
    flat = np.full((200, 400), 0.1, dtype="float32")
    write_geotiff(tmp_path / "cleared.tif", flat, from_origin(X0, Y0 + 20, PX, PX), UTM.to_wkt())
    text = (tmp_path / "s.toml").read_text()
    (tmp_path / "s.toml").write_text(
        text + '[[raster]]\npath = "cleared.tif"\nsite = "test"\ndate = "2026-09-01"\n'
        '[raster.detect]\nmethod = "chm"\n'
    )
    run = run_survey(load_survey(tmp_path / "s.toml"), output=tmp_path / "out")
    later = {r["plot_id"]: r for r in run.rows if r["date"] == "2026-09-01"}
    assert set(later) == {"west", "lone", "bare"}
    assert all(r["n"] == 0 for r in later.values()), {k: r["n"] for k, r in later.items()}
    # a rerun reuses the empty detection from the cache and gives the same table
    again = run_survey(load_survey(tmp_path / "s.toml"), output=tmp_path / "out", overwrite=True)
    assert [r["n"] for r in again.rows] == [r["n"] for r in run.rows]
