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

from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

#: Public names and the module that defines each (imported on first use, PEP 562).
#: ``scales``, ``detect``, ``compare`` and ``change`` are also modules; the module is returned,
#: and calling it runs the function of the same name in ecoscan.api (ecoscan/_callable.py).
_LAZY = {
    "dispersion": "ecoscan.api",
    "scales": "ecoscan.scales",
    "detect": "ecoscan.detect",
    "compare": "ecoscan.compare",
    "change": "ecoscan.change",
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


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
