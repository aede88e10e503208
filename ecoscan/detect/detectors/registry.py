"""The detectors by name: every module of :mod:`ecoscan.detect.detectors` that defines
``DETECTOR`` (a :class:`~ecoscan.detect.detectors.base.Detector`) is registered under its
``name``, found on first use. Adding a detector is adding one module."""

from __future__ import annotations

import importlib
import pkgutil
from typing import TYPE_CHECKING

import ecoscan.detect.detectors as _package
from ecoscan.detect.detectors.base import Detector

if TYPE_CHECKING:
    from ecoscan.detect.settings import DetectionSettings
    from ecoscan.io.raster import RasterInfo

__all__ = ["automatic", "detectors", "get_detector", "method_names", "overriding"]

_REGISTRY: dict[str, Detector] = {}


def detectors() -> dict[str, Detector]:
    """Every registered detector by name (modules imported on the first call).

    Examples
    --------
    >>> sorted(detectors())
    ['calibrated', 'chm', 'classes', 'imagery']
    """
    if not _REGISTRY:
        found: dict[str, Detector] = {}
        for mod in pkgutil.iter_modules(_package.__path__):
            module = importlib.import_module(f"{_package.__name__}.{mod.name}")
            det = getattr(module, "DETECTOR", None)
            if isinstance(det, Detector):
                if det.name in found:
                    raise RuntimeError(f"two detectors are named {det.name!r}")
                found[det.name] = det
        _REGISTRY.update(found)
    return _REGISTRY


def get_detector(name: str) -> Detector:
    """The detector registered as ``name``.

    Examples
    --------
    >>> get_detector("chm").method
    'chm'
    """
    try:
        return detectors()[name]
    except KeyError:
        raise ValueError(f"no detector is named {name!r}") from None


def _in_auto_order() -> list[Detector]:
    chosen = [d for d in detectors().values() if d.auto_order is not None]
    return sorted(chosen, key=lambda d: d.auto_order)


def method_names() -> tuple[str, ...]:
    """The ``--method`` values besides ``auto``, in the order of the automatic choice.

    Examples
    --------
    >>> method_names()
    ('imagery', 'chm', 'classes')
    """
    offered = [d for d in detectors().values() if d.on_method]
    order = {d.name: i for i, d in enumerate(_in_auto_order())}
    return tuple(d.name for d in sorted(offered, key=lambda d: order.get(d.name, len(order))))


def automatic(info: RasterInfo, settings: DetectionSettings) -> Detector:
    """The detector ``--method auto`` picks: the first in the automatic order that fits the
    raster, or the first of that order when none does."""
    ordered = _in_auto_order()
    return next((d for d in ordered if d.fits(info, settings)), ordered[0])


def overriding(settings: DetectionSettings) -> Detector | None:
    """The detector the settings name directly (e.g. a calibrated detector file), if any."""
    return next((d for d in detectors().values() if d.overrides(settings)), None)
