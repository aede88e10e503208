"""Progress bars: shown on a terminal, silent when output is piped or ``--quiet`` is given."""

from __future__ import annotations

import sys
from collections.abc import Iterable, Iterator
from typing import TypeVar

from tqdm import tqdm

T = TypeVar("T")

_QUIET = False

__all__ = ["progress", "set_quiet"]


def set_quiet(quiet: bool) -> None:
    """Switch all progress bars off (True) or back to automatic (False)."""
    global _QUIET
    _QUIET = bool(quiet)


def progress(
    iterable: Iterable[T], *, total: int | None = None, desc: str = "", unit: str = "it"
) -> Iterator[T]:
    """Wrap an iterable in a progress bar on standard error when it is a terminal.

    Parameters
    ----------
    iterable : iterable
        What to iterate over.
    total : int, optional
        Number of items, when ``len()`` does not give it.
    desc : str
        Short label, e.g. ``"tiles"``.
    unit : str
        Unit name shown in the bar.
    """
    disable = _QUIET or not sys.stderr.isatty()
    return iter(tqdm(iterable, total=total, desc=desc, unit=unit, disable=disable, leave=False))
