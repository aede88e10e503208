"""Pure statistical functions: coordinates and shapely polygons in, typed result records out.

Nothing here reads files, prints, or draws. Every function names its published source.

Every public name of the modules below is also available from ``ecoscan.stats`` itself
(``ecoscan.stats.clark_evans``, ``ecoscan.stats.envelope_test``...). They are found and
imported on first use, so ``import ecoscan.stats.csr`` stays light in tile workers, and a
new module's ``__all__`` is exported without editing this file.

Examples
--------
>>> import numpy as np, ecoscan.stats
>>> xy = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T   # square lattice, 2 m apart
>>> round(ecoscan.stats.clark_evans(xy, 400.0).statistic, 3)   # Clark & Evans (1954): 2.0
2.0
"""

from __future__ import annotations

import importlib
import pkgutil
from functools import cache
from typing import Any


@cache
def _exports() -> dict[str, str]:
    """Public name -> defining module, from every stats module's ``__all__``."""
    out: dict[str, str] = {}
    for info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        if info.name.startswith("_"):
            continue
        module = importlib.import_module(f"{__name__}.{info.name}")
        for name in getattr(module, "__all__", ()):
            out.setdefault(name, module.__name__)
    return out


def __getattr__(name: str) -> Any:
    if name == "__all__":
        return sorted(_exports())
    module = _exports().get(name) if not name.startswith("__") else None
    if module is None:
        raise AttributeError(f"module 'ecoscan.stats' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_exports()))
