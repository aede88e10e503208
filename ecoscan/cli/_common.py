"""Options and helpers shared by several sub-commands."""

from __future__ import annotations

import argparse
import logging
import sys

from ecoscan.safety import simulations_arg

log = logging.getLogger("ecoscan")

__all__ = ["add_crs_arg", "add_plots_args", "add_seed_args", "print_notes"]


def add_crs_arg(p: argparse.ArgumentParser) -> None:
    """``--crs``: the CRS of point files that do not carry one."""
    p.add_argument(
        "--crs",
        metavar="CRS",
        help="CRS of a points CSV that has no .prj beside it, e.g. EPSG:32633",
    )


def add_plots_args(p: argparse.ArgumentParser, *, required: bool = True) -> None:
    """``--plots`` and ``--id-field``."""
    p.add_argument(
        "--plots",
        required=required,
        metavar="PLOTS",
        help="plot polygons (GeoPackage, GeoJSON or Shapefile)",
    )
    p.add_argument(
        "--id-field",
        metavar="FIELD",
        help="field holding the plot id (default: plot_id, id or name, else feature number)",
    )


def add_seed_args(p: argparse.ArgumentParser, *, simulations: int = 999) -> None:
    """``--simulations`` and ``--seed`` for Monte Carlo tests."""
    p.add_argument(
        "--simulations",
        type=simulations_arg("--simulations"),
        default=simulations,
        metavar="N",
        help=f"Monte Carlo simulations under complete spatial randomness (default {simulations})",
    )
    p.add_argument(
        "--seed", type=int, default=1, help="random seed; same seed, same numbers (default 1)"
    )


def print_notes(notes: list[str], quiet: bool = False) -> None:
    """Print notes about conversions and assumptions to standard error."""
    if quiet:
        return
    for n in notes:
        print(f"note: {n}", file=sys.stderr)
