"""docs/api.md and the docstring examples of the public API and of ecoscan.stats run, and
every public function of both has an Examples section."""

from __future__ import annotations

import doctest
import importlib
import inspect
import pkgutil
from pathlib import Path

import pytest

import ecoscan
import ecoscan.stats

ROOT = Path(__file__).resolve().parents[1]
FLAGS = doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE

STATS_MODULES = sorted(
    f"ecoscan.stats.{m.name}" for m in pkgutil.iter_modules(ecoscan.stats.__path__)
)
API_MODULES = [
    "ecoscan",
    "ecoscan.api",
    "ecoscan.arguments",
    "ecoscan.records",
    "ecoscan.settings",
    "ecoscan.stats",
]


def test_api_page_runs():
    res = doctest.testfile(str(ROOT / "docs" / "api.md"), module_relative=False, optionflags=FLAGS)
    assert res.attempted > 30 and res.failed == 0


@pytest.mark.parametrize("name", API_MODULES + STATS_MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    res = doctest.testmod(module, optionflags=FLAGS, verbose=False)
    assert res.failed == 0


def _public_functions():
    for name in ecoscan.__all__:
        obj = getattr(ecoscan, name)
        if inspect.ismodule(obj):  # the ecoscan.detect package, called, runs ecoscan.api.detect
            obj = getattr(importlib.import_module("ecoscan.api"), name)
        if inspect.isfunction(obj):
            yield f"ecoscan.{name}", obj
    for name in ecoscan.stats.__all__:
        obj = getattr(ecoscan.stats, name)
        if inspect.isfunction(obj):
            yield f"ecoscan.stats.{name}", obj


def test_every_public_function_has_an_examples_section():
    found = list(_public_functions())
    assert len(found) > 50
    heading = "\n    Examples\n    --------\n"
    missing = [name for name, f in found if heading not in (f.__doc__ or "")]
    assert not missing, f"no Examples section: {', '.join(missing)}"
