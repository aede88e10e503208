"""Real runs stopped mid-way (SIGINT, SIGTERM, SIGKILL), broken pipes and worker pools.

Each test starts ``python -m ecoscan`` in its own session, signals it while it works, and
checks the output folder (earlier results intact, no temporary debris) and that no process
of the session is left. Inputs are small so that each run lasts a few seconds at most.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from error_cases import UTM, X0, Y0, make_base
from rasterio.transform import from_origin

from ecoscan.lifecycle import clean_stale, output_folder, pid_alive
from ecoscan.synthetic import render_chm, write_geotiff


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    return make_base(tmp_path_factory.mktemp("lifecycle-base"))


def _session(pid: int) -> list[int]:
    """Processes of the session led by ``pid`` (the run and every worker it started)."""
    found = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            stat = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = stat.rsplit(")", 1)[1].split()
        if fields[0] != "Z" and int(fields[3]) == pid:  # state, ..., session id
            found.append(int(entry))
    return found


def _start(args: list[str], cwd: Path) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "ecoscan", *args],
        cwd=cwd,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
        # a shell starts background jobs with SIGINT ignored and children inherit that;
        # Python then installs no KeyboardInterrupt handler, so give the run the default
        preexec_fn=_default_sigint,
    )


def _default_sigint() -> None:
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _wait_for(cond, timeout: float = 60.0) -> None:
    end = time.monotonic() + timeout
    while not cond():
        if time.monotonic() > end:
            raise AssertionError("timed out waiting for the run to reach the point to stop it")
        time.sleep(0.05)


def _no_session_left(pid: int, timeout: float = 10.0) -> None:
    end = time.monotonic() + timeout
    while _session(pid) and time.monotonic() < end:
        time.sleep(0.1)
    assert _session(pid) == [], "processes of the run are still alive"


def _analyse_args(base: Path, out: str, sims: int = 5000) -> list[str]:
    return [
        "analyse",
        str(base / "plants.csv"),
        "--plots",
        str(base / "plots.geojson"),
        "--crs",
        UTM,
        "-o",
        out,
        "--simulations",
        str(sims),
        "--stop-after",
        "0",  # every simulation runs (sequential stopping would end the run too soon)
        "--overwrite",
        "--quiet",
    ]


@pytest.mark.parametrize(
    ("sig", "code", "word"),
    [(signal.SIGINT, 130, "interrupted"), (signal.SIGTERM, 143, "terminated")],
)
def test_signal_mid_run_keeps_earlier_results(base, tmp_path, sig, code, word):
    res = tmp_path / "res"
    res.mkdir()
    (res / "dispersion.csv").write_text("earlier results\n")
    proc = _start(_analyse_args(base, "res"), tmp_path)
    _wait_for(lambda: any(p.name.startswith(".res.tmp-ecoscan") for p in tmp_path.iterdir()))
    time.sleep(0.3)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == code, err
    assert err.strip() == f"error: {word}; no partial output was kept"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]  # no temporary folder left
    assert [p.name for p in res.iterdir()] == ["dispersion.csv"]
    assert (res / "dispersion.csv").read_text() == "earlier results\n"
    _no_session_left(proc.pid)


def test_sigkill_debris_is_removed_by_the_next_run(base, tmp_path):
    proc = _start(_analyse_args(base, "res"), tmp_path)
    _wait_for(lambda: any(p.name.startswith(".res.tmp-ecoscan") for p in tmp_path.iterdir()))
    proc.kill()
    proc.communicate(timeout=30)
    left = [p.name for p in tmp_path.iterdir()]
    assert left == [f".res.tmp-ecoscan-{proc.pid}"] and not (tmp_path / "res").exists()
    # the next run into the same folder recognises the debris (its writer is gone)
    again = _start(_analyse_args(base, "res", sims=19), tmp_path)
    _, err = again.communicate(timeout=120)
    assert again.returncode == 0, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]


def _big_chm(folder: Path) -> Path:
    rng = np.random.default_rng(3)
    shape = (640, 640)
    tops = rng.uniform(5, 635, size=(300, 2))
    chm = render_chm(tops, rng.uniform(6, 12, 300), np.full(300, 8.0), shape, rng)
    return write_geotiff(folder / "big.tif", chm, from_origin(X0, Y0 + 160, 0.25, 0.25), UTM)


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_killed_worker_pool_does_not_outlive_the_run(tmp_path, sig):
    raster = _big_chm(tmp_path)
    args = ["detect", str(raster), "--method", "chm", "--tile-size", "64", "--workers", "2"]
    proc = _start([*args, "-o", "trees.csv", "--quiet"], tmp_path)
    _wait_for(lambda: len(_session(proc.pid)) >= 3)  # the run, the fork server, a worker
    proc.send_signal(sig)
    # the pipes close (no worker holds them open) and no process of the run is left
    _, err = proc.communicate(timeout=30)
    assert proc.returncode == (143 if sig == signal.SIGTERM else -signal.SIGKILL), err
    assert "Traceback" not in err
    _no_session_left(proc.pid)
    assert not (tmp_path / "trees.csv").exists()
    if sig == signal.SIGTERM:
        assert not [p for p in tmp_path.iterdir() if ".tmp-ecoscan" in p.name]


def test_broken_pipe_exits_quietly(base, tmp_path):
    cmd = [sys.executable, "-m", "ecoscan", *_analyse_args(base, "res", sims=19)]
    proc = subprocess.Popen(cmd, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()  # the reader went away, as with `| head` after its lines
    err = proc.stderr.read().decode()
    proc.wait(timeout=120)
    assert proc.returncode == 141 and err == ""
    assert (tmp_path / "res" / "dispersion.csv").exists()  # the results were complete


def test_ctrl_c_during_start_up_prints_one_line(tmp_path):
    proc = _start(["analyse", "x.csv", "--plots", "p.gpkg", "-o", "r"], tmp_path)
    time.sleep(0.4)  # still importing numpy, rasterio and the command modules
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert "Traceback" not in err
    assert len(err.strip().splitlines()) == 1 and err.startswith("error: ")


def test_output_folder_swaps_whole_and_cleans_up_on_error(tmp_path):
    dest = tmp_path / "res"
    dest.mkdir()
    (dest / "old.csv").write_text("old")
    with pytest.raises(RuntimeError), output_folder(dest, overwrite=True) as tmp:
        (tmp / "new.csv").write_text("new")
        raise RuntimeError("fails late")
    assert [p.name for p in tmp_path.iterdir()] == ["res"]
    assert [p.name for p in dest.iterdir()] == ["old.csv"]
    with output_folder(dest, overwrite=True) as tmp:
        (tmp / "new.csv").write_text("new")
    assert [p.name for p in dest.iterdir()] == ["new.csv"]
    assert [p.name for p in tmp_path.iterdir()] == ["res"]


def test_clean_stale_spares_live_writers(tmp_path):
    live = tmp_path / f".a.tmp-ecoscan-{os.getppid()}-x.csv"  # our parent is alive
    dead = tmp_path / ".a.tmp-ecoscan-999999999-x.csv"
    other = tmp_path / ".hidden-but-not-ours.csv"
    for p in (live, dead, other):
        p.write_text("x")
    assert pid_alive(os.getppid()) and not pid_alive(999_999_999)
    assert clean_stale(tmp_path) == [dead]
    assert live.exists() and other.exists()
