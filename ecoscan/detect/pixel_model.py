"""Plant layers for calibrated detection: simple per-pixel layers and a pixel classifier.

A calibrated detector turns the raster's bands into one *plant layer*, bright where plants
are, and feeds it to the same difference-of-Gaussians blob pyramid as the default detector
(:mod:`ecoscan.detect.blobs`). The layer is either

* a **simple layer** computed pixel by pixel from the bands: Excess Green (Woebbecke et al.
  1995), NDVI (Rouse et al. 1974), darkness (minus the mean of the bands: dark crowns on a
  pale ground) or brightness (the mean of the bands: pale crowns on a dark ground); or
* the **plant probability** of a random forest (Breiman 2001, Machine Learning 45: 5–32;
  scikit-learn's ``RandomForestClassifier``) on multi-scale pixel features (Gaussian
  smoothing, gradient magnitude and Hessian eigenvalues at several scales,
  :func:`skimage.feature.multiscale_basic_features`) of a few colour channels.

Everything here works on an array of band values and is local: a pixel's layer value
depends only on pixels within :attr:`PlantLayer.halo_px` of it, so tiles with that much
overlap give the same layer as the whole raster.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import Any

import numpy as np

from ecoscan.detect.indices import excess_green, ndvi

__all__ = [
    "SIMPLE_LAYERS",
    "FeatureSpec",
    "PlantLayer",
    "available_layers",
    "pixel_features",
    "simple_layer",
]

#: Simple layers, in the order they are tried, with the band names each needs.
SIMPLE_LAYERS: dict[str, tuple[str, ...]] = {
    "exg": ("red", "green", "blue"),
    "ndvi": ("red", "nir"),
    "darkness": (),
    "brightness": (),
}

#: Rows computed at once by :func:`pixel_features` (memory follows it, not the window).
CHUNK_ROWS = 256


def available_layers(band_names: tuple[str, ...]) -> list[str]:
    """Simple layers that the named bands allow.

    Parameters
    ----------
    band_names : tuple of str
        Names of the bands read, in order (``red``, ``green``, ``blue``, ``nir``, or
        ``bandN`` for unnamed bands).

    Returns
    -------
    list of str

    Examples
    --------
    >>> available_layers(("red", "green", "blue"))
    ['exg', 'darkness', 'brightness']
    """
    have = set(band_names)
    return [k for k, need in SIMPLE_LAYERS.items() if set(need) <= have]


def simple_layer(data: np.ndarray, band_names: tuple[str, ...], layer: str) -> np.ndarray:
    """One simple plant layer from band values, bright where plants are.

    Parameters
    ----------
    data : numpy.ndarray
        Shape (bands, rows, columns), band values in the order of ``band_names``.
    band_names : tuple of str
        Name of each band.
    layer : str
        ``exg``, ``ndvi``, ``darkness`` or ``brightness``.

    Returns
    -------
    numpy.ndarray
        float32, shape (rows, columns).

    Examples
    --------
    >>> d = np.array([[[10.0]], [[30.0]], [[20.0]]])
    >>> float(simple_layer(d, ("red", "green", "blue"), "brightness")[0, 0])
    20.0
    """
    idx = {n: i for i, n in enumerate(band_names)}
    if layer == "exg":
        return excess_green(data[idx["red"]], data[idx["green"]], data[idx["blue"]])
    if layer == "ndvi":
        return ndvi(data[idx["red"]], data[idx["nir"]])
    mean = np.mean(np.asarray(data, np.float32), axis=0, dtype=np.float32)
    if layer == "darkness":
        return -mean
    if layer == "brightness":
        return mean
    raise ValueError(f"unknown layer {layer!r}")


@dataclass(frozen=True)
class FeatureSpec:
    """How pixel features are computed for the classifier.

    Attributes
    ----------
    sigma_min, sigma_max : float
        Smallest and largest Gaussian scale, pixels.
    num_sigma : int
        Scales between them (log-spaced).
    brightness_scale : float
        Band value mapped to brightness 1 (the 99th percentile of the training pixels'
        band means), so that channels have comparable ranges.
    """

    sigma_min: float
    sigma_max: float
    num_sigma: int
    brightness_scale: float

    @property
    def halo_px(self) -> int:
        """How far (pixels) the features reach: Gaussians cut at 4 sigma, plus derivatives."""
        return math.ceil(4.0 * self.sigma_max) + 3


def _channels(data: np.ndarray, band_names: tuple[str, ...], spec: FeatureSpec) -> np.ndarray:
    """Colour channels for the features: chromatic coordinates, brightness, NDVI if known.

    Returns shape (rows, columns, channels), float32.
    """
    d = np.asarray(data, np.float32)
    total = d.sum(axis=0)
    safe = np.where(total > 0, total, 1.0).astype(np.float32)
    chans = [d[i] / safe for i in range(d.shape[0] - 1)]  # the last is 1 minus the others
    chans.append(total / (d.shape[0] * np.float32(spec.brightness_scale)))
    if "red" in band_names and "nir" in band_names:
        chans.append(simple_layer(d, band_names, "ndvi"))
    return np.stack(chans, axis=-1)


def pixel_features(
    data: np.ndarray,
    band_names: tuple[str, ...],
    spec: FeatureSpec,
    rows: slice | None = None,
) -> np.ndarray:
    """Multi-scale features of the pixels of some rows of a window.

    Parameters
    ----------
    data : numpy.ndarray
        Shape (bands, rows, columns): band values of the whole window.
    band_names : tuple of str
        Name of each band.
    spec : FeatureSpec
        Scales and channel scaling.
    rows : slice, optional
        Rows wanted (default all). Features are computed on these rows plus a halo, so the
        result equals that of the whole window.

    Returns
    -------
    numpy.ndarray
        float32, shape (rows, columns, features).

    Examples
    --------
    >>> spec = FeatureSpec(1.0, 2.0, 2, 255.0)
    >>> d = np.random.default_rng(0).uniform(0, 255, (3, 20, 20))
    >>> pixel_features(d, ("red", "green", "blue"), spec).shape
    (20, 20, 24)
    """
    from skimage.feature import multiscale_basic_features

    h = data.shape[1]
    rows = rows or slice(0, h)
    a = max(0, rows.start - spec.halo_px)
    b = min(h, rows.stop + spec.halo_px)
    ch = _channels(data[:, a:b], band_names, spec)
    f = multiscale_basic_features(
        ch,
        intensity=True,
        edges=True,
        texture=True,
        sigma_min=spec.sigma_min,
        sigma_max=spec.sigma_max,
        num_sigma=spec.num_sigma,
        channel_axis=-1,
    )
    return np.asarray(f[rows.start - a : rows.stop - a], np.float32)


def forest_threads() -> int:
    """Threads for the random forest: at most two, never more than the cores available."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        cores = os.cpu_count() or 1
    return max(1, min(2, cores))


