"""Detection of every raster of a survey, with the rerun cache.

Each raster is detected from its manifest entry (header opened once, plots already in its
CRS). The detections are kept in memory as the points table stores them (millimetre
coordinates, attributes as written: :func:`ecoscan.vector.as_stored`), so a fresh run and a
rerun that takes them from the previous run's tables analyse the same numbers and write
byte-identical tables. The files ``points/NAME.csv`` / ``.gpkg`` are outputs only; the one
thing that reads them is the rerun cache, deliberately, when it reuses a previous run's
detections.
"""

from __future__ import annotations

import hashlib
import logging
import shutil
from dataclasses import dataclass
from pathlib import Path

from ecoscan.execution import Executor
from ecoscan.io.outputs import write_text
from ecoscan.io.vector import as_stored, points_csv_text, read_points, sidecar_prj, write_points
from ecoscan.model.notes import Note
from ecoscan.model.points import PointSet
from ecoscan.survey.cache import is_fresh, load_done, mark_done, settings_key, stat_stamp
from ecoscan.survey.manifest import RasterInput
from ecoscan.survey.model import slug

log = logging.getLogger("ecoscan")

__all__ = ["Detection", "cache_key", "detect_all", "detect_one"]

#: Version of what ``points/NAME.key.json`` records (2: notes as records with a code).
CACHE_FORMAT = 2


@dataclass
class Detection:
    """One raster's detections as stored, and how they were made."""

    points: PointSet  # the raster's own metric CRS, one row per plant and plot
    method: str
    notes: list[Note]
    cached: bool
    pixel_size_m: float
    detection: dict


def cache_key(item: RasterInput, plots_sha256: str) -> str:
    """The rerun cache's key of one raster: raster, plots, detector settings and file.

    Examples
    --------
    >>> key = cache_key(manifest.rasters[0], manifest.plots.sha256)  # doctest: +SKIP
    >>> len(key)  # doctest: +SKIP
    64
    """
    from ecoscan.detect import DetectionSettings

    settings = DetectionSettings.from_mapping(item.entry.detect)
    return settings_key(
        raster=item.file.sha256,
        plots=plots_sha256,
        detect=settings.to_dict(),
        # a calibrated detector's file (its TOML records its model file's hash)
        detector=item.detector_sha256,
        cache_format=CACHE_FORMAT,
    )


def _reuse(item: RasterInput, key: str, pts_dir: Path, previous: Path | None) -> Detection | None:
    """The previous run's detections when their key and files are unchanged, else None."""
    if previous is None:
        return None
    stem = slug(item.entry.name)
    old = previous / "points"
    names = [f"{stem}.gpkg", f"{stem}.csv"]
    if not is_fresh(old / f"{stem}.key.json", key, [old / n for n in names]):
        return None
    pts_dir.mkdir(parents=True, exist_ok=True)
    for name in (*names, f"{stem}.prj", f"{stem}.key.json"):
        if (old / name).exists():
            shutil.copy2(old / name, pts_dir / name)
    info = load_done(pts_dir / f"{stem}.key.json")
    # the cache's purpose: the previous run's table is read instead of detecting again
    pts = read_points(pts_dir / f"{stem}.csv", allow_empty=True)
    pts.notes = []  # the detection's notes come with it (below), not from reading its table
    log.info(
        "reused detection for %s (raster, plots and detector settings unchanged)",
        item.entry.path.name,
    )
    return Detection(
        pts,
        info.get("method", ""),
        Note.many(info.get("notes", [])),
        True,
        float(info.get("pixel_size_m", float("nan"))),
        info.get("detection", {}),
    )


def detect_one(
    item: RasterInput,
    out: Path,
    plots_sha256: str,
    executor: Executor,
    previous: Path | None = None,
) -> Detection:
    """Detect the plants of one raster (or reuse the previous run's) and write its tables.

    Parameters
    ----------
    item : RasterInput
        The raster's manifest entry.
    out : pathlib.Path
        The output folder being built.
    plots_sha256 : str
        SHA-256 of the plots file (part of the cache key).
    executor : Executor
        Where the tiles run.
    previous : pathlib.Path, optional
        The previous run's folder, for the rerun cache.

    Returns
    -------
    Detection
    """
    from ecoscan.detect import DetectionSettings, detect_raster, detection_metadata

    pts_dir = out / "points"
    stem = slug(item.entry.name)
    key = cache_key(item, plots_sha256)
    again = _reuse(item, key, pts_dir, previous)
    if again is not None:
        return again
    log.info("detecting plants in %s", item.entry.path.name)
    settings = DetectionSettings.from_mapping(item.entry.detect)
    res = detect_raster(
        item.entry.path, settings, plots=item.plots_native, executor=executor, info=item.info
    )
    detection = detection_metadata(res)
    gpkg, csv = pts_dir / f"{stem}.gpkg", pts_dir / f"{stem}.csv"
    write_points(res.points, gpkg)
    text = points_csv_text(res.points)
    if res.points.crs is not None:
        write_text(sidecar_prj(csv), res.points.crs.to_wkt())
    write_text(csv, text)
    notes = Note.many(res.notes)
    mark_done(
        pts_dir / f"{stem}.key.json",
        key,
        method=res.method,
        notes=[n.to_dict() for n in notes],
        pixel_size_m=float(res.pixel_size_m),
        raster=item.entry.path.name,
        # the CSV (which a rerun analyses) by the hash of the bytes written; the GeoPackage,
        # written by SQLite, by its size and modification time (no output is read back)
        files={
            csv.name: hashlib.sha256(text.encode("utf-8")).hexdigest(),
            gpkg.name: stat_stamp(gpkg),
        },
        detection=detection,
    )
    # analyse what the table holds (millimetres, attributes as written), so that a rerun
    # from the cache gives byte-identical tables
    pts = as_stored(res.points)
    pts.notes = []  # as from the cache: the notes travel in Detection.notes
    return Detection(pts, res.method, notes, False, float(res.pixel_size_m), detection)


def detect_all(
    rasters: list[RasterInput],
    out: Path,
    plots_sha256: str,
    previous: Path | None,
    ex: Executor,
) -> list[Detection]:
    """Detections of every raster, in survey order.

    On a local executor the rasters run one after the other, each over the local pool. On a
    distributed one up to :data:`ecoscan.execution.RASTERS_AT_ONCE` rasters choose their
    thresholds here and submit their tiles together, so the cluster works on the tiles of
    several rasters at once; the results are the same.
    """
    if not ex.distributed or len(rasters) == 1:
        return [detect_one(r, out, plots_sha256, ex, previous) for r in rasters]
    from concurrent.futures import ThreadPoolExecutor

    from ecoscan.execution import RASTERS_AT_ONCE

    with ThreadPoolExecutor(max_workers=min(RASTERS_AT_ONCE, len(rasters))) as pool:
        futures = [pool.submit(detect_one, r, out, plots_sha256, ex, previous) for r in rasters]
        try:
            return [f.result() for f in futures]
        except BaseException:
            # stop the other rasters' tiles; the pool waits for their threads to end, so no
            # file is written into the output folder after this run has failed
            for f in futures:
                f.cancel()
            ex.abort()
            raise
