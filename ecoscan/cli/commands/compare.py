"""``ecoscan compare``: compare sites, dates or plots from results folders."""

from __future__ import annotations

import argparse

from ecoscan.analysis.compare.columns import (
    GROUP_SUMMARY_COLUMNS,
    comparison_rows,
    group_rows,
    pair_summary_columns,
)
from ecoscan.analysis.compare.compute import BY_CHOICES, compare_groups, read_results
from ecoscan.cli._common import add_renamed, print_notes
from ecoscan.lifecycle import output_folder
from ecoscan.report.folders import write_comparison
from ecoscan.report.tables import format_table
from ecoscan.safety import simulations_arg

NAME = "compare"
HELP = "compare sites, dates or plots: density, Clark-Evans R and spacing, pair by pair"
DESCRIPTION = (
    "Read results folders of 'ecoscan analyse' or 'ecoscan survey' and compare every pair of "
    "groups: difference in density (exact test of two Poisson rates), difference in pooled "
    "Clark-Evans R (z test and a permutation test that moves whole plots), and the "
    "nearest-neighbour distances (Mann-Whitney U, Kolmogorov-Smirnov). With more than two "
    "groups p-values are Holm-adjusted. Writes comparison.csv, groups.csv, comparison.json "
    "and comparison.png."
)
EXAMPLE = "ecoscan compare results_planted results_natural -o compare_out --by folder"


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan compare``."""
    p.add_argument(
        "results",
        nargs="+",
        metavar="RESULTS",
        help="results folders (each with dispersion.csv, points.csv and plots.gpkg)",
    )
    p.add_argument("-o", "--output", required=True, metavar="OUTDIR", help="output folder")
    add_renamed(p, "--out")  # retired-name
    p.add_argument(
        "--by",
        choices=BY_CHOICES,
        default="auto",
        help="what forms a group (default auto: sites when every folder has them, else "
        "folders; plots for a single folder)",
    )
    p.add_argument(
        "--permutations",
        type=simulations_arg("--permutations"),
        default=999,
        metavar="N",
        help="random arrangements of plots for the permutation test (default 999; all "
        "arrangements are used when there are fewer)",
    )
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    p.add_argument(
        "--pool-dates",
        action="store_true",
        help="pool the dates of one site or plot into one group (off by default: the same "
        "plants would count twice; groups are then compared date by date)",
    )


def run(args: argparse.Namespace) -> int:
    """Run ``ecoscan compare``."""
    with output_folder(args.output, overwrite=args.overwrite, inputs=args.results) as tmp:
        tables = [read_results(f) for f in args.results]
        labels = [t.label for t in tables]
        if len(set(labels)) < len(labels):  # same folder name in different places
            tables = [read_results(f, label=str(f).rstrip("/")) for f in args.results]
        result = compare_groups(
            tables,
            args.by,
            permutations=args.permutations,
            rng=args.seed,
            pool_dates=args.pool_dates,
        )
        paths = write_comparison(tmp, result)
    groups = sorted(group_rows(result), key=lambda g: g["rank_regularity"])
    print(format_table(groups, GROUP_SUMMARY_COLUMNS))
    print()
    cols = pair_summary_columns(len(result.pairs), paired=result.paired)
    print(format_table(comparison_rows(result), cols))
    if len(result.pairs) > 1:
        print(f"p-values adjusted for {len(result.pairs)} comparisons (Holm 1979)")
    print_notes([*result.notes, f"wrote {len(paths)} files to {args.output}"], args.quiet)
    return 0
