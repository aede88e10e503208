"""The survey in one pass: outputs byte for byte against another checkout, and what each
version opens and reads.

Runs ``ecoscan survey`` on a survey file twice, once with this tree's code and once with the
code of a git reference (default ``main``, exported with ``git archive`` into a temporary
folder), each in its own process with the openers counted (tests/read_counter.py). Then it
compares every table, layer sidecar and JSON of the two output folders byte for byte
(``run.json`` holds times and is left out; GeoPackages hold SQLite timestamps and are
compared by their features) and prints the open and read counts of both.

    python benchmarks/survey_one_pass.py                      # the demo, against main
    python benchmarks/survey_one_pass.py --ref HEAD~3 --quick # fewer simulations

Exit status 1 when an output differs.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

#: Run inside each child process: the survey with the openers counted.
CHILD = r"""
import json, sys
sys.path.insert(0, sys.argv[4])
from read_counter import count_reads
from pathlib import Path
from ecoscan.survey.config import load_survey
from ecoscan.survey.runner import run_survey
import ecoscan
cfg = load_survey(sys.argv[1])
out = Path(sys.argv[2])
with count_reads() as reads:
    run_survey(cfg, output=out, report=sys.argv[5] == "1")
rasters = [str(Path(e.path).resolve()) for e in cfg.rasters]
summary = {
    "code": ecoscan.__file__,
    "raster_opens": {
        Path(r).name: {why: n for (p, why), n in reads.rasters.items() if p == r} for r in rasters
    },
    "raster_bytes_read": {Path(r).name: reads.files.get(r, 0) for r in rasters},
    "plots_reads": reads.vectors.get(str(Path(cfg.plots).resolve()), 0),
    "covariate_opens": {
        Path(p).name: n for (p, why), n in reads.rasters.items() if why == "covariate"
    },
    "output_reads": {
        str(Path(p).relative_to(out.parent.resolve())): n
        for p, n in reads.under(out.parent).items()
    },
}
Path(sys.argv[3]).write_text(json.dumps(summary, indent=1))
"""


def _export(ref: str, dest: Path) -> Path:
    """The tree of ``ref`` in ``dest`` (git archive), returned as its root."""
    tar = subprocess.run(
        ["git", "-C", str(ROOT), "archive", ref], check=True, capture_output=True
    ).stdout
    dest.mkdir(parents=True)
    subprocess.run(["tar", "-x", "-C", str(dest)], input=tar, check=True)
    return dest


def _survey(survey: Path, quick: bool, work: Path) -> Path:
    """The survey file to run: a copy of ``survey`` with fewer simulations for --quick."""
    if not quick:
        return survey
    import tomllib

    text = survey.read_text()
    data = tomllib.loads(text)
    stat = data["statistics"].get("simulations", 999)
    scl = data.get("scales", {}).get("simulations", 199)
    text = text.replace(f"simulations = {stat}", "simulations = 99", 1)
    text = text.replace(f"simulations = {scl}", "simulations = 39", 1)
    quick_file = survey.parent / f".{survey.stem}-quick.toml"
    quick_file.write_text(text)
    return quick_file


def _run(code_root: Path, survey: Path, out: Path, counts: Path, report: bool) -> dict:
    env = {**os.environ, "PYTHONPATH": str(code_root)}
    subprocess.run(
        [sys.executable, "-c", CHILD, str(survey), str(out), str(counts),
         str(ROOT / "tests"), "1" if report else "0"],
        check=True, env=env, cwd=str(out.parent),
    )  # fmt: skip
    return json.loads(counts.read_text())


def _gpkg_features(path: Path):
    import pyogrio.raw

    meta, _fid, wkb, data = pyogrio.raw.read(path)
    return meta["crs"], [bytes(g) for g in wkb], [list(map(str, d)) for d in data]


def compare_folders(a: Path, b: Path) -> list[str]:
    """Names of the outputs that differ (or exist in one folder only)."""
    names = {p.relative_to(a) for p in a.rglob("*") if p.is_file()}
    names |= {p.relative_to(b) for p in b.rglob("*") if p.is_file()}
    differ = []
    for n in sorted(names):
        if n.name == "run.json" or n.name.endswith(".key.json"):
            continue  # times; the cache's own record (its format changed)
        pa, pb = a / n, b / n
        if not (pa.exists() and pb.exists()):
            differ.append(f"{n} (only in {'the first' if pa.exists() else 'the second'})")
        elif n.suffix == ".gpkg":
            if _gpkg_features(pa) != _gpkg_features(pb):
                differ.append(str(n))
        elif pa.read_bytes() != pb.read_bytes():
            differ.append(str(n))
    return differ


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--ref", default="main", help="git reference to compare with (default main)")
    ap.add_argument("--survey", default=str(ROOT / "sample_rasters" / "survey.toml"))
    ap.add_argument("--quick", action="store_true", help="99 / 39 simulations (faster)")
    ap.add_argument("--no-report", action="store_true", help="skip figures and the report")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="ecoscan-onepass-") as tmp:
        t = Path(tmp)
        old_code = _export(args.ref, t / "ref")
        survey = _survey(Path(args.survey).resolve(), args.quick, t)
        try:
            runs = {}
            for label, code in ((args.ref, old_code), ("this tree", ROOT)):
                base = t / label.replace("/", "_").replace(" ", "_")
                base.mkdir()
                report = not args.no_report
                runs[label] = _run(code, survey, base / "results", base / "counts.json", report)
                runs[label]["folder"] = base / "results"
        finally:
            if survey.name.endswith("-quick.toml"):
                survey.unlink()
        ra, rb = runs.values()
        for label, r in runs.items():
            print(f"== {label} ({r['code']})")
            for name, by in r["raster_opens"].items():
                print(
                    f"  {name}: opened {sum(by.values())} times "
                    + json.dumps(by)
                    + f"; file read for hashing {r['raster_bytes_read'][name]}x"
                )
            print(f"  plots file read {r['plots_reads']}x")
            for name, n in r["covariate_opens"].items():
                print(f"  covariate {name}: opened {n} times (habitat covariate)")
            reads = r["output_reads"]
            tables = {k: v for k, v in reads.items() if not k.endswith((".png", ".jpg"))}
            figs = sum(v for k, v in reads.items() if k.endswith((".png", ".jpg")))
            print(
                f"  own outputs read back: {sum(tables.values())} table/layer reads "
                f"{json.dumps(tables)}; {figs} figure reads (embedding them in report.html)"
            )
        differ = compare_folders(ra["folder"], rb["folder"])
        n_files = sum(1 for p in rb["folder"].rglob("*") if p.is_file())
        if differ:
            print(f"DIFFERENT ({len(differ)}): " + ", ".join(differ))
            return 1
        print(f"identical: all {n_files} files (run.json and the cache's key files excepted)")
        return 0


if __name__ == "__main__":
    sys.exit(main())
