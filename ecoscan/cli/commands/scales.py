"""``ecoscan scales``: clustered or regular at which distances, per plot."""

from __future__ import annotations

import argparse

from ecoscan.analysis.scales.columns import scales_rows
from ecoscan.analysis.scales.compute import ScalesSettings, analyse_scales
from ecoscan.cli._common import (
    add_crs_arg,
    add_plots_args,
    add_renamed,
    add_seed_args,
    choice,
    print_notes,
    print_warnings,
)
from ecoscan.errors import InputError
from ecoscan.io.inputs import load_points_and_plots
from ecoscan.lifecycle import output_folder
from ecoscan.report.folders import write_scales
from ecoscan.report.tables import format_table
from ecoscan.stats.envelopes import GLOBAL_TESTS

NAME = "scales"
HELP = "at which distances plants are clustered or regular (K, L, g, G, F, J with envelopes)"
DESCRIPTION = (
    "For each plot, compute second-order summary functions (Ripley's K, Besag's L, the pair\n"
    "correlation g) and distance functions (G, F, J) with exact edge corrections, compare\n"
    "them with simulations of complete spatial randomness in the same polygon, and say at\n"
    "which distances the plants are significantly clustered or regular. With --kind-field and\n"
    "--kinds, also test whether one kind of plant (e.g. dead) is placed like a random subset\n"
    "of all plants. With --covariate NAME=RASTER, fit plant density to habitat rasters and\n"
    "say whether the clustering is explained by them or goes beyond them; with --mark COLUMN,\n"
    "whether close neighbours are smaller or larger than average (docs/methods-covariates.md).\n"
    "Automated counts need field checks before any management decision."
)
EXAMPLE = (
    "ecoscan scales points.csv --plots plots.gpkg -o results/scales --simulations 199 "
    "--seed 7 --kind-field status --kinds live,dead"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan scales``."""
    p.add_argument("points", metavar="POINTS", help="plant points (CSV with x, y; GPKG; GeoJSON)")
    add_plots_args(p)
    add_crs_arg(p)
    p.add_argument("-o", "--output", required=True, metavar="OUTDIR", help="output folder")
    add_seed_args(p, simulations=199)
    p.add_argument(
        "--alpha", type=float, default=0.05, help="significance level of the tests (default 0.05)"
    )
    p.add_argument(
        "--max-distance",
        type=float,
        dest="max_distance",
        metavar="METRES",
        help="largest distance in metres (default per plot: a quarter of its shorter side, "
        "at most 10 typical plant spacings)",
    )
    p.add_argument(
        "--steps", type=int, default=100, metavar="N", help="number of distances (default 100)"
    )
    p.add_argument(
        "--global-test",
        type=choice("--global-test", GLOBAL_TESTS),
        default="rank-length",
        metavar="{" + ",".join(GLOBAL_TESTS) + "}",
        help="global test over all distances: rank-length (extreme rank length, the default) "
        "or max-deviation (largest absolute deviation from the random-pattern value)",
    )
    add_renamed(p, "--rmax", "--test")  # retired-name
    p.add_argument(
        "--test-function",
        choices=("L", "g"),
        default="L",
        help="function whose global test gives the verdict (default L)",
    )
    p.add_argument(
        "--kind-field",
        metavar="FIELD",
        help="point attribute holding the kind of plant, for the bivariate test",
    )
    p.add_argument(
        "--kinds",
        metavar="A,B",
        help="the two kinds to compare, e.g. live,dead: is B placed like a random subset?",
    )
    p.add_argument(
        "--covariate",
        action="append",
        metavar="NAME=RASTER",
        help="a habitat covariate raster, e.g. elevation=dem.tif (repeatable): fit plant "
        "density to it and test for clustering beyond what it explains",
    )
    p.add_argument(
        "--kernel-intensity",
        action="store_true",
        help="without --covariate: test for clustering beyond a kernel-smoothed density "
        "(bandwidth by Scott's rule)",
    )
    p.add_argument(
        "--habitat-simulations",
        type=int,
        metavar="N",
        help="simulations of the fitted density model and permutations of the marks per plot "
        "(default: --simulations)",
    )
    p.add_argument(
        "--mark",
        metavar="COLUMN",
        help="numeric point column such as diameter_m or height_m: does a plant's size depend "
        "on how close its neighbours are (mark correlation with permutation envelopes)?",
    )


def run(args: argparse.Namespace) -> int:
    """Run the analysis, write the outputs and print one line per plot."""
    if (args.kinds is None) != (args.kind_field is None):
        raise InputError(
            "--kind-field and --kinds go together, e.g. --kind-field status --kinds live,dead"
        )
    settings = ScalesSettings.from_mapping(
        {
            "simulations": args.simulations,
            "seed": args.seed,
            "alpha": args.alpha,
            "max_distance_m": args.max_distance,
            "steps": args.steps,
            "global_test": args.global_test,
            "test_function": args.test_function,
            "kind_field": args.kind_field,
            "kinds": args.kinds,
            "covariates": args.covariate or (),
            "kernel_intensity": bool(args.kernel_intensity),
            "mark": args.mark,
            "habitat_simulations": args.habitat_simulations,
        }
    )
    if settings.kinds is not None and len(settings.kinds) != 2:
        raise InputError("--kinds needs exactly two values separated by a comma, e.g. live,dead")
    with output_folder(
        args.output,
        overwrite=args.overwrite,
        inputs=[args.points, args.plots, *(p for _n, p in settings.covariates)],
    ) as tmp:
        inputs = load_points_and_plots(
            args.points, args.plots, crs=args.crs, id_field=args.id_field
        )
        results = analyse_scales(inputs, settings, points_label=str(args.points))
        paths = write_scales(tmp, results, settings)
    rows = scales_rows(results)
    cols = ["plot_id", "n", "p_global", "verdict"]
    if any("kinds_verdict" in r for r in rows):
        cols.append("kinds_verdict")
    for key in ("habitat_verdict", "marks_verdict"):
        if any(r.get(key) for r in rows):
            cols.append(key)
    print(format_table(rows, cols, max_width=90))
    print_warnings([f"plot {r.plot_id}: {w}" for r in results for w in r.warnings])
    print_notes([*inputs.notes, f"wrote {len(paths)} files to {args.output}"], args.quiet)
    return 0