def predict_probability(
    forest: Any,
    data: np.ndarray,
    band_names: tuple[str, ...],
    spec: FeatureSpec,
    fold_of_row: np.ndarray | None = None,
    forests: list | None = None,
) -> np.ndarray:
    """Plant probability of every pixel of a window, computed in row chunks.

    Parameters
    ----------
    forest : sklearn.ensemble.RandomForestClassifier or None
        Trained on labels 0 (ground) and 1 (plant).
    data : numpy.ndarray
        Shape (bands, rows, columns).
    band_names : tuple of str
    spec : FeatureSpec
    fold_of_row : numpy.ndarray of int, optional
        Shape (rows, columns): which of ``forests`` predicts each pixel (cross-validation).
    forests : list, optional
        One forest per fold, used with ``fold_of_row``.

    Returns
    -------
    numpy.ndarray
        float32 probabilities (a regressor's predictions), shape (rows, columns).
    """
    _nb, h, w = data.shape
    out = np.empty((h, w), np.float32)
    for r0 in range(0, h, CHUNK_ROWS):
        r1 = min(h, r0 + CHUNK_ROWS)
        f = pixel_features(data, band_names, spec, slice(r0, r1))
        f = f.reshape(-1, f.shape[-1])
        if fold_of_row is None:
            out[r0:r1] = _proba(forest, f).reshape(r1 - r0, w)
        else:
            part = np.empty(f.shape[0], np.float32)
            which = fold_of_row[r0:r1].ravel()
            for k in np.unique(which):
                sel = which == k
                part[sel] = _proba(forests[k], f[sel])
            out[r0:r1] = part.reshape(r1 - r0, w)
    return out


