"""``ecoscan demo``: the whole job on the bundled, invented demo survey."""

from __future__ import annotations

import argparse
from pathlib import Path

NAME = "demo"
HELP = "run the bundled demo survey (invented sites) and write its report"
DESCRIPTION = (
    "Run the complete survey on the bundled demo data: two invented sites, RGB orthomosaics of "
    "two dates, a canopy height model and a classified map, six plots with known patterns. "
    "Prints where the report is."
)
EXAMPLE = "ecoscan demo -o ecoscan-demo"


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``ecoscan demo``."""
    p.add_argument(
        "-o",
        "--output",
        default="ecoscan-demo",
        metavar="DIR",
        help="output folder (default ./ecoscan-demo)",
    )
    p.add_argument(
        "--workers", type=int, default=1, metavar="N", help="detection worker processes (default 1)"
    )


def demo_dir() -> Path:
    """Folder of the bundled demo survey: installed package data, or a source checkout."""
    import ecoscan

    here = Path(ecoscan.__file__).resolve().parent
    for p in (here / "sample_rasters", here.parent / "sample_rasters"):
        if (p / "survey.toml").exists():
            return p
    from ecoscan.errors import InputError

    raise InputError("the demo data is not installed; reinstall ecoscan with 'pip install .'")


def run(args: argparse.Namespace) -> int:
    """Run ``ecoscan demo``."""
    from ecoscan.cli._common import print_notes
    from ecoscan.cli.commands.survey import print_summary
    from ecoscan.survey.config import load_survey
    from ecoscan.survey.runner import run_survey

    data = demo_dir()
    cfg = load_survey(data / "survey.toml")
    from ecoscan.safety import cap_workers

    workers = cap_workers(args.workers, quiet=args.quiet)
    res = run_survey(cfg, output=Path(args.output), workers=workers, overwrite=args.overwrite)
    print_notes(res.notes, args.quiet)
    print_summary(res, args.quiet)
    print_notes(
        [f"the demo data is invented; the true plant positions are in {data / 'truth'}"],
        args.quiet,
    )
    return 0
