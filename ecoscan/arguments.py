"""Checks of the arguments of the public API: points and plots, with messages that name the
argument and the fix (never a command-line option).

Used by :mod:`ecoscan.api` and by the per-plot engines (``analysis.analyse_plot``,
``scales.analyse_plot``), so that a transposed ``(2, n)`` array is refused everywhere
instead of being read as ``n`` garbage points.
"""

from __future__ import annotations

from numbers import Real
from typing import Any

import numpy as np
import shapely

from ecoscan.errors import InputError

__all__ = ["as_plot", "as_xy", "is_box"]


def as_xy(xy: Any, name: str = "xy") -> np.ndarray:
    """Points as a float array of shape (n, 2), checked.

    Parameters
    ----------
    xy : array-like
        Point coordinates, metres: one row per point, columns x and y.
    name : str
        The argument's name, for messages.

    Returns
    -------
    numpy.ndarray, shape (n, 2)

    Raises
    ------
    InputError
        Not numbers, wrong shape (a transposed (2, n) array is named as such), or values
        that are not finite.

    Examples
    --------
    >>> as_xy([[0, 0], [3, 4]]).shape
    (2, 2)
    >>> as_xy(np.zeros((2, 40)))
    Traceback (most recent call last):
    ...
    ecoscan.errors.InputError: xy must have shape (n, 2); got (2, 40): pass xy.T
    """
    try:
        arr = np.asarray(xy, dtype=float)
    except (TypeError, ValueError):
        raise InputError(
            f"{name} must be an array of numbers with shape (n, 2), one row per point"
        ) from None
    if arr.ndim == 2 and arr.shape[1] == 2:
        pass
    elif arr.ndim == 2 and arr.shape[0] == 2:
        raise InputError(f"{name} must have shape (n, 2); got {arr.shape}: pass {name}.T")
    elif arr.size == 0:
        arr = arr.reshape(0, 2)
    else:
        raise InputError(
            f"{name} must have shape (n, 2), one row (x, y) per point; got {arr.shape}"
        )
    bad = ~np.isfinite(arr).all(axis=1)
    if bad.any():
        raise InputError(
            f"{name} has {int(bad.sum())} row(s) with NaN or infinite coordinates "
            f"(first: row {int(np.flatnonzero(bad)[0])}); drop them first"
        )
    return arr


def as_plot(plot: Any, name: str = "plot") -> shapely.Geometry:
    """A plot as a valid shapely (Multi)Polygon of positive area.

    Parameters
    ----------
    plot : shapely.Polygon, shapely.MultiPolygon or tuple
        The outline, metres, or ``(xmin, ymin, xmax, ymax)``.
    name : str
        The argument's name, for messages.

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon

    Raises
    ------
    InputError
        Another geometry type, an empty or invalid polygon, or a box with min >= max.

    Examples
    --------
    >>> as_plot((0, 0, 20, 10)).area
    200.0
    >>> try:
    ...     as_plot((0, 0, -5, 10))
    ... except ValueError as err:  # InputError is a ValueError
    ...     print(err)
    plot as (xmin, ymin, xmax, ymax) needs xmin < xmax and ymin < ymax; got (0, 0, -5, 10)
    """
    if is_box(plot):
        x0, y0, x1, y1 = (float(v) for v in plot)
        if not (np.isfinite([x0, y0, x1, y1]).all() and x0 < x1 and y0 < y1):
            raise InputError(
                f"{name} as (xmin, ymin, xmax, ymax) needs xmin < xmax and ymin < ymax; "
                f"got {tuple(plot)}"
            )
        return shapely.box(x0, y0, x1, y1)
    if not isinstance(plot, (shapely.Polygon, shapely.MultiPolygon)):
        raise InputError(
            f"{name} must be a shapely Polygon or MultiPolygon, or (xmin, ymin, xmax, ymax); "
            f"got {type(plot).__name__}"
        )
    if not plot.is_empty and not plot.is_valid:
        why = shapely.is_valid_reason(plot)
        raise InputError(
            f"{name} is not a valid polygon ({why}); repair it with shapely.make_valid({name})"
        )
    if plot.is_empty or not plot.area > 0:
        raise InputError(f"{name} has no area; give the plot's outline in metres")
    return plot


def is_box(obj: Any) -> bool:
    """True for an ``(xmin, ymin, xmax, ymax)`` tuple or list of four real numbers.

    Examples
    --------
    >>> is_box((0, 0, 10, 5)), is_box([0, 0, 10]), is_box((0, 0, 10, True))
    (True, False, False)
    """
    return (
        isinstance(obj, (tuple, list))
        and len(obj) == 4
        and all(isinstance(v, Real) and not isinstance(v, bool) for v in obj)
    )
