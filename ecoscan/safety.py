"""Plausibility checks made before any large allocation, so that no run grows without bound.

Each check either returns a safe value (with a note) or raises :class:`InputError` naming the
option or key as the user wrote it and the value that would work.
"""

from __future__ import annotations

import argparse
import math
import os
import sys

import numpy as np

from ecoscan.errors import InputError

__all__ = [
    "MAX_COORDINATE_M",
    "MAX_QUADRAT_CELLS",
    "MAX_SIMULATIONS",
    "cap_workers",
    "check_coordinates",
    "check_quadrat_cells",
    "check_simulations",
    "cpu_count",
    "simulations_arg",
]

#: Most Monte Carlo simulations or permutations: p-values resolve to 1e-5, far finer than any
#: significance level in use, and one plot's run stays within minutes.
MAX_SIMULATIONS = 99_999

#: Most quadrats in one plot's grid: a 316 x 316 grid, far finer than the two or more plants
#: per quadrat that chi-square tests need (Greig-Smith 1983, common practice).
MAX_QUADRAT_CELLS = 100_000

#: Largest plausible projected coordinate. The Earth's circumference is about 4e7 m, so any
#: map projection of the Earth stays well below 1e8 m; larger values are a unit or column
#: mix-up, and near 1e15 m float64 keeps only about 0.1 m of resolution.
MAX_COORDINATE_M = 1e8


def cpu_count() -> int:
    """CPU cores this process may use (at least 1).

    Examples
    --------
    >>> cpu_count() >= 1
    True
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def cap_workers(n: int | None, *, quiet: bool = False, option: str = "--workers") -> int | None:
    """Check a worker count and cap it at the number of CPU cores, with a note.

    Parameters
    ----------
    n : int or None
        Requested worker processes (None: leave the default to the caller).
    quiet : bool
        Do not print the note.
    option : str
        Option or key name for the messages.

    Returns
    -------
    int or None

    Examples
    --------
    >>> cap_workers(1)
    1
    """
    if n is None:
        return None
    if n < 1:
        raise InputError(f"{option} must be at least 1 (got {n})")
    cores = cpu_count()
    if n > cores:
        if not quiet:
            print(
                f"note: {option} {n} is more than the {cores} CPU cores; using {cores}",
                file=sys.stderr,
            )
        return cores
    return n


def check_simulations(n: int, option: str = "--simulations", *, zero_ok: bool = True) -> int:
    """Refuse a negative or absurdly large number of simulations or permutations.

    Examples
    --------
    >>> check_simulations(999)
    999
    """
    low = 0 if zero_ok else 1
    if n < low:
        raise InputError(f"{option} must be at least {low} (got {n})")
    if n > MAX_SIMULATIONS:
        raise InputError(
            f"{option} {n} is more than the {MAX_SIMULATIONS} this tool runs; 999 gives "
            "p-values to 0.001 and 9999 to 0.0001"
        )
    return n


def simulations_arg(option: str, *, zero_ok: bool = True):
    """An argparse ``type`` for simulation or permutation counts (whole, bounded).

    Examples
    --------
    >>> simulations_arg("--simulations")("199")
    199
    """

    def parse(text: str) -> int:
        try:
            n = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{option} takes a whole number, e.g. 999 (got {text!r})"
            ) from None
        try:
            return check_simulations(n, option, zero_ok=zero_ok)
        except InputError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = "simulations"
    return parse


def check_quadrat_cells(quadrat_m: float | None, plots, option: str = "--quadrat") -> None:
    """Refuse a quadrat side that would make an enormous grid in some plot.

    Parameters
    ----------
    quadrat_m : float or None
        Quadrat side in metres (None: the default, sized to the plot's points).
    plots : sequence of objects with ``plot_id`` and ``geometry``
        The plots (metres).
    option : str
        Option or key name for the message.

    Examples
    --------
    >>> check_quadrat_cells(None, [])
    """
    if quadrat_m is None:
        return
    if not (math.isfinite(quadrat_m) and quadrat_m > 0):
        raise InputError(f"{option} must be a positive number of metres (got {quadrat_m:g})")
    for p in plots:
        x0, y0, x1, y1 = p.geometry.bounds
        cells = math.ceil((x1 - x0) / quadrat_m) * math.ceil((y1 - y0) / quadrat_m)
        if cells > MAX_QUADRAT_CELLS:
            side = math.sqrt((x1 - x0) * (y1 - y0) / MAX_QUADRAT_CELLS)
            raise InputError(
                f"{option} {quadrat_m:g} m makes {cells:,} quadrats in plot {p.plot_id} "
                f"(at most {MAX_QUADRAT_CELLS:,}); use a side of at least {side:.2g} m, or "
                "leave it out for about 2 plants per quadrat"
            )


def check_coordinates(x: np.ndarray, y: np.ndarray, source: str) -> None:
    """Refuse coordinates no map projection of the Earth can give (precision is lost there).

    Examples
    --------
    >>> check_coordinates(np.array([5e5]), np.array([6.2e6]), "points.csv")
    """
    for name, v in (("x", x), ("y", y)):
        finite = np.asarray(v, dtype=float)
        finite = finite[np.isfinite(finite)]
        if finite.size and float(np.max(np.abs(finite))) > MAX_COORDINATE_M:
            big = float(np.max(np.abs(finite)))
            raise InputError(
                f"{source}: {name} coordinates reach {big:.3g}, beyond any map projection of "
                f"the Earth (at most {MAX_COORDINATE_M:.0e} m); check the columns, their units "
                "and the CRS"
            )


def inputs_of(*paths: str | os.PathLike | None) -> list[str]:
    """The non-empty paths among ``paths`` (for output-versus-input checks).

    Examples
    --------
    >>> inputs_of("a.csv", None)
    ['a.csv']
    """
    return [str(p) for p in paths if p]
