"""Bad input to the detectors is refused before any large allocation, with a clean exit 2.

The bad cases run through the command line (``ecoscan.cli.main``) in one subprocess whose
address space is capped with ``resource.setrlimit(RLIMIT_AS, ...)``: a detector that
started allocating for an absurd window would hit the cap (MemoryError) instead of
exiting 2 with a one-line ``error:``. All rasters are invented.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest
from detect_helpers import UTM, X0, Y0
from rasterio.transform import from_origin

from ecoscan.synthetic import write_geotiff

# Address-space cap for the child: enough for Python, numpy, GDAL and a few tiles, far below
# what the unguarded cases asked for (the CHM-on-RGB case grew to 14.8 GB before the guard).
CAP_BYTES = 3 * 1024**3


def _rgb(tmp_path, name="rgb.tif", ps=0.05):
    rng = np.random.default_rng(5)
    img = rng.integers(0, 256, (3, 256, 256), dtype=np.uint8)
    return write_geotiff(tmp_path / name, img, from_origin(X0, Y0, ps, ps), UTM)


def _chm(tmp_path, values, name, ps=0.05):
    return write_geotiff(
        tmp_path / name, values.astype(np.float32), from_origin(X0, Y0, ps, ps), UTM
    )


def _heights(scale=1.0):
    yy, xx = np.mgrid[:256, :256]
    h = 12.0 * np.exp(-((yy - 128.0) ** 2 + (xx - 128.0) ** 2) / (2 * 20.0**2))
    return h * scale


CASES = {
    # an ordinary 8-bit RGB image given to the height-model detector
    "rgb_as_chm": lambda p: ([str(_rgb(p)), "-o", "out.csv", "--method", "chm"], "3 bands"),
    # one 8-bit band: image brightness, not metres
    "uint8_band_as_chm": lambda p: (
        [
            str(
                write_geotiff(
                    p / "grey.tif",
                    np.full((1, 128, 128), 200, np.uint8),
                    from_origin(X0, Y0, 0.05, 0.05),
                    UTM,
                )
            ),
            "-o",
            "out.csv",
            "--method",
            "chm",
        ],
        "8-bit",
    ),
    # heights in centimetres (a 12 m tree stored as 1200)
    "heights_in_cm": lambda p: (
        [str(_chm(p, _heights(100.0), "cm.tif")), "-o", "out.csv", "--method", "chm"],
        "implausible",
    ),
    # an undeclared fill value of 1e30
    "huge_fill_value": lambda p: (
        [
            str(_chm(p, np.where(_heights() < 0.01, 1e30, _heights()), "fill.tif")),
            "-o",
            "out.csv",
            "--method",
            "chm",
        ],
        "implausible",
    ),
    # a 1000 m pixel: no crown can be resolved
    "kilometre_pixel_chm": lambda p: (
        [str(_chm(p, _heights(), "km.tif", ps=1000.0)), "-o", "out.csv", "--method", "chm"],
        "too coarse",
    ),
    # a crown range that is 60 000 pixels wide at 5 cm pixels
    "absurd_diameter": lambda p: (
        [str(_rgb(p)), "-o", "out.csv", "--diameter", "0.5:3000"],
        "pixels",
    ),
    # a height model at 1 mm pixels: crown windows of tens of thousands of pixels
    "millimetre_pixel_chm": lambda p: (
        [str(_chm(p, _heights(), "mm.tif", ps=0.001)), "-o", "out.csv", "--method", "chm"],
        "too large",
    ),
}


_CHILD = r"""
import contextlib, io, json, resource, sys
cap = int(sys.argv[1])
resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
from ecoscan.cli import main
out = {}
for name, argv in json.loads(sys.argv[2]).items():
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        try:
            code = main(argv)
        except MemoryError:
            code = "MemoryError"
    out[name] = [code, err.getvalue()]
print(json.dumps(out))
"""


@pytest.fixture(scope="module")
def outcomes(tmp_path_factory):
    """Run every case (and one good model) in one capped child process."""
    import json

    folder = tmp_path_factory.mktemp("guards")
    runs, words = {}, {}
    for name, make in CASES.items():
        sub = folder / name
        sub.mkdir()
        argv, words[name] = make(sub)
        runs[name] = [*argv[:2], str(sub / "out.csv"), *argv[3:]] if argv[1] == "-o" else argv
    good = _chm(folder, _heights(), "ok.tif", ps=0.25)
    runs["good"] = [str(good), "-o", str(folder / "good.csv"), "--method", "chm", "--quiet"]
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    proc = subprocess.run(
        [
            sys.executable,
            "-c",
            _CHILD,
            str(CAP_BYTES),
            json.dumps({k: ["detect", *v] for k, v in runs.items()}),
        ],
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
    )
    assert proc.returncode == 0, proc.stderr
    return folder, words, json.loads(proc.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_input_exits_2_under_a_memory_cap(case, outcomes):
    folder, words, res = outcomes
    code, stderr = res[case]
    err = stderr.strip().splitlines()
    assert code == 2, stderr
    assert len(err) == 1 and err[0].startswith("error: ")
    assert words[case] in err[0]
    assert not (folder / case / "out.csv").exists()


def test_a_real_height_model_still_runs_under_the_cap(outcomes):
    # the cap is not what makes the bad cases fail: a plausible model runs under it
    folder, _words, res = outcomes
    code, stderr = res["good"]
    assert code == 0, stderr
    assert (folder / "good.csv").exists()
