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

Exit codes: 0 done; 1 an internal error (one line, the traceback with ``--verbose``); 2 bad
input or an option error (one line ``error: ...``); 130 interrupted by Ctrl-C; 141 the
reader of the output went away (``| head``); 143 stopped by SIGTERM. Interrupted runs leave
no partial output (see :mod:`ecoscan.lifecycle`).
"""

from __future__ import annotations

import argparse
import errno
import importlib
import logging
import os
import pkgutil
import sys
import warnings
from collections.abc import Sequence

from ecoscan import __version__
from ecoscan.errors import InputError

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


class _Parser(argparse.ArgumentParser):
    """Argument parser whose errors are one line: ``error: ...`` and exit code 2."""

    def error(self, message: str):
        raise InputError(f"{message} (see '{self.prog} --help')")


def build_parser() -> argparse.ArgumentParser:
    """The ``ecoscan`` argument parser with every sub-command registered."""
    parser = _Parser(
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
    common.add_argument(
        "--verbose",
        action="store_true",
        help="detailed log messages, and the full traceback of an internal error",
    )
    common.add_argument(
        "--overwrite",
        action="store_true",
        help="replace an existing output file or folder (refused otherwise)",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
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


#: errno values that mean "the file system refused", with what to do about it.
_OS_HINTS = {
    errno.ENOSPC: "free some disk space or write elsewhere",
    errno.EDQUOT: "free some disk space or write elsewhere",
    errno.EROFS: "write the results to a writable folder",
    errno.EACCES: "check the permissions, or use another path",
    errno.EPERM: "check the permissions, or use another path",
    errno.ENOENT: "check the path",
    errno.EISDIR: "give a file, not a folder",
    errno.ENOTDIR: "check the path",
    errno.ENAMETOOLONG: "use a shorter path",
    errno.EIO: "check the disk or the network share",
}


def _os_message(exc: OSError) -> str | None:
    """One line for a file-system error caused by the user's paths or disk, else None."""
    if exc.errno not in _OS_HINTS:
        return None
    name = exc.filename if exc.filename is not None else ""
    where = f"{name}: " if name else ""
    return f"{where}{exc.strerror or exc}; {_OS_HINTS[exc.errno]}"


def _quiet_stdout() -> None:
    """After a broken pipe: send the rest of the output nowhere, so exit stays quiet."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError, AttributeError):
        pass


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``ecoscan`` with ``argv`` (default: ``sys.argv[1:]``) and return the exit code."""
    verbose = "--verbose" in (sys.argv[1:] if argv is None else argv)
    try:
        from ecoscan.lifecycle import install_signal_handlers

        install_signal_handlers()
        return _main(argv)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        _quiet_stdout()
        return 141
    except KeyboardInterrupt as exc:
        from ecoscan.lifecycle import Terminated

        sig = "terminated" if isinstance(exc, Terminated) else "interrupted"
        print(f"error: {sig}; no partial output was kept", file=sys.stderr)
        return 143 if isinstance(exc, Terminated) else 130
    except OSError as exc:
        msg = _os_message(exc)
        if msg is None or verbose:
            return _internal(exc, verbose)
        print(f"error: {msg}", file=sys.stderr)
        return 2
    except Exception as exc:  # last resort: one line, and the traceback only on request
        return _internal(exc, verbose)


def _internal(exc: BaseException, verbose: bool) -> int:
    if verbose:
        import traceback

        traceback.print_exception(exc)
    else:
        print(
            f"error: unexpected {type(exc).__name__}: {exc} "
            "(rerun with --verbose for details and report it as a bug)",
            file=sys.stderr,
        )
    return 1


def _main(argv: Sequence[str] | None) -> int:
    from ecoscan.progress import set_quiet

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
    if not args.verbose:
        # GDAL's own messages reach us as exceptions that ecoscan folds into its one-line
        # errors; the raw log lines are only for --verbose
        for name in ("rasterio", "fiona", "pyogrio", "pyproj"):
            logging.getLogger(name).setLevel(logging.CRITICAL)
    set_quiet(args.quiet)
    if not args.verbose:
        warnings.filterwarnings("ignore", category=RuntimeWarning)
    code = int(args._run(args) or 0)
    sys.stdout.flush()
    return code
