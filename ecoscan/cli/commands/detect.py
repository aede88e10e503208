"""``ecoscan detect``: one point per plant from a raster."""

from __future__ import annotations

import argparse
from pathlib import Path

from ecoscan.cli._common import add_dask_args, add_plots_args, print_notes
from ecoscan.detect import DetectionSettings, detect_raster, detection_metadata
from ecoscan.detect.settings import CROWN_RULES, method_choices, parse_classes, parse_diameter
from ecoscan.errors import InputError
from ecoscan.execution import check_executor_options, open_executor
from ecoscan.io.outputs import write_json
from ecoscan.io.raster import plots_from_mask
from ecoscan.io.vector import read_plots, write_points
from ecoscan.lifecycle import check_output_path
from ecoscan.report.tables import format_table

NAME = "detect"
HELP = "find one point per plant in an orthomosaic, canopy height model or class map"
DESCRIPTION = (
    "Detect plants in a raster and write one point per plant (x, y in metres, then "
    "diameter_m / height_m / area_m2 / score / tile), and NAME.detection.json with the "
    "layer, thresholds and how they were chosen. Detectors: imagery (a layer chosen from the "
    "image among Excess Green, NDVI and darkness, then multi-scale blob detection), chm "
    "(tree tops in a height-dependent window), "
    "classes (patches of chosen class values). Automated counts need field checks."
)
EXAMPLE = "ecoscan detect ortho.tif -o plants.csv --diameter 0.5:3 --plots plots.gpkg --workers 2"

