"""Every sub-command is listed by `ecoscan --help` and its own help ends with an example."""

import pytest

from ecoscan import __version__
from ecoscan.cli import _command_modules, main

COMMANDS = [
    "demo",
    "survey",
    "detect",
    "analyse",
    "scales",
    "validate",
    "calibrate",
    "compare",
    "change",
    "plan",
]


def test_all_commands_registered():
    assert sorted(m.NAME for m in _command_modules()) == sorted(COMMANDS)


@pytest.mark.parametrize("name", COMMANDS)
def test_help_has_an_example(name, capsys):
    with pytest.raises(SystemExit) as e:
        main([name, "--help"])
    assert e.value.code == 0
    out = capsys.readouterr().out
    assert "example:" in out and f"ecoscan {name}" in out.split("example:")[1]
    assert "--quiet" in out and "--verbose" in out


def test_version(capsys):
    with pytest.raises(SystemExit):
        main(["--version"])
    assert capsys.readouterr().out.strip() == f"ecoscan {__version__}"
