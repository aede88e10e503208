"""ecoscan: raster-to-points ecological survey analyser.

Detect plants or trees in rasters, turn them into points inside survey plots, and test per
plot whether they stand clustered, at random or regularly spaced, with edge corrections and
exact (Monte Carlo) significance.

The Python API (``docs/api.md``) is five functions, loaded on first use so that
``import ecoscan`` stays fast:

``dispersion(xy, plot)``
    Clark–Evans R, Donnelly's edge correction, the Monte Carlo test and quadrats.
``scales(xy, plot)``
    K, L, g, G, F and J with simulation envelopes: at which distances a pattern departs.
``detect(path)``
    One point per plant from a raster (imagery, canopy height model or class map).
``compare(groups)``
    Density and spacing of groups of plots, every pair tested.
``change(earlier, later, tolerance_m)``
    Persisting, lost and new plants between two surveys.

Examples
--------
>>> import ecoscan
>>> res = ecoscan.dispersion([[1, 1], [1, 3], [3, 1], [3, 3]], (0, 0, 4, 4), simulations=19)
>>> res.n, res.density_per_ha
(4, 2500.0)
"""

from __future__ import annotations

import inspect
import sys
import types
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

#: Public names and the module that defines each (imported on first use, PEP 562).
#: ``detect`` is also the name of the detection package: see :func:`_callable_package`.
_LAZY = {
    "dispersion": "ecoscan.api",
    "scales": "ecoscan.api",
    "detect": "ecoscan.detect",
    "compare": "ecoscan.api",
    "change": "ecoscan.api",
    "Dispersion": "ecoscan.api",
    "Scales": "ecoscan.api",
    "Detection": "ecoscan.api",
    "Comparison": "ecoscan.api",
    "Change": "ecoscan.api",
    "Row": "ecoscan.records",
    "Table": "ecoscan.records",
    "InputError": "ecoscan.errors",
}

__all__ = [
    "Change",
    "Comparison",
    "Detection",
    "Dispersion",
    "InputError",
    "Row",
    "Scales",
    "Table",
    "__version__",
    "change",
    "compare",
    "detect",
    "dispersion",
    "scales",
]

if TYPE_CHECKING:  # for type checkers and editors; never executed
    from ecoscan.api import (
        Change,
        Comparison,
        Detection,
        Dispersion,
        Scales,
        change,
        compare,
        detect,
        dispersion,
        scales,
    )
    from ecoscan.errors import InputError
    from ecoscan.records import Row, Table


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'ecoscan' has no attribute {name!r}")
    import importlib

    loaded = importlib.import_module(module)
    value = loaded if module == f"ecoscan.{name}" else getattr(loaded, name)
    globals()[name] = value
    return value


class _CallablePackage(types.ModuleType):
    """A package that, called, runs the API function of its short name in :mod:`ecoscan.api`."""

    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        from ecoscan import api

        return getattr(api, self.__name__.rsplit(".", 1)[1])(*args, **kwargs)

    @property
    def __signature__(self) -> inspect.Signature:
        from ecoscan import api

        return inspect.signature(getattr(api, self.__name__.rsplit(".", 1)[1]))


def _callable_package(name: str) -> None:
    """Make the package ``name`` (``"ecoscan.detect"``) also the API function of that name.

    Python binds a sub-package to its parent's attribute when it is imported, so
    ``ecoscan.detect`` is the package :mod:`ecoscan.detect` whichever way it was reached
    (``import ecoscan.detect``, ``from ecoscan.detect import ...`` or ``ecoscan.detect``).
    The package stays a normal package, and calling it runs :func:`ecoscan.api.detect` with
    that function's signature, so ``ecoscan.detect(path)`` and ``import ecoscan.detect as d;
    d.detect_raster(...)`` both work. ``detect`` is the one API name that is also a package.
    """
    sys.modules[name].__class__ = _CallablePackage


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
