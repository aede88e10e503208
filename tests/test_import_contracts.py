"""The import contracts of pyproject.toml hold, and they can fail.

Layers import downward only; ``stats`` imports nothing else of ecoscan but ``errors``; only
``ecoscan.report`` imports matplotlib (docs/architecture.md, "Import contracts").
import-linter (a general-purpose tool) builds the import graph and checks each contract.
"""

from __future__ import annotations

import pkgutil
import sys
import tomllib
from pathlib import Path

from importlinter.cli import lint_imports

import ecoscan

ROOT = Path(__file__).resolve().parents[1]


def _contracts() -> dict[str, dict]:
    cfg = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    return {c["id"]: c for c in cfg["tool"]["importlinter"]["contracts"]}


def test_the_contracts_are_kept(monkeypatch):
    monkeypatch.chdir(ROOT)
    assert lint_imports(config_filename="pyproject.toml", no_cache=True) == 0


def test_stats_contract_lists_every_other_top_level_module():
    top = {f"ecoscan.{m.name}" for m in pkgutil.iter_modules(ecoscan.__path__)}
    allowed = {"ecoscan.stats", "ecoscan.errors"}
    assert set(_contracts()["stats-pure"]["forbidden_modules"]) == top - allowed


def test_draw_contract_lists_every_top_level_module_but_report():
    top = {f"ecoscan.{m.name}" for m in pkgutil.iter_modules(ecoscan.__path__)}
    assert set(_contracts()["only-report-draws"]["source_modules"]) == top - {"ecoscan.report"}


def test_a_broken_contract_is_reported(tmp_path, monkeypatch):
    # a two-module package whose low layer imports the high one: import-linter must object
    pkg = tmp_path / "layered_demo"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "high.py").write_text("")
    (pkg / "low.py").write_text("from layered_demo import high\n")
    (tmp_path / "contracts.toml").write_text(
        '[tool.importlinter]\nroot_package = "layered_demo"\n'
        "[[tool.importlinter.contracts]]\n"
        'name = "high above low"\ntype = "layers"\n'
        'layers = ["layered_demo.high", "layered_demo.low"]\n'
    )
    monkeypatch.chdir(tmp_path)
    monkeypatch.syspath_prepend(str(tmp_path))
    sys.modules.pop("layered_demo", None)
    assert lint_imports(config_filename="contracts.toml", no_cache=True) == 1