def _proba(forest: Any, x: np.ndarray) -> np.ndarray:
    if x.shape[0] == 0:
        return np.empty(0, np.float32)
    if not hasattr(forest, "predict_proba"):  # a regressor (the centre map): its prediction
        from threadpoolctl import threadpool_limits

        with threadpool_limits(limits=1):  # OpenMP threads spin on a shared machine
            return np.asarray(forest.predict(x), np.float32)
    p = forest.predict_proba(x)
    col = list(forest.classes_).index(1) if 1 in forest.classes_ else None
    if col is None:
        return np.zeros(x.shape[0], np.float32)
    return p[:, col].astype(np.float32)


@dataclass(frozen=True)
class PlantLayer:
    """The plant layer of a calibrated detector: band values in, layer out.

    Instances are picklable and carry no open files, so tile workers can use them.

    Attributes
    ----------
    kind : str
        ``layer`` (a simple layer), ``classifier`` (random-forest probability, plus
        ``centre_weight`` times the centre map when that is set) or ``centres`` (a
        regressor's crown-centre map alone, :mod:`ecoscan.detect.centres`).
    layer : str
        Simple layer name (``exg``, ``ndvi``, ``darkness``, ``brightness``),
        ``probability`` or ``centre_map``.
    band_names : tuple of str
        Name of each band read, in order.
    spec : FeatureSpec or None
        Classifier features.
    forest : object or None
        The trained classifier.
    centre_model : object or None
        The crown-centre regressor.
    centre_spec : FeatureSpec or None
        Its features.
    centre_weight : float
        Weight of the centre map added to the probability (kind ``classifier``).

    Examples
    --------
    >>> pl = PlantLayer("layer", "darkness", ("red", "green", "blue"))
    >>> float(pl(np.full((3, 2, 2), 9.0))[0, 0])
    -9.0
    """

    kind: str
    layer: str
    band_names: tuple[str, ...]
    spec: FeatureSpec | None = None
    forest: Any = None
    centre_model: Any = None
    centre_spec: FeatureSpec | None = None
    centre_weight: float = 0.0

    @property
    def halo_px(self) -> int:
        """Pixels beyond a tile's core that the layer needs (0 for simple layers)."""
        if self.kind == "layer":
            return 0
        halo = self.spec.halo_px if self.kind == "classifier" and self.spec else 0
        if self.centre_spec is not None and (self.kind == "centres" or self.centre_weight):
            halo = max(halo, self.centre_spec.halo_px)
        return halo

    def __call__(self, data: np.ndarray) -> np.ndarray:
        """The plant layer of band values shaped (bands, rows, columns)."""
        if self.kind == "layer":
            return simple_layer(data, self.band_names, self.layer)
        if self.kind == "centres":
            return predict_probability(self.centre_model, data, self.band_names, self.centre_spec)
        out = predict_probability(self.forest, data, self.band_names, self.spec)
        if self.centre_weight:
            out += np.float32(self.centre_weight) * predict_probability(
                self.centre_model, data, self.band_names, self.centre_spec
            )
        return out
