"""``ecoscan analyse``: are the plants in each plot clustered, random or regular?"""

from __future__ import annotations

import argparse

from ecoscan.analysis.dispersion.columns import dispersion_rows
from ecoscan.analysis.dispersion.compute import CAUTION, DispersionSettings, analyse
from ecoscan.analysis.dispersion.detectable import detectable_range_short
from ecoscan.cli._common import (
    add_crs_arg,
    add_plots_args,
    add_renamed,
    add_seed_args,
    choice,
    print_notes,
    print_warnings,
)
from ecoscan.io.inputs import load_points_and_plots
from ecoscan.lifecycle import output_folder
from ecoscan.report.folders import check_outdir, write_analysis
from ecoscan.report.tables import format_table
from ecoscan.stats.montecarlo import DIRECTIONS

NAME = "analyse"
HELP = "test per plot whether plants are clustered, random or regular"
DESCRIPTION = """\
For every plot: nearest-neighbour distances, the Clark-Evans index R (uncorrected, with
Donnelly's edge correction and with a guard zone), a Monte Carlo test in the exact plot
polygon that gives the verdict, and a quadrat analysis (chi-square, variance-to-mean ratio,
Morisita's index). Writes OUTDIR/dispersion.csv, dispersion.json, points.csv and plots.gpkg,
and prints a table. Automated counts need field checks before they drive decisions."""
EXAMPLE = "ecoscan analyse plants.csv --plots plots.geojson --crs EPSG:32633 -o results"

#: Columns of the terminal table (headings and formats from ecoscan.vocabulary).
TABLE_COLUMNS = (
    "plot_id",
    "n",
    "density_per_ha",
    "mean_nn_m",
    "R",
    "R_donnelly",
    "p_donnelly",
    "p_mc",
    "verdict",
    "detectable_range",
    "quadrat_p",
    "morisita_std",
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan analyse``."""
    p.add_argument("points", metavar="POINTS", help="plant positions (CSV with x, y; GeoPackage)")
    add_plots_args(p)
    add_crs_arg(p)
    p.add_argument("-o", "--output", required=True, metavar="OUTDIR", help="results folder")
    add_seed_args(p)
    p.add_argument(
        "--alpha", type=float, default=0.05, help="significance level of the verdict (0.05)"
    )
    p.add_argument(
        "--direction",
        type=choice("--direction", DIRECTIONS),
        default="either",
        metavar="{" + ",".join(DIRECTIONS) + "}",
        help="departure from randomness the tests look for: either way (default), only "
        "clustering or only regularity",
    )
    add_renamed(p, "--alternative")  # retired-name
    p.add_argument(
        "--guard",
        type=float,
        metavar="METRES",
        help="guard-zone width in metres (default 1/sqrt(density): twice the expected "
        "nearest-neighbour distance)",
    )
    p.add_argument(
        "--quadrat",
        type=float,
        metavar="METRES",
        help="quadrat side in metres (default: equal cells fitted to each plot, each "
        "expecting at least 5 plants where the count allows)",
    )
    p.add_argument(
        "--stop-after",
        type=int,
        default=20,
        metavar="H",
        help="stop simulating once H simulated patterns are as extreme as the observed one "
        "in each tail (sequential Monte Carlo, Besag & Clifford 1991; exact p); 0 runs every "
        "simulation (default 20)",
    )


def run(args: argparse.Namespace) -> int:
    """Run the analysis and write the results folder."""
    settings = DispersionSettings(
        simulations=args.simulations,
        seed=args.seed,
        alpha=args.alpha,
        direction=args.direction,
        guard_m=args.guard,
        quadrat_m=args.quadrat,
        stop_after=args.stop_after,
    )
    outdir = check_outdir(args.output)
    with output_folder(outdir, overwrite=args.overwrite, inputs=[args.points, args.plots]) as tmp:
        results, inputs, notes = _analyse(args, settings)
        write_analysis(tmp, inputs, results, settings, notes=notes)
    _print(args, settings, results, notes, outdir)
    return 0


def _analyse(args: argparse.Namespace, settings: DispersionSettings):
    from ecoscan.safety import check_quadrat_cells

    inputs = load_points_and_plots(args.points, args.plots, crs=args.crs, id_field=args.id_field)
    check_quadrat_cells(settings.quadrat_m, inputs.plots, option="--quadrat")
    notes = list(inputs.notes)
    few = _few_simulations(settings)
    if few:
        notes.append(few)  # kept in dispersion.json; printed as a warning after success
    return analyse(inputs, settings), inputs, notes


def _few_simulations(settings: DispersionSettings) -> str:
    few = settings.too_few_simulations()
    return few.replace("simulations (999", "--simulations (999") if few else ""


def _print(args, settings, results, notes, outdir) -> None:
    rows = dispersion_rows(results)
    shown = [{**r, "detectable_range": detectable_range_short(r)} for r in rows]
    print(format_table(shown, TABLE_COLUMNS))
    print()
    for r in rows:
        print(f"plot {r['plot_id']}: {r['summary']}")
    print(
        f"verdict: Monte Carlo test ({settings.simulations} simulations, direction "
        f"{settings.direction}, alpha {settings.alpha:g})"
    )
    few = _few_simulations(settings)
    warnings = [few] if few else []
    warnings += [f"plot {r['plot_id']}: {r['warnings']}" for r in rows if r["warnings"]]
    print_warnings(warnings)
    notes = [n for n in notes if n != few] + [f"results in {outdir}", f"caution: {CAUTION}"]
    print_notes(notes, quiet=args.quiet)
