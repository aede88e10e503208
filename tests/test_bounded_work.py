"""Worst cases of issue 11 under a memory limit: refused before allocating, not after.

Each case runs in a subprocess whose address space is capped with ``resource.setrlimit``
(RLIMIT_AS); the same process first checks that the cap is real (a 4 GB array fails).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest
from error_cases import UTM, make_base

LIMIT = 3 * 1024**3  # 3 GiB of address space: numpy, GDAL and PROJ fit well within it

RUNNER = textwrap.dedent(
    """
    import resource, sys
    resource.setrlimit(resource.RLIMIT_AS, ({limit}, {limit}))
    import numpy as np
    try:
        np.ones(4 * 1024**3 // 8)
    except MemoryError:
        pass
    else:
        sys.exit(99)  # the limit is not in force: the test would prove nothing
    from ecoscan.cli import main
    sys.exit(main({argv!r}))
    """
)


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    folder = tmp_path_factory.mktemp("bounded")
    make_base(folder)
    # a 1 km square plot: --quadrat 0.03 would be 1.1e9 quadrats
    x0, y0 = 512_000.0, 5_210_000.0
    ring = [[x0, y0], [x0 + 1000, y0], [x0 + 1000, y0 + 1000], [x0, y0 + 1000], [x0, y0]]
    import json

    doc = {
        "type": "FeatureCollection",
        "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
        "features": [
            {
                "type": "Feature",
                "properties": {"plot_id": "big"},
                "geometry": {"type": "Polygon", "coordinates": [ring]},
            }
        ],
    }
    (folder / "big.geojson").write_text(json.dumps(doc))
    return folder


def _run(argv, cwd):
    code = RUNNER.format(limit=LIMIT, argv=argv)
    env = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "PATH": "/usr/bin:/bin"}
    return subprocess.run(
        [sys.executable, "-c", code], cwd=cwd, capture_output=True, text=True, timeout=300,
        env=env,
    )  # fmt: skip


@pytest.mark.parametrize(
    ("extra", "says"),
    [
        (["--quadrat", "0.03"], "--quadrat 0.03 m makes"),
        (["--simulations", "5000000"], "99999"),
    ],
)
def test_worst_cases_refused_within_the_memory_limit(base, tmp_path, extra, says):
    argv = ["analyse", str(base / "plants.csv"), "--plots", str(base / "big.geojson"),
            "--crs", UTM, "-o", str(tmp_path / "r"), "--quiet", *extra]  # fmt: skip
    res = _run(argv, tmp_path)
    assert res.returncode == 2, res.stderr
    assert says in res.stderr and "MemoryError" not in res.stderr
    assert not (tmp_path / "r").exists()
