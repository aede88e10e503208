"""``ecoscan compare``: compare sites, dates or plots from results folders."""

from __future__ import annotations

import argparse
import sys

from ecoscan.cli._common import print_notes
from ecoscan.compare import (
    BY_CHOICES,
    GROUP_SUMMARY_COLUMNS,
    compare_groups,
    comparison_rows,
    group_rows,
    pair_summary_columns,
    read_results,
    write_comparison,
)
from ecoscan.tables import format_table, show_small_p

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

GROUP_HEADERS = (
    "rank",
    "group",
    "plots",
    "n",
    "plants/ha",
    "mean NN m",
    "R",
    "low 95%",
    "high 95%",
    "R Donnelly",
    "low 95%",
    "high 95%",
    "pattern (Donnelly 95%)",
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan compare``."""
    p.add_argument(
        "results",
        nargs="+",
        metavar="RESULTS",
        help="results folders (each with dispersion.csv, points.csv and plots.gpkg)",
    )
    p.add_argument("-o", "--out", required=True, metavar="OUTDIR", help="output folder")
    p.add_argument(
        "--by",
        choices=BY_CHOICES,
        default="auto",
        help="what forms a group (default auto: sites when every folder has them, else "
        "folders; plots for a single folder)",
    )
    p.add_argument(
        "--permutations",
        type=int,
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
    tables = [read_results(f) for f in args.results]
    labels = [t.label for t in tables]
    if len(set(labels)) < len(labels):  # same folder name in different places
        tables = [read_results(f, label=str(f).rstrip("/")) for f in args.results]
    result = compare_groups(
        tables,
        args.by,
        permutations=args.permutations,
        seed=args.seed,
        pool_dates=args.pool_dates,
    )
    paths = write_comparison(args.out, result)
    print_notes(result.notes, args.quiet)
    groups = sorted(group_rows(result), key=lambda g: g["rank_regularity"])
    print(format_table(groups, GROUP_SUMMARY_COLUMNS, headers=GROUP_HEADERS))
    print()
    adj = len(result.pairs) > 1
    cols = pair_summary_columns(len(result.pairs), paired=result.paired)
    heads = (
        ("A", "B", "plots on both", "mean Δ plants/ha", "p density (paired)", "mean ΔR",
         "p ΔR (paired)")
        if result.paired
        else ("A", "B", "Δ plants/ha", "p density", "ΔR", "ΔR edge-corr.", "p ΔR (z)",
              "p ΔR (perm.)", "p NN distances (perm.)")
    )  # fmt: skip
    print(format_table(show_small_p(comparison_rows(result), cols), cols, headers=heads))
    if adj:
        print(f"p-values adjusted for {len(result.pairs)} comparisons (Holm 1979)")
    if not args.quiet:
        print(f"wrote {len(paths)} files to {args.out}", file=sys.stderr)
    return 0
