"""Make the bundled demo survey: rasters, plots, survey file and the true plant positions.

Run from anywhere: ``python sample_rasters/make_demo.py``. The output is deterministic (fixed
seed) and is committed, so users get the same demo; rerun only after changing the scenario.
Everything is invented (see scenario.py).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import rasterio
from pyproj import CRS
from rasterio.transform import from_origin

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

import scenario as sc  # noqa: E402

from ecoscan.io.outputs import atomic_path, write_csv, write_text  # noqa: E402
from ecoscan.model.points import PointSet  # noqa: E402
from ecoscan.synthetic import render_chm, render_classes, render_orthomosaic  # noqa: E402
from ecoscan.model.plots import Plot, PlotLayer
from ecoscan.io.vector import write_plots, write_points

SEED = 2026
TANSY_PX = 0.10  # metres
MARROW_PX = 0.25  # metres
CRS_UTM = CRS.from_epsg(sc.EPSG)

SURVEY = """\
# Demo survey (invented): two sites of an imaginary upland restoration project.
[survey]
name = "Tansy Hollow and Marrow Wood, 2026 flights (demo)"
plots = "plots.gpkg"
output = "results"

[statistics]
simulations = 999
seed = 2026

[scales]
enabled = true
simulations = 199
mark = "diameter_m"             # does a plant's size depend on how close its neighbours are?
habitat_simulations = 99        # for the covariate and size tests (keeps the demo quick)
[scales.covariates]             # habitat rasters: is the clustering explained by them?
elevation = "elevation.tif"

[change]
tolerance_m = 0.8

[compare]
by = "auto"

[[raster]]
name = "tansy-spring"
path = "tansy_spring_rgb.tif"
site = "Tansy Hollow"
date = "2026-04-20"
[raster.detect]
method = "imagery"
diameter = [0.6, 1.8]

[[raster]]
name = "tansy-autumn"
path = "tansy_autumn_rgb.tif"
site = "Tansy Hollow"
date = "2026-09-28"
[raster.detect]
method = "imagery"
diameter = [0.6, 1.8]

[[raster]]
name = "marrow-chm"
path = "marrow_spring_chm.tif"
site = "Marrow Wood"
date = "2026-04-20"
[raster.detect]
method = "chm"
min_height_m = 3.0

