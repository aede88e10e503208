"""Packaging: every sub-package is listed in pyproject.toml, so installs are complete."""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_every_subpackage_is_listed():
    cfg = tomllib.loads((ROOT / "pyproject.toml").read_text())
    listed = set(cfg["tool"]["setuptools"]["packages"])
    found = {
        ".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "ecoscan").rglob("__init__.py")
    }
    assert found <= listed, f"add these to [tool.setuptools] packages: {sorted(found - listed)}"
    assert "ecoscan.sample_rasters" in listed
    assert (ROOT / "sample_rasters" / "survey.toml").exists()


def test_demo_command_finds_its_data():
    from ecoscan.cli.commands.demo import demo_dir

    d = demo_dir()
    assert (d / "survey.toml").is_file() and (d / "truth" / "tansy_change.csv").is_file()