OUTPUT_SUFFIXES = (".csv", ".gpkg", ".geojson", ".json")


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan detect``."""
    _add_input_options(p)
    _add_imagery_options(p)
    _add_chm_options(p)
    _add_classes_options(p)
    _add_run_options(p)


def _add_input_options(p: argparse.ArgumentParser) -> None:
    """The raster, the output, the detector and its bands, the crown sizes."""
    p.add_argument("raster", help="GeoTIFF or any GDAL raster")
    p.add_argument(
        "-o",
        "--output",
        required=True,
        metavar="POINTS",
        help="output points: .csv (with .prj), .gpkg, or .geojson (WGS 84)",
    )
    p.add_argument(
        "--method",
        choices=method_choices(),
        default="auto",
        help="detector (default auto: 3+ bands imagery, 1 float band chm, 1 integer band "
        "classes when --classes is given)",
    )
    p.add_argument(
        "--bands",
        default="",
        metavar="LIST",
        help="bands to use, e.g. 1,2,3 (red, green, blue) or red=3,nir=4 (NDVI); default "
        "1,2,3 or band 1",
    )
    p.add_argument(
        "--index",
        choices=("auto", "exg", "ndvi", "darkness", "band"),
        default="auto",
        help="imagery detection layer (default: chosen from the image among NDVI, Excess "
        "Green and darkness by how well plant candidates stand out from the background)",
    )
    p.add_argument(
        "--diameter",
        default="0.5:3",
        metavar="MIN:MAX",
        help="expected crown diameter range in metres (default 0.5:3)",
    )


def _add_imagery_options(p: argparse.ArgumentParser) -> None:
    """Thresholds of the imagery detector."""
    p.add_argument(
        "--threshold",
        type=float,
        metavar="VALUE",
        help="imagery: vegetation threshold in index units; giving it (or --index or "
        "--min-contrast) uses the named index, NDVI when red and nir are named, else Excess "
        "Green, with Otsu-based defaults for the rest (default: median + MAD of the "
        "background on the layer chosen from the image)",
    )
    p.add_argument(
        "--min-contrast",
        type=float,
        metavar="VALUE",
        help="imagery: weakest crown-to-ground contrast in index units (default: from the "
        "background's robust spread on the layer chosen from the image; with --threshold "
        "or --index, half the Otsu class contrast)",
    )


def _add_chm_options(p: argparse.ArgumentParser) -> None:
    """Options of the tree-top detector."""
    p.add_argument(
        "--min-height",
        type=float,
        default=2.0,
        metavar="METRES",
        help="chm: lowest tree top kept (default 2)",
    )
    p.add_argument(
        "--crown-rule",
        choices=tuple(CROWN_RULES),
        default="combined",
        help="chm: crown-width-from-height rule of Popescu & Wynne (2004) (default combined)",
    )
    p.add_argument(
        "--smooth",
        type=float,
        metavar="METRES",
        help="chm: Gaussian smoothing sigma in metres (default one pixel)",
    )
    p.add_argument(
        "--crowns",
        action="store_true",
        help="chm: delineate crowns by watershed and report area_m2",
    )


def _add_classes_options(p: argparse.ArgumentParser) -> None:
    """Options of the class-patch detector."""
    p.add_argument("--classes", metavar="LIST", help="classes: plant class values, e.g. 3,4")
    p.add_argument(
        "--min-area",
        type=float,
        metavar="M2",
        help="classes: smallest patch in m² (default a quarter of the smallest crown's area)",
    )
    p.add_argument(
        "--no-split",
        action="store_true",
        help="classes: do not split touching crowns",
    )


def _add_run_options(p: argparse.ArgumentParser) -> None:
    """Pixel size, tiles, workers, a calibrated detector and the plots."""
    p.add_argument(
        "--pixel-size",
        type=float,
        metavar="METRES",
        help="pixel size for a raster without georeferencing (output in local coordinates)",
    )
    p.add_argument(
        "--tile-size",
        type=int,
        default=1024,
        metavar="PIXELS",
        help="tile size; memory use follows it (default 1024)",
    )
    p.add_argument("--workers", type=int, metavar="N", help="local processes (default 1)")
    add_dask_args(p)
    p.add_argument(
        "--detector",
        metavar="DETECTOR.toml",
        help="imagery: a detector file from `ecoscan calibrate` (its layer, thresholds and "
        "diameter range replace --index, --threshold, --min-contrast and --diameter)",
    )
    add_plots_args(p, required=False)
    p.add_argument(
        "--mask",
        metavar="RASTER",
        help="raster of plot ids (or a 0/1 mask) instead of --plots",
    )


def settings_from_args(args: argparse.Namespace) -> DetectionSettings:
    """Build :class:`DetectionSettings` from parsed options."""
    lo, hi = parse_diameter(args.diameter)
    return DetectionSettings(
        method=args.method,
        bands=args.bands,
        index=args.index,
        diameter_min_m=lo,
        diameter_max_m=hi,
        threshold=args.threshold,
        min_contrast=args.min_contrast,
        min_height_m=args.min_height,
        crown_rule=args.crown_rule,
        smooth_m=args.smooth,
        crowns=args.crowns,
        classes=parse_classes(args.classes) if args.classes else (),
        min_area_m2=args.min_area,
        split_touching=not args.no_split,
        tile_size_px=args.tile_size,
        pixel_size_m=args.pixel_size,
        detector=args.detector,
    )


def run(args: argparse.Namespace) -> int:
    """Detect, write the points, print a summary."""
    out = Path(args.output)
    if out.suffix.lower() not in OUTPUT_SUFFIXES:
        raise InputError(
            f"unknown output format {out.suffix!r} for {out.name}; use .csv, .gpkg or .geojson"
        )
    settings = settings_from_args(args)
    if args.plots and args.mask:
        raise InputError("give either --plots or --mask, not both")
    check_output_path(
        out, overwrite=args.overwrite, inputs=[args.raster, args.plots, args.mask], option="-o"
    )
    check_executor_options(args.workers, args.dask_workers, args.scheduler)
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers must be at least 1 (got {args.workers})")
    plots = None
    if args.plots:
        plots = read_plots(args.plots, id_field=args.id_field)
    elif args.mask:
        plots = plots_from_mask(args.mask, pixel_size_m=args.pixel_size)
    with open_executor(
        workers=args.workers,
        dask_workers=args.dask_workers,
        scheduler=args.scheduler,
        quiet=args.quiet,
    ) as executor:
        res = detect_raster(args.raster, settings, plots=plots, executor=executor)
        ran = [f"tiles ran on {executor.describe()}"] if executor.distributed else []
    write_points(res.points, out)
    meta_path = out.with_name(out.stem + ".detection.json")
    write_json(meta_path, detection_metadata(res, settings))
    print_notes(([*plots.notes] if plots else []) + res.notes + ran, args.quiet)
    row = {
        "n": res.n,
        "method": res.method + (f" ({res.index})" if res.index else ""),
        "pixel_size_m": res.pixel_size_m,
        "tiles": f"{res.tiles_read} of {res.tiles_total}",
        "megapixels_read": res.megapixels_read,
        "output": str(out),
    }
    print(format_table([row], list(row)))
    print_notes([f"settings and thresholds in {meta_path}"], args.quiet)
    if plots is not None and res.n:
        ids = res.points.attrs["plot_id"]
        gone = set(res.unsurveyed)
        per = [
            {"plot_id": p.plot_id, "n": int((ids == p.plot_id).sum())}
            for p in plots.plots
            if p.plot_id not in gone
        ]
        print()
        print(format_table(per, ["plot_id", "n"]))
    return 0
