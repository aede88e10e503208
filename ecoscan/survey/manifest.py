"""The survey's inputs, each opened, hashed and reprojected once.

:func:`build_manifest` opens every raster's header once (its footprint tells which plots it
covers), reprojects those plots into the raster's CRS once (what detection works in), and
takes each input file's size and SHA-256 once. The rerun cache (its keys) and the
provenance (``run.json``) both read the manifest; nothing hashes or opens an input again.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import shapely

from ecoscan.errors import InputError
from ecoscan.io.raster import RasterInfo, open_raster, window_polygons
from ecoscan.io.vector import reproject_geometries
from ecoscan.model.plots import PlotLayer
from ecoscan.survey.cache import file_sha256
from ecoscan.survey.config import RasterEntry, SurveyConfig

__all__ = ["InputFile", "RasterInput", "SurveyManifest", "build_manifest"]


@dataclass(frozen=True)
class InputFile:
    """One input file: its role, path, size and SHA-256 (taken once).

    ``extra`` holds the role's own fields for ``run.json`` (a raster's name, site, date and
    detector settings; a covariate's name).
    """

    role: str
    path: Path
    bytes: int
    sha256: str
    extra: dict[str, Any] = field(default_factory=dict)

    @classmethod
    def of(cls, role: str, path: Path, **extra: Any) -> InputFile:
        """Stat and hash ``path`` (the one time it is read for that)."""
        return cls(role, Path(path), Path(path).stat().st_size, file_sha256(path), dict(extra))

    def record(self) -> dict[str, Any]:
        """The file's entry in ``run.json``."""
        head = {k: self.extra[k] for k in ("name", "site", "date") if k in self.extra}
        tail = {k: v for k, v in self.extra.items() if k not in head}
        return {
            "role": self.role,
            **head,
            "path": str(self.path),
            "bytes": self.bytes,
            "sha256": self.sha256,
            **tail,
        }


@dataclass(frozen=True)
class RasterInput:
    """One raster of the survey, opened once.

    Attributes
    ----------
    entry : RasterEntry
        Its ``[[raster]]`` entry.
    info : RasterInfo
        Its header (the one :func:`ecoscan.raster.open_raster` of the survey).
    file : InputFile
        Size and SHA-256.
    plots : PlotLayer
        The plots it covers, in the survey CRS.
    plots_native : PlotLayer
        The same plots in the raster's CRS, for detection (the same object when the CRSs
        agree or the raster has none).
    unsurveyed : list of str
        Ids of the plots it does not reach.
    detector_sha256 : str or None
        SHA-256 of a calibrated detector's file, when the entry uses one.
    """

    entry: RasterEntry
    info: RasterInfo
    file: InputFile
    plots: PlotLayer
    plots_native: PlotLayer
    unsurveyed: list[str]
    detector_sha256: str | None = None


@dataclass(frozen=True)
class SurveyManifest:
    """Every input of a survey run: the survey file, the plots, covariates and rasters."""

    survey: InputFile
    plots: InputFile
    layer: PlotLayer
    rasters: list[RasterInput]
    covariates: list[InputFile] = field(default_factory=list)

    def provenance(self) -> list[dict[str, Any]]:
        """The ``inputs`` list of ``run.json``: survey, plots, covariates, rasters."""
        files = [self.survey, self.plots, *self.covariates, *(r.file for r in self.rasters)]
        return [f.record() for f in files]


def _footprint(info: RasterInfo, survey_crs):
    """The raster's outline in the survey CRS (edges densified before reprojection)."""
    poly = window_polygons(info.transform, 0, 0, info.width, info.height)[0]
    if info.crs is not None and survey_crs is not None and info.crs != survey_crs:
        poly = reproject_geometries(
            np.array([poly.segmentize(max(poly.length / 400, 1e-9))]), info.crs, survey_crs
        )[0]
    return poly


def _subset(layer: PlotLayer, keep: np.ndarray, geoms=None, crs=None) -> PlotLayer:
    plots = [p for p, k in zip(layer.plots, keep, strict=True) if k]
    if geoms is not None:
        plots = [type(p)(p.plot_id, g, p.attrs) for p, g in zip(plots, geoms, strict=True)]
    return PlotLayer(plots, layer.crs if crs is None else crs, list(layer.notes))


def _raster_input(entry: RasterEntry, layer: PlotLayer, config: SurveyConfig) -> RasterInput:
    """Open one raster's header, find the plots it covers, reproject them once."""
    info = open_raster(entry.path, pixel_size_m=entry.detect.get("pixel_size_m"))
    touches = shapely.intersects(
        np.array([p.geometry for p in layer.plots]), _footprint(info, layer.crs)
    )
    if not np.any(touches):
        raise InputError(
            f"raster {entry.path.name} (line {entry.line} of {config.path.name}) covers "
            "none of the plots; check its CRS and the plots file"
        )
    gone = [p.plot_id for p, t in zip(layer.plots, touches, strict=True) if not t]
    plots = _subset(layer, touches)
    native = plots
    if not info.local and info.crs is not None and layer.crs is not None and info.crs != layer.crs:
        geoms = np.array([p.geometry for p in plots.plots], dtype=object)
        native = _subset(layer, touches, reproject_geometries(geoms, layer.crs, info.crs), info.crs)
    extra = {"name": entry.name, "site": entry.site, "date": entry.date, "detect": entry.detect}
    return RasterInput(
        entry, info, InputFile("raster", entry.path, 0, "", extra), plots, native, gone
    )


def build_manifest(config: SurveyConfig, layer: PlotLayer) -> SurveyManifest:
    """Open, check, reproject and hash every input of a survey once.

    Parameters
    ----------
    config : SurveyConfig
        The checked survey file.
    layer : PlotLayer
        Its plots, read once (:func:`ecoscan.vector.read_plots`), in the survey CRS.

    Returns
    -------
    SurveyManifest

    Raises
    ------
    InputError
        A raster that cannot be read or covers none of the plots. Every raster's header is
        checked before any file is hashed, so a bad raster is reported at once.

    Examples
    --------
    >>> from ecoscan.survey.config import load_survey  # doctest: +SKIP
    >>> cfg = load_survey("sample_rasters/survey.toml")  # doctest: +SKIP
    >>> m = build_manifest(cfg, read_plots(cfg.plots))  # doctest: +SKIP
    >>> [r.entry.name for r in m.rasters][:2]  # doctest: +SKIP
    ['tansy-spring', 'tansy-autumn']
    """
    from ecoscan.progress import progress

    planned = [
        _raster_input(e, layer, config)
        for e in progress(config.rasters, desc="rasters", unit="raster")
    ]
    detectors: dict[str, str] = {}
    rasters = []
    for r in planned:
        det = r.entry.detect.get("detector")
        if det and str(det) not in detectors:
            detectors[str(det)] = file_sha256(det)
        f = InputFile.of("raster", r.entry.path, **r.file.extra)
        rasters.append(
            RasterInput(
                r.entry,
                r.info,
                f,
                r.plots,
                r.plots_native,
                r.unsurveyed,
                detectors[str(det)] if det else None,
            )
        )
    covariates = [
        InputFile.of("covariate", Path(p), name=name)
        for name, p in (config.scales.get("covariates") or {}).items()
        if Path(p).is_file()
    ]
    return SurveyManifest(
        InputFile.of("survey", config.path),
        InputFile.of("plots", config.plots),
        layer,
        rasters,
        covariates,
    )