[[raster]]
name = "marrow-classes"
path = "marrow_autumn_classes.tif"
site = "Marrow Wood"
date = "2026-09-28"
[raster.detect]
method = "classes"
classes = [3]
diameter = [1.0, 5.0]
"""


def _to_px(xy: np.ndarray, left: float, top: float, px: float) -> np.ndarray:
    """Map metres to pixel (column, row) with pixel centres at integers."""
    return np.column_stack([(xy[:, 0] - left) / px - 0.5, (top - xy[:, 1]) / px - 0.5])


def _write_tif(path: Path, arr: np.ndarray, transform, dtype: str, nodata=None, **extra) -> None:
    arr = arr if arr.ndim == 3 else arr[None]
    with atomic_path(path) as tmp:
        with rasterio.open(
            tmp,
            "w",
            driver="GTiff",
            width=arr.shape[2],
            height=arr.shape[1],
            count=arr.shape[0],
            dtype=dtype,
            transform=transform,
            crs=CRS_UTM.to_wkt(),
            nodata=nodata,
            compress="deflate",
            predictor=2 if dtype != "float32" else 3,
            tiled=True,
            blockxsize=256,
            blockysize=256,
            **extra,
        ) as dst:
            dst.write(arr.astype(dtype))


def _truth_rows(plots, shift=(0.0, 0.0)):
    rows = []
    for p in plots:
        for i, (x, y) in enumerate(p.xy):
            rows.append(
                {
                    "x": x + shift[0],
                    "y": y + shift[1],
                    "plot_id": p.plot_id,
                    "diameter_m": p.diameter_m[i],
                    "height_m": p.height_m[i],
                }
            )
    return rows


def _truth_points(rows) -> PointSet:
    return PointSet(
        np.array([r["x"] for r in rows]),
        np.array([r["y"] for r in rows]),
        {
            "plot_id": np.array([r["plot_id"] for r in rows], dtype=object),
            "diameter_m": np.array([r["diameter_m"] for r in rows]),
            "height_m": np.array([r["height_m"] for r in rows]),
        },
        CRS_UTM,
    )


#: The invented elevation model: 1 m pixels over both sites, metres above an invented datum.
ELEVATION_PX = 1.0
ELEVATION_BOUNDS = (430_990.0, 5_411_990.0, 431_510.0, 5_412_090.0)


def write_elevation(out: Path = HERE) -> None:
    """Write the invented elevation raster (``elevation.tif``) of both demo sites.

    A gentle slope up to the north-east with shallow hollows under the two clustered plots'
    plant groups (their true positions smoothed with a 4 m Gaussian kernel): the plants
    gather in the hollows, so elevation explains the broad clustering but not the tight
    groups around seed shrubs. It replays the scenario with the same seed (no other file
    changes).
    """
    from scipy.ndimage import gaussian_filter

    rng = np.random.default_rng(SEED)
    tansy = sc.tansy_plots(rng)
    sc.autumn_change(tansy, rng)
    marrow = sc.marrow_plots(rng)
    x0, y0, x1, y1 = ELEVATION_BOUNDS
    px = ELEVATION_PX
    w, h = round((x1 - x0) / px), round((y1 - y0) / px)
    xy = np.vstack([p.xy for p in tansy + marrow if p.verdict == "clustered"])
    col = ((xy[:, 0] - x0) / px).astype(int)
    row = ((y1 - xy[:, 1]) / px).astype(int)
    counts = np.zeros((h, w))
    np.add.at(counts, (row, col), 1.0)
    dens = gaussian_filter(counts, 4.0 / px, mode="constant")
    dens /= dens.max()
    gx, gy = np.meshgrid(x0 + px * (np.arange(w) + 0.5), y1 - px * (np.arange(h) + 0.5))
    elev = 412.0 + 0.03 * (gx - x0) + 0.06 * (gy - y0) - 5.0 * dens
    with atomic_path(out / "elevation.tif") as tmp:
        with rasterio.open(
            tmp,
            "w",
            driver="GTiff",
            width=w,
            height=h,
            count=1,
            dtype="float32",
            transform=from_origin(x0, y1, px, px),
            crs=CRS_UTM.to_wkt(),
            nodata=-9999.0,
            compress="deflate",
            predictor=3,
        ) as dst:
            dst.write(elev.astype("float32")[None])
            dst.units = ("metre",)
            dst.set_band_description(1, "elevation (invented demo data)")


def main(out: Path = HERE) -> None:
    """Write the demo survey into ``out``."""
    rng = np.random.default_rng(SEED)
    tansy = sc.tansy_plots(rng)
    autumn, log = sc.autumn_change(tansy, rng)
    marrow = sc.marrow_plots(rng)

    layer = PlotLayer(
        [Plot(p.plot_id, p.polygon, {"site": p.site}) for p in tansy + marrow], CRS_UTM
    )
    write_plots(layer, out / "plots.gpkg")

    # Tansy Hollow: RGB orthomosaics, spring and autumn (autumn misregistered)
    ox, oy = sc.ORIGIN_TANSY
    w, h = sc.TANSY_SIZE_M
    top = oy + h
    shape = (round(h / TANSY_PX), round(w / TANSY_PX))
    tr = from_origin(ox, top, TANSY_PX, TANSY_PX)
    for name, plots, shift in (
        ("tansy_spring_rgb.tif", tansy, (0.0, 0.0)),
        ("tansy_autumn_rgb.tif", autumn, sc.AUTUMN_SHIFT_M),
    ):
        xy = np.vstack([p.xy for p in plots]) + shift
        d = np.concatenate([p.diameter_m for p in plots]) / TANSY_PX
        img = render_orthomosaic(_to_px(xy, ox, top, TANSY_PX), d, shape, rng, shadows=True)
        _write_tif(out / name, img, tr, "uint8", photometric="RGB")
    spring_rows = _truth_rows(tansy)
    autumn_rows = _truth_rows(autumn, sc.AUTUMN_SHIFT_M)
    (out / "truth").mkdir(exist_ok=True)
    write_points(_truth_points(spring_rows), out / "truth" / "tansy_spring_plants.csv")
    write_points(_truth_points(autumn_rows), out / "truth" / "tansy_autumn_plants.csv")
    change = []
    for p in tansy:
        lost = set(log[p.plot_id]["lost"].tolist())
        change.append(
            {
                "plot_id": p.plot_id,
                "spring_n": len(p.xy),
                "lost": len(lost),
                "recruits": len(log[p.plot_id]["recruits"]),
                "autumn_n": len(p.xy) - len(lost) + len(log[p.plot_id]["recruits"]),
            }
        )
    write_csv(out / "truth" / "tansy_change.csv", change)
    # every lost shrub (spring position) and every recruit (as it appears in the autumn mosaic)
    ids, xs, ys, status = [], [], [], []
    for p in tansy:
        for x, y in p.xy[log[p.plot_id]["lost"]]:
            ids.append(p.plot_id), xs.append(x), ys.append(y), status.append("lost")
        for x, y in log[p.plot_id]["recruits"] + np.asarray(sc.AUTUMN_SHIFT_M):
            ids.append(p.plot_id), xs.append(x), ys.append(y), status.append("new")
    write_points(
        PointSet(
            np.array(xs),
            np.array(ys),
            {"status": np.array(status, dtype=object), "plot_id": np.array(ids, dtype=object)},
            CRS_UTM,
        ),
        out / "truth" / "tansy_lost_and_new.csv",
    )

    # Marrow Wood: canopy height model (spring) and classified map (autumn)
    ox, oy = sc.ORIGIN_MARROW
    w, h = sc.MARROW_SIZE_M
    top = oy + h
    shape = (round(h / MARROW_PX), round(w / MARROW_PX))
    tr = from_origin(ox, top, MARROW_PX, MARROW_PX)
    xy = np.vstack([p.xy for p in marrow])
    hts = np.concatenate([p.height_m for p in marrow])
    d = np.concatenate([p.diameter_m for p in marrow]) / MARROW_PX
    pix = _to_px(xy, ox, top, MARROW_PX)
    chm = render_chm(pix, hts, d, shape, rng, noise_m=0.08)
    _write_tif(out / "marrow_spring_chm.tif", chm, tr, "float32", nodata=-9999.0)
    cls = render_classes(pix, d, shape, rng, plant_class=3, background=1, clutter_class=2)
    _write_tif(out / "marrow_autumn_classes.tif", cls, tr, "uint8", nodata=0)
    write_points(_truth_points(_truth_rows(marrow)), out / "truth" / "marrow_trees.csv")

    write_elevation(out)
    write_text(out / "survey.toml", SURVEY)
    legend = (
        "Classes in marrow_autumn_classes.tif (invented): 0 no data, 1 bare ground, "
        "2 grass and litter, 3 tree canopy.\n"
    )
    write_text(
        out / "truth" / "README.txt",
        legend
        + (
            "True plant positions of the invented demo survey, made by make_demo.py.\n"
            "tansy_autumn_plants.csv is given as the plants appear in the autumn mosaic, "
            f"which is shifted by {sc.AUTUMN_SHIFT_M[0]:+.2f} m east and "
            f"{sc.AUTUMN_SHIFT_M[1]:+.2f} m north against the spring mosaic.\n"
        ),
    )


if __name__ == "__main__":
    if sys.argv[1:] == ["--elevation-only"]:  # the covariate and survey file, nothing else
        write_elevation()
        write_text(HERE / "survey.toml", SURVEY)
    else:
        main()
