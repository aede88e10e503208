"""Write every printed example in the README (and the column reference) from the demo data.

Each example in a Markdown file sits between ``<!-- example: NAME -->`` and
``<!-- end example -->``; this script runs its commands on the bundled demo data in a
scratch folder and writes the commands and what they print to standard output (results
only: notes and warnings go to standard error). ``docs/columns.md`` is written from
``ecoscan/vocabulary.py``.

    python docs/examples/make_examples.py           # rewrite the examples in place
    python docs/examples/make_examples.py --check   # exit 1 when the text has drifted

``tests/test_docs_examples.py`` runs the check, so the documentation cannot drift from what
the commands print.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import os
import re
import shlex
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

#: name -> commands, run in this order in one scratch folder (later ones use earlier outputs).
EXAMPLES: dict[str, list[str]] = {
    "detect": [
        "ecoscan detect sample_rasters/tansy_spring_rgb.tif -o spring.csv --diameter 0.6:1.8 "
        "--plots sample_rasters/plots.gpkg",
        "ecoscan detect sample_rasters/tansy_autumn_rgb.tif -o autumn.gpkg --diameter 0.6:1.8 "
        "--plots sample_rasters/plots.gpkg",
    ],
    "validate": [
        "ecoscan validate spring.csv sample_rasters/truth/tansy_spring_plants.csv "
        "--tolerance 0.5 --plots sample_rasters/plots.gpkg -o accuracy.csv",
    ],
    "analyse": ["ecoscan analyse spring.csv --plots sample_rasters/plots.gpkg -o spring_results"],
    "scales": [
        "ecoscan scales spring.csv --plots sample_rasters/plots.gpkg -o scales --simulations 99",
    ],
    "change": [
        "ecoscan change spring.csv autumn.gpkg --tolerance 0.8 --plots sample_rasters/plots.gpkg "
        "-o change --simulations 99",
    ],
    "compare": [
        "ecoscan analyse autumn.gpkg --plots sample_rasters/plots.gpkg -o autumn_results",
        "ecoscan compare spring_results autumn_results -o compare --by plot",
    ],
}

#: Files whose examples are kept current.
DOCUMENTS = ("README.md",)

_BLOCK = re.compile(
    r"(<!-- example: (?P<name>[\w-]+) -->\n)(?P<body>.*?)(<!-- end example -->)", re.S
)


def run_examples(names: list[str] | None = None) -> dict[str, str]:
    """Run the examples (all, or ``names`` and those before them) and return their text."""
    from ecoscan.cli import main

    order = list(EXAMPLES)
    if names:
        order = order[: max(order.index(n) for n in names) + 1]
    texts = {}
    here = os.getcwd()
    with tempfile.TemporaryDirectory(prefix="ecoscan-examples-") as tmp:
        os.symlink(ROOT / "sample_rasters", Path(tmp) / "sample_rasters")
        os.chdir(tmp)
        try:
            for name in order:
                printed = []
                for cmd in EXAMPLES[name]:
                    out, err = io.StringIO(), io.StringIO()
                    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
                        code = main([*shlex.split(cmd)[1:], "--quiet"])
                    if code != 0:
                        raise RuntimeError(f"{cmd} failed ({code}): {err.getvalue().strip()}")
                    printed.append(out.getvalue().rstrip("\n"))
                commands = "\n".join(EXAMPLES[name])
                output = "\n\n".join(p for p in printed if p)
                texts[name] = f"```bash\n{commands}\n```\n```\n{output}\n```\n"
        finally:
            os.chdir(here)
    return texts


def columns_markdown() -> str:
    """The column reference, from the vocabulary."""
    from ecoscan.vocabulary import COLUMNS

    lines = [
        "# Columns",
        "",
        "Every column ecoscan writes or shows, with the heading used in the terminal and the",
        "report. Written by `docs/examples/make_examples.py` from `ecoscan/vocabulary.py`;",
        "do not edit by hand.",
        "",
        "| column | heading | unit | shown as | meaning |",
        "| --- | --- | --- | --- | --- |",
    ]
    for c in COLUMNS.values():
        lines.append(f"| `{c.key}` | {c.heading} | {c.unit or '–'} | {c.fmt} | {c.description} |")
    return "\n".join(lines) + "\n"


def render(text: str, examples: dict[str, str]) -> str:
    """``text`` with every example block replaced by its current output."""

    def sub(m: re.Match) -> str:
        name = m.group("name")
        if name not in examples:
            return m.group(0)
        return m.group(1) + examples[name] + m.group(4)

    return _BLOCK.sub(sub, text)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true", help="report drift instead of writing")
    args = ap.parse_args(argv)
    examples = run_examples()
    drift = []
    targets = {ROOT / d: None for d in DOCUMENTS}
    for path in targets:
        old = path.read_text(encoding="utf-8")
        new = render(old, examples)
        if new != old:
            drift.append(path.name)
            if not args.check:
                path.write_text(new, encoding="utf-8")
    cols = ROOT / "docs" / "columns.md"
    if not cols.exists() or cols.read_text(encoding="utf-8") != columns_markdown():
        drift.append("docs/columns.md")
        if not args.check:
            cols.write_text(columns_markdown(), encoding="utf-8")
    if args.check and drift:
        print(f"out of date: {', '.join(drift)}; run python docs/examples/make_examples.py")
        return 1
    print("examples current" if args.check else f"wrote {', '.join(drift) or 'nothing'}")
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT))
    raise SystemExit(main())
