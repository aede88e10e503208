"""Command-line interface: a thin layer over the Python API.

Each sub-command lives in its own module under :mod:`ecoscan.cli.commands` and exposes

``NAME``
    the command word;
``HELP``
    one line for ``ecoscan --help``;
``EXAMPLE``
    an example call, shown at the end of the command's ``--help``;
``add_arguments(parser)``
    adds its options to an :class:`argparse.ArgumentParser`;
``run(args) -> int``
    does the work by calling the Python API and returns the exit code.

Modules are discovered automatically, so adding a command never touches this file. Bad
input raises :class:`ecoscan.errors.InputError`, printed as ``error: ...`` with exit code 2.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import pkgutil
import sys
import warnings
from collections.abc import Sequence

from ecoscan import __version__
from ecoscan.errors import InputError
from ecoscan.progress import set_quiet

__all__ = ["build_parser", "main"]

log = logging.getLogger("ecoscan")


def _command_modules() -> list:
    from ecoscan.cli import commands

    mods = []
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda i: i.name):
        if info.name.startswith("_"):
            continue
        mod = importlib.import_module(f"ecoscan.cli.commands.{info.name}")
        if hasattr(mod, "NAME") and hasattr(mod, "run"):
            mods.append(mod)
    order = getattr(commands, "ORDER", ())
    mods.sort(key=lambda m: (order.index(m.NAME) if m.NAME in order else len(order), m.NAME))
    return mods


def build_parser() -> argparse.ArgumentParser:
    """The ``ecoscan`` argument parser with every sub-command registered."""
    parser = argparse.ArgumentParser(
        prog="ecoscan",
        description=(
            "Detect plants in rasters, test per plot whether they are clustered, random or "
            "regular, compare sites and seasons, and write tables, GIS layers and a report."
        ),
        epilog="Run 'ecoscan COMMAND --help' for a command's options and an example.",
    )
    parser.add_argument("--version", action="version", version=f"ecoscan {__version__}")
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument(
        "--quiet", action="store_true", help="no progress bars or notes (warnings still show)"
    )
    common.add_argument("--verbose", action="store_true", help="detailed log messages")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for mod in _command_modules():
        example = getattr(mod, "EXAMPLE", "")
        p = sub.add_parser(
            mod.NAME,
            help=mod.HELP,
            description=getattr(mod, "DESCRIPTION", mod.HELP),
            epilog=f"example:\n  {example}" if example else None,
            formatter_class=argparse.RawDescriptionHelpFormatter,
            parents=[common],
        )
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``ecoscan`` with ``argv`` (default: ``sys.argv[1:]``) and return the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return 0
    logging.basicConfig(
        level=logging.DEBUG if args.verbose else (logging.WARNING if args.quiet else logging.INFO),
        format="%(message)s" if not args.verbose else "%(levelname)s %(name)s: %(message)s",
        stream=sys.stderr,
    )
    logging.getLogger("pyogrio").setLevel(logging.WARNING)  # "Created N records" is noise
    set_quiet(args.quiet)
    if not args.verbose:
        warnings.filterwarnings("ignore", category=RuntimeWarning)
    try:
        return int(args._run(args) or 0)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("error: interrupted; no partial output was kept", file=sys.stderr)
        return 130
    except Exception as exc:  # last resort: one line, and the traceback only on request
        if args.verbose:
            raise
        print(
            f"error: unexpected {type(exc).__name__}: {exc} "
            "(rerun with --verbose for details and report it as a bug)",
            file=sys.stderr,
        )
        return 1
