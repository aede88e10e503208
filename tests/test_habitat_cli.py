"""`ecoscan scales --covariate NAME=RASTER --mark COLUMN`, and the same in a survey file."""

import csv
import json

import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin
from rasterio.warp import Resampling, calculate_default_transform, reproject

from ecoscan.cli import main
from ecoscan.stats.intensity import simulate_inhomogeneous
from ecoscan.survey.config import load_survey

X0, Y0 = 512_000.0, 5_210_000.0
UTM = "EPSG:32633"
PLOTS = {
    "meadow": shapely.box(X0, Y0, X0 + 40, Y0 + 40),
    "slope": shapely.Polygon(
        [
            (X0 + 50, Y0),
            (X0 + 95, Y0),
            (X0 + 95, Y0 + 40),
            (X0 + 70, Y0 + 40),
            (X0 + 70, Y0 + 20),
            (X0 + 50, Y0 + 20),
        ]
    ),
}
BETA = -0.15  # true change of log density per metre of elevation


def _elev(x, y):
    return 300.0 + 0.2 * (x - X0) + 0.1 * (y - Y0)


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    d = tmp_path_factory.mktemp("habitat")
    xs = X0 - 10 + np.arange(120) + 0.5
    ys = Y0 + 50 - np.arange(60) - 0.5
    gx, gy = np.meshgrid(xs, ys)
    with rasterio.open(
        d / "dem.tif",
        "w",
        driver="GTiff",
        width=120,
        height=60,
        count=1,
        dtype="float32",
        crs=UTM,
        transform=from_origin(X0 - 10, Y0 + 50, 1.0, 1.0),
    ) as dst:
        dst.write(_elev(gx, gy).astype("float32")[None])
        dst.units = ("metre",)
    rng = np.random.default_rng(8)
    lines = ["x,y,diameter_m"]
    for g in PLOTS.values():
        lam = lambda p: np.exp(BETA * (_elev(p[:, 0], p[:, 1]) - 300.0))  # noqa: E731
        xy = simulate_inhomogeneous(g, 140, lam, 1.0, rng=rng)[0]
        for (a, b), m in zip(xy, rng.uniform(1, 2, len(xy)), strict=True):
            lines.append(f"{a:.3f},{b:.3f},{m:.3f}")
    (d / "plants.csv").write_text("\n".join(lines) + "\n")
    feats = [
        {
            "type": "Feature",
            "properties": {"plot_id": k},
            "geometry": {"type": "Polygon", "coordinates": [[list(c) for c in g.exterior.coords]]},
        }
        for k, g in PLOTS.items()
    ]
    crs = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}
    (d / "plots.geojson").write_text(
        json.dumps({"type": "FeatureCollection", "crs": crs, "features": feats})
    )
    return d


def _run(site, out, cov):
    return main(
        [
            "scales",
            str(site / "plants.csv"),
            "--plots",
            str(site / "plots.geojson"),
            "--crs",
            UTM,
            "-o",
            str(out),
            "--simulations",
            "19",
            "--steps",
            "30",
            "--quiet",
            "--covariate",
            f"elevation={cov}",
            "--mark",
            "diameter_m",
        ]
    )


def _read(p):
    with open(p, newline="") as f:
        return list(csv.DictReader(f))


def test_scales_with_a_covariate_and_a_mark(site, tmp_path):
    assert _run(site, tmp_path / "out", site / "dem.tif") == 0
    out = tmp_path / "out"
    eff = {r["plot_id"]: r for r in _read(out / "effects.csv")}
    assert set(eff) == {"meadow", "slope"}
    for r in eff.values():
        # the known coefficient is inside the 95% interval (simulated with BETA)
        assert float(r["coefficient_low"]) <= BETA <= float(r["coefficient_high"])
        assert r["covariate_unit"] == "m"
        assert r["effect"].startswith("plants are") and "m lower elevation" in r["effect"]
    rows = {r["plot_id"]: r for r in _read(out / "scales.csv")}
    for r in rows.values():
        assert r["intensity_model"] == "elevation"
        assert r["habitat_verdict"] and r["marks_verdict"]
        assert r["mark"] == "diameter_m"
    names = {r["function"] for r in _read(out / "functions.csv")}
    assert {"L_inhomogeneous", "g_inhomogeneous", "mark_correlation", "mark_variogram"} <= names
    assert (out / "figures" / "habitat_meadow.png").exists()


def test_a_geographic_covariate_is_reprojected(site, tmp_path):
    # the same elevation model in longitude/latitude (EPSG:4326) must give the same effect:
    # it is reprojected to the plots' metric CRS before sampling
    src = site / "dem.tif"
    geo = tmp_path / "dem_ll.tif"
    with rasterio.open(src) as s:
        tr, w, h = calculate_default_transform(s.crs, "EPSG:4326", s.width, s.height, *s.bounds)
        with rasterio.open(
            geo,
            "w",
            driver="GTiff",
            width=w,
            height=h,
            count=1,
            dtype="float32",
            crs="EPSG:4326",
            transform=tr,
            nodata=-9999,
        ) as d:
            reproject(
                rasterio.band(s, 1),
                rasterio.band(d, 1),
                resampling=Resampling.bilinear,
                dst_nodata=-9999,
            )
    from ecoscan.analysis.habitat import covariate_surfaces
    from ecoscan.stats.csr import uniform_in_polygon

    poly = PLOTS["slope"]
    p = uniform_in_polygon(poly, 500, rng=1)
    for path in (src, geo):
        (surf,) = covariate_surfaces([("elevation", str(path))], poly, "slope", UTM, 0.5)
        # the plane is recovered to within a few centimetres (two bilinear resamplings)
        assert np.max(np.abs(surf.at(p) - _elev(p[:, 0], p[:, 1]))) < 0.1


def test_survey_file_keys(site, tmp_path):
    text = (
        f'[survey]\nplots = "{site / "plots.geojson"}"\n[scales]\nenabled = true\n'
        'mark = "diameter_m"\n[scales.covariates]\nelevation = "dem.tif"\n'
        f'[[raster]]\npath = "{site / "dem.tif"}"\n'
    )
    (site / "s.toml").write_text(text)
    cfg = load_survey(site / "s.toml")
    # covariate rasters are relative to the survey file
    assert cfg.scales["covariates"] == {"elevation": str(site / "dem.tif")}
    (tmp_path / "bad.toml").write_text(text.replace('"dem.tif"', '"nowhere.tif"'))
    from ecoscan.errors import InputError

    with pytest.raises(InputError, match=r"line 7: covariate elevation file 'nowhere.tif'"):
        load_survey(tmp_path / "bad.toml")
    (tmp_path / "bad2.toml").write_text(
        text.replace('[scales.covariates]\nelevation = "dem.tif"\n', "covariates = 3\n")
    )
    with pytest.raises(InputError, match=r"\[scales\] covariates should be a table"):
        load_survey(tmp_path / "bad2.toml")
