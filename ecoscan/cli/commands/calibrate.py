"""``ecoscan calibrate``: learn a detector from plants mapped in training plots."""

from __future__ import annotations

import argparse
from pathlib import Path

from ecoscan.cli._common import add_crs_arg, add_plots_args, print_notes
from ecoscan.errors import InputError
from ecoscan.io.crs import transform_xy
from ecoscan.model.points import PointSet
from ecoscan.report.tables import format_table

NAME = "calibrate"
HELP = "learn a detector (layer, thresholds, crown sizes) from plants mapped in training plots"
DESCRIPTION = (
    "Map every plant inside one or more training plots, then let ecoscan learn the plant "
    "layer, blob thresholds and crown diameter range from them (and, where no simple layer "
    "separates plants from ground, a random-forest pixel classifier). Accuracy is "
    "cross-validated by training plot, or by spatial blocks of a single plot. The result is "
    "a readable TOML detector file for `ecoscan detect --detector` and survey files."
)
EXAMPLE = (
    "ecoscan calibrate ortho.tif mapped_plants.csv --plots training_plot.gpkg -o detector.toml"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan calibrate``."""
    p.add_argument("raster", help="the orthomosaic (GeoTIFF or any GDAL raster)")
    p.add_argument(
        "reference",
        help="every plant mapped inside the training plots (.csv, .gpkg, .geojson); an "
        "optional diameter_m column gives crown sizes",
    )
    add_plots_args(p, required=True)
    p.add_argument(
        "-o",
        "--output",
        required=True,
        metavar="DETECTOR.toml",
        help="detector file to write (a classifier's model file goes beside it)",
    )
    p.add_argument(
        "--bands",
        default="",
        metavar="LIST",
        help="name the bands, e.g. blue=1,green=2,red=3,nir=4 (default: from the file, "
        "else 1,2,3 = red, green, blue)",
    )
    p.add_argument(
        "--tolerance",
        type=float,
        metavar="METRES",
        help="largest distance at which a detection counts as a mapped plant (default half "
        "the smallest mapped crowns' diameter, 5th percentile of diameter_m, or a quarter "
        "of the median plant spacing without diameters)",
    )
    p.add_argument(
        "--diameter",
        metavar="MIN:MAX",
        help="crown diameter range in metres to search when estimating crown sizes "
        "(default from the plant spacing)",
    )
    p.add_argument(
        "--classifier",
        choices=("auto", "always", "never"),
        default="auto",
        help="train a pixel classifier: auto or always (trained, and kept unless a simple "
        "layer scores higher in cross-validation by more than its fold-to-fold noise) or "
        "never (simple layers only) (default auto)",
    )
    p.add_argument(
        "--seed", type=int, default=1, help="seed for pixel sampling and the forest (default 1)"
    )
    p.add_argument(
        "--pixel-size",
        type=float,
        metavar="METRES",
        help="pixel size for a raster without georeferencing",
    )
    add_crs_arg(p)


def run(args: argparse.Namespace) -> int:
    """Check inputs, calibrate, print cross-validated scores, write the detector file."""
    from ecoscan.detect.calibration import band_names_for, calibrate_detector, describe_training
    from ecoscan.detect.detector_file import write_detector
    from ecoscan.detect.settings import parse_band_spec, parse_diameter
    from ecoscan.io.raster import open_raster
    from ecoscan.io.vector import read_plots, read_points

    out = Path(args.output)
    if out.suffix.lower() != ".toml":
        raise InputError(f"-o {args.output}: the detector file is written as .toml")
    from ecoscan.lifecycle import check_output_path

    check_output_path(out, overwrite=args.overwrite, inputs=[args.raster], option="-o")
    if args.tolerance is not None and not args.tolerance > 0:
        raise InputError(f"--tolerance must be positive metres (got {args.tolerance:g})")
    diameter = parse_diameter(args.diameter) if args.diameter else None
    if diameter is not None and not (0 < diameter[0] <= diameter[1]):
        raise InputError(f"--diameter {args.diameter}: give MIN:MAX in metres, e.g. 0.5:3")
    info = open_raster(args.raster, pixel_size_m=args.pixel_size)
    names = band_names_for(info, parse_band_spec(args.bands))
    ref = read_points(args.reference, args.crs)
    target = None if info.local else info.crs
    if target is not None and ref.crs is not None and ref.crs != target:
        x, y = transform_xy(ref.x, ref.y, ref.crs, target)
        ref = PointSet(x, y, ref.attrs, target, ref.notes)
    plots = read_plots(
        args.plots,
        id_field=args.id_field,
        target_crs=target if target is not None else ref.crs,
        points_have_crs=ref.crs is not None,
    )
    res = calibrate_detector(
        info,
        ref,
        plots,
        band_names=names,
        tolerance_m=args.tolerance,
        diameter_m=diameter,
        classifier=args.classifier,
        seed=args.seed,
        names=(args.raster, args.reference, args.plots),
    )
    describe_training(
        res.detector, {"raster": args.raster, "reference": args.reference, "plots": args.plots}
    )
    written = write_detector(out, res.detector)
    print_notes(list(info.notes) + list(ref.notes) + list(plots.notes) + res.notes, args.quiet)
    print(
        f"cross-validated accuracy of each layer ({res.folds}, tolerance {res.tolerance_m:.3g} m):"
    )
    rows = [s.as_dict() for s in res.scores]
    print(format_table(rows, ["layer", "tp", "fp", "fn", "precision", "recall", "f1"]))
    det = res.detector
    print()
    chosen = {
        "method": f"{det.kind} ({det.layer})",
        "precision": res.chosen.precision,
        "recall": res.chosen.recall,
        "f1": res.chosen.f1,
        "diameter_range_m": f"{det.diameter_min_m:.3g}:{det.diameter_max_m:.3g}",
        "mapped_plants": det.training.get("plants", 0),
    }
    print("chosen (precision, recall and F1 cross-validated):")
    print(format_table([chosen], list(chosen)))
    print_notes([f"wrote {', '.join(str(p) for p in written)}"], args.quiet)
    return 0
