"""Options and helpers shared by several sub-commands."""

from __future__ import annotations

import argparse
import logging
import sys
from typing import NoReturn

from ecoscan.safety import simulations_arg
from ecoscan.vocabulary import RENAMED_OPTIONS, RENAMED_VALUES

log = logging.getLogger("ecoscan")

__all__ = [
    "add_crs_arg",
    "add_dask_args",
    "add_plots_args",
    "add_renamed",
    "add_seed_args",
    "choice",
    "print_notes",
    "print_warnings",
    "refuse",
]


def refuse(message: str) -> NoReturn:
    """Print ``error: MESSAGE`` on one line and exit with code 2 (bad input)."""
    print(f"error: {message}", file=sys.stderr)
    raise SystemExit(2)


class _Renamed(argparse.Action):
    """A retired option: refused with one line that names its replacement."""

    def __init__(self, option_strings, dest, new: str = "", **kw):
        kw.pop("nargs", None)
        super().__init__(option_strings, dest, nargs="?", help=argparse.SUPPRESS, **kw)
        self.new = new

    def __call__(self, parser, namespace, values, option_string=None):
        refuse(f"{option_string} was renamed {self.new}; use {self.new} (see --help)")


def add_renamed(p: argparse.ArgumentParser, *old: str) -> None:
    """Refuse retired option names (see :data:`ecoscan.vocabulary.RENAMED_OPTIONS`)."""
    for o in old:
        p.add_argument(o, action=_Renamed, new=RENAMED_OPTIONS[o], dest=f"_retired_{o[2:]}")


def choice(option: str, values: tuple[str, ...]):
    """An argparse ``type`` that accepts ``values`` and names the new word for a retired one.

    Examples
    --------
    >>> choice("--direction", ("either", "clustered", "regular"))("regular")
    'regular'
    """

    def parse(text: str) -> str:
        if text in values:
            return text
        new = RENAMED_VALUES.get(text)
        if new in values:
            refuse(f"{option} {text} was renamed {option} {new}")
        refuse(f"{option} must be one of {', '.join(values)} (got {text!r})")

    parse.__name__ = option.lstrip("-")
    return parse


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


def add_dask_args(p: argparse.ArgumentParser) -> None:
    """``--dask-workers`` and ``--scheduler``: run on a Dask cluster instead of ``--workers``."""
    p.add_argument(
        "--dask-workers",
        type=int,
        metavar="N",
        help='start a local Dask cluster of N worker processes (needs "ecoscan[dask]")',
    )
    p.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="run on the Dask cluster of a running scheduler, e.g. tcp://10.0.0.5:8786; the "
        "rasters must be reachable from its workers at the same path or URL",
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
    """Print notes (conversions, assumptions, where the files are) to standard error.

    ``--quiet`` silences notes; results go to standard output and warnings are always shown.
    """
    if quiet:
        return
    for n in notes:
        print(f"note: {n}", file=sys.stderr)


def print_warnings(warnings: list[str]) -> None:
    """Print warnings (what limits a result) to standard error, even with ``--quiet``."""
    for w in warnings:
        print(f"warning: {w}", file=sys.stderr)
