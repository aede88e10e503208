"""The docstring examples of the data model, the I/O edge, the analysis jobs, detection,
the scene suite, the survey runner and the report run.

``tests/test_api_docs.py`` runs those of the public API and of ``ecoscan.stats``; this runs
the layers in between, so an example cannot drift from the code it shows. The planning
examples (tens of seconds of simulation each) are left to ``tests/test_plan_cli.py``.
"""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

FLAGS = doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE
PACKAGES = (
    "ecoscan.model",
    "ecoscan.io",
    "ecoscan.analysis",
    "ecoscan.detect",
    "ecoscan.synthetic",
    "ecoscan.survey",
    "ecoscan.report",
    "ecoscan.cli",
)
SLOW = {"ecoscan.analysis.planning"}


def _modules() -> list[str]:
    names = []
    for package in PACKAGES:
        pkg = importlib.import_module(package)
        names.append(package)
        for m in pkgutil.walk_packages(pkg.__path__, prefix=f"{package}."):
            if m.name not in SLOW:
                names.append(m.name)
    return sorted(names)


def test_every_layer_is_listed():
    found = _modules()
    assert "ecoscan.analysis.dispersion.compute" in found and "ecoscan.io.raster" in found
    assert "ecoscan.detect.autotune" in found and "ecoscan.report.html" in found


@pytest.mark.parametrize("name", _modules())
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    res = doctest.testmod(module, optionflags=FLAGS, verbose=False)
    assert res.failed == 0
