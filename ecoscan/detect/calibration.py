"""Learn a detector from mapped plants: ``ecoscan calibrate``.

The user maps every plant inside one or more training plots. For each candidate plant
layer (the simple layers of :mod:`ecoscan.detect.pixel_model`, and, when no simple layer
separates plants well, a random-forest plant probability), calibration

1. estimates each mapped plant's crown diameter from the scale of the strongest blob at
   its position (scale selection, Lindeberg 1998) and sets the diameter range searched;
2. finds every blob candidate once, with a low floor, and scores a grid of the two blob
   thresholds (response and centre value) by matching the candidates to the mapped plants
   one-to-one within a tolerance (optimal assignment, :func:`ecoscan.stats.matching.
   match_points`), fold by fold;
3. cross-validates: for each fold, thresholds are chosen on the other folds and scored on
   this one; folds are whole training plots, or spatial blocks of a single plot, never
   random pixels (neighbouring pixels are strongly correlated, so a random-pixel split
   would report optimistic accuracy: Roberts et al. 2017, Ecography 40: 913–929).

The classifier is also cross-validated by fold: each fold's probabilities come from a
forest trained without that fold's pixels. The learnt route (the plant probability, or the
crown-centre peaks) is kept unless the best simple layer's cross-validated F1 beats it by
:data:`CLASSIFIER_MARGIN` and :data:`LEARNT_SE` standard errors of the paired fold-by-fold
differences (``ROUTE_LEAN = "learnt"``, :func:`_prefer_learnt`): with 20-40 mapped plants
a simple layer's small lead is noise, and on the scene suite it lost on new ground.

Touching crowns that merge in the plant probability (closed canopy) are split along the
valleys of the probability map (:mod:`ecoscan.detect.canopy`: watershed from h-maxima at
the smallest calibrated crown's scale; Gougeon 1995, Culvenor 2002). When the classifier's
blob detector scores below :data:`SPLIT_TRY_BELOW`, a grid of marker heights and least
region peaks is scored fold by fold the same way, and the split replaces the blobs when its
cross-validated F1 is higher by :data:`CLASSIFIER_MARGIN`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import shapely
from scipy.spatial import cKDTree

from ecoscan.detect.blobs import BlobScales, blob_scales, detect_blobs, prune_blobs
from ecoscan.detect.centres import WIDTH_SHARE
from ecoscan.detect.detector_file import CalibratedDetector
from ecoscan.detect.pixel_model import (
    FeatureSpec,
    available_layers,
    forest_threads,
    pixel_features,
    predict_probability,
    simple_layer,
)
from ecoscan.errors import InputError
from ecoscan.io.raster import RasterInfo, read_window
from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.stats.matching import match_points

__all__ = [
    "CLASSIFIER_MARGIN",
    "MIN_PLANTS",
    "CalibrationResult",
    "LayerScore",
    "band_names_for",
    "calibrate_detector",
    "fold_blocks",
]

#: Fewest mapped plants inside the training plots.
MIN_PLANTS = 20
#: The classifier is chosen only when its cross-validated F1 beats the best simple layer's
#: by at least this much (a simple layer is faster and easier to explain).
CLASSIFIER_MARGIN = 0.005
#: With classifier="auto", no classifier is trained when a simple layer reaches this F1,
#: pooled and in every fold (:func:`good_enough`). Pooled alone, one fold at 0.933 on the
#: suite's multispectral development seed 7 kept NDVI (test F1 0.953); the classifier it
#: then skipped scores 0.980 there.
GOOD_ENOUGH_F1 = 0.98
#: Percentile of the mapped crown diameters whose half is the matching tolerance when
#: diameters are given (:func:`tolerance_from_diameters`).
TOLERANCE_PERCENTILE = 5.0
#: Largest total of training-window pixels read (plausibility check before allocating).
MAX_TRAINING_PIXELS = 40_000_000
#: Pixels sampled for the classifier: inside crowns and on the ground.
N_PLANT_SAMPLES = 6000
N_GROUND_SAMPLES = 9000
#: Classifier labels, in crown radii from the nearest mapped plant: plant inside
#: PLANT_INNER, ground beyond GROUND_OUTER, unused between (crown rims). Measured on the
#: suite's dry-shrubs and closed-canopy styles, GROUND_OUTER 0.9 (rims as ground) did worse.
PLANT_INNER = 0.6
GROUND_OUTER = 1.3
#: Trees of the random forest (fitting and prediction time grow in proportion). Measured
#: on the suite: 40 trees lost the classifier on rocky-shrubland (test F1 0.994 -> 0.942).
N_TREES = 60
#: Trees of the first forest, whose map only gives crown sizes by scale selection when no
#: simple layer does. 30 trees cost the suite's dry-shrubs test F1 0.959 -> 0.915 (precision
#: 0.956 -> 0.878: other crown sizes, other labels, another classifier), so it keeps 60.
N_TREES_FIRST = 60
#: The classifier's blob detector scoring below this cross-validated F1 is compared with
#: the watershed crown split of the probability map (closed canopy).
SPLIT_TRY_BELOW = 0.95
#: Marker heights (h-maxima) and least region peaks tried for the split, probability units.
SPLIT_H_GRID = (0.02, 0.05, 0.1, 0.2)
SPLIT_PEAK_GRID = (0.2, 0.35, 0.5, 0.65)
#: Smoothing of the probability map (share of the smallest crown radius) and joining of a
#: crown's fragments (colour imagery only; :func:`ecoscan.detect.canopy.merge_fragments`),
#: chosen with h and the least peak by the same cross-validation.
SPLIT_SMOOTH_GRID = (0.35, 0.6)
SPLIT_JOIN_GRID = (False, True)
#: Runs that need a model file: the plant probability and the crown-centre map.
LEARNT_ROUTES = ("probability", "centre_map")
#: Crown-centre map (:mod:`ecoscan.detect.centres`), learnt when the classifier's blobs
#: score below SPLIT_TRY_BELOW: each plant's target radius is at least this share of the
#: distance to its nearest mapped neighbour; features reach this share of the median
#: spacing, with this many scales. Chosen on the suite's development seed 0 (closed canopy;
#: 0.4 / 0.4 / 6 scales: cross-validated peaks F1 0.69, the values here 0.70) and checked on
#: development seeds 7 and 11.
CENTRE_SPACING_SHARE = 0.5
CENTRE_SIGMA_SHARE = 0.5
CENTRE_NUM_SIGMA = 6
#: Weights of the centre map added to the plant probability before the crown split (0: the
#: probability alone); chosen with the split's other settings by cross-validation.
CENTRE_WEIGHT_GRID = (0.0, 0.5, 1.0)
#: Pixels sampled for the centre map: around each mapped plant (radius uniform in
#: 0 to CENTRE_SAMPLE_REACH crown radii, so every distance band gets the same number) and
#: uniform in the plots.
N_CENTRE_NEAR = 12000
N_CENTRE_UNIFORM = 6000
CENTRE_SAMPLE_REACH = 1.6
#: Boosting iterations and leaves of the centre-map regressor.
CENTRE_ITERATIONS = 150
#: Printed when the detector was learnt from one training plot (folds by spatial blocks of
#: it). Measured by the lead on 24 held-out scene-suite scenes (eight styles, seeds
#: 221-223, one corner plot of 12-15 %, positions only, 5 December 2026): the F1 on the
#: rest of each scene differed from the cross-validated F1 by -0.14 to +0.10, by more than
#: 0.05 on 6 of 24 (docs/detection.md, "Accuracy on the scene suite"). A plot in one corner
#: does not show all the ground a survey holds; common practice is to check on
#: independent ground.
ONE_PLOT_CAUTION = (
    "one training plot: its cross-validated F1 is a guide, not a guarantee; on ecoscan's "
    "synthetic test scenes the F1 on the rest of a scene differed from it by -0.14 to "
    "+0.10 (ground the plot does not show); before a survey, map a second plot and check "
    "the detector on it with ecoscan validate"
)
CENTRE_LEAVES = 31
#: Peak search grid: smoothing and least distance between crowns (shares of the smallest
#: calibrated crown radius), least peak (centre-map units, 1 = a mapped centre).
CENTRE_SMOOTH_GRID = (0.0, 0.25)
CENTRE_DISTANCE_GRID = (0.5, 0.8, 1.2)
CENTRE_PEAK_GRID = (0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5)
#: Blob thresholds can be chosen by the F1 of each grid cell's counts pooled with its
#: neighbours along both threshold axes, over this many cells; 1 (the default) is the plain
#: argmax of F1. Measured on the suite's development seeds (benchmarks/calibrate_choice.py),
#: pooling over 3 cells raised the cross-validated F1 of the plant probability's blobs on
#: closed canopy (seed 7: 0.800 -> 0.841), which then beat the crown split in the route
#: choice, and test F1 fell 0.908 -> 0.876; conifer pasture 0.967 -> 0.965, dry shrubs
#: unchanged. So it is off. The split's and centre peaks' coarse grids (4-7 least peaks)
#: are never pooled.
CHOICE_WIDTH = 1
#: Route choice: a more complex route (a simple layer < the plant probability's blobs <
#: their crown split; the centre peaks against the probability's route) must beat the
#: simpler one's cross-validated F1 by CLASSIFIER_MARGIN *and* by this many standard errors
#: of the fold-by-fold F1 differences (:func:`choice_noise`); 0 uses the margin alone.
#: Measured on the suite's development seeds (noise 0.008-0.045): at 1 it would switch
#: closed canopy seed 7 from the crown split (test F1 0.908) to the blobs (0.876) and
#: drop the classifier on JPEG and coarse seed 7, so it is off.
NOISE_SE = 0.0
#: Which way the choice between the best simple layer and the learnt route (the plant
#: probability's blobs or split, or the centre peaks) leans once the classifier has been
#: trained (:func:`_prefer_learnt`): ``simple`` (a learnt route must beat the simple layer
#: by CLASSIFIER_MARGIN and NOISE_SE standard errors) or ``learnt`` (the learnt route is
#: kept unless the simple layer beats it by CLASSIFIER_MARGIN and LEARNT_SE standard errors
#: of the paired fold differences).
ROUTE_LEAN = "learnt"
LEARNT_SE = 1.0


@dataclass(frozen=True)
class LayerScore:
    """Cross-validated accuracy of one candidate layer.

    Attributes
    ----------
    layer : str
    tp, fp, fn : int
        Pooled over the held-out folds.
    precision, recall, f1 : float
    fold_f1 : tuple of float
        F1 of each held-out fold (NaN when a fold has no plants and no detections).
    """

    layer: str
    tp: int
    fp: int
    fn: int
    precision: float
    recall: float
    f1: float
    fold_f1: tuple[float, ...]

    @classmethod
    def from_counts(cls, layer: str, pooled, fold_f1) -> LayerScore:
        """The score from pooled (true positive, false positive, false negative) counts.

        Examples
        --------
        >>> s = LayerScore.from_counts("exg", (8, 2, 0), [0.9])
        >>> (s.precision, s.recall, round(s.f1, 3))
        (0.8, 1.0, 0.889)
        """
        tp, fp, fn = (int(v) for v in pooled)
        return cls(
            layer,
            tp,
            fp,
            fn,
            tp / (tp + fp) if tp + fp else math.nan,
            tp / (tp + fn) if tp + fn else math.nan,
            _f1(tp, fp, fn),
            tuple(fold_f1),
        )

    def as_dict(self) -> dict:
        """Plain mapping for tables and the detector file."""
        return {
            "layer": self.layer,
            "tp": self.tp,
            "fp": self.fp,
            "fn": self.fn,
            "precision": round(self.precision, 4),
            "recall": round(self.recall, 4),
            "f1": round(self.f1, 4),
        }


@dataclass
class CalibrationResult:
    """What :func:`calibrate_detector` learnt.

    Attributes
    ----------
    detector : CalibratedDetector
        Ready for :func:`ecoscan.detect.detector_file.write_detector`.
    scores : list of LayerScore
        Every candidate layer tried, best first.
    chosen : LayerScore
    folds : str
        How folds were made (``plot`` or ``block``) and how many.
    tolerance_m : float
        Matching tolerance used for scoring.
    notes : list of str
    routes : dict of str to LayerScore
        Every route compared (each simple layer, ``probability blobs``, ``probability
        split``, ``centre peaks``) with its cross-validated score.
    route_detectors : dict of str to CalibratedDetector
        The detector each route of ``routes`` would write (for benchmarks that score every
        route on new ground; ``detector`` is one of them).
    """

    detector: CalibratedDetector
    scores: list[LayerScore]
    chosen: LayerScore
    folds: str
    tolerance_m: float
    notes: list[str] = field(default_factory=list)
    routes: dict[str, LayerScore] = field(default_factory=dict)
    route_detectors: dict[str, CalibratedDetector] = field(default_factory=dict)


@dataclass
class _Window:
    """A training plot's pixels (with a margin) and its mapped plants."""

    plot: int
    c0: int
    r0: int
    c1: int
    r1: int
    data: np.ndarray
    valid: np.ndarray
    poly_px: shapely.Geometry  # the plot in raster pixel coordinates
    ref: np.ndarray  # (n, 2) col, row
    ref_fold: np.ndarray
    fold_map: np.ndarray  # fold of every pixel of the window
    ref_index: np.ndarray  # position of each plant in the reference file


@dataclass
class _LayerRun:
    name: str
    score: LayerScore
    dmin_px: float
    dmax_px: float
    min_response: float
    min_value: float
    background: float
    ref_diam_px: np.ndarray
    split: dict = field(default_factory=dict)
    centres: dict = field(default_factory=dict)
    # the plant probability's own blobs and its best crown split, each cross-validated
    # (kept for the route choice and its report, whichever of them ``score`` holds)
    blob_score: LayerScore | None = None
    split_score: LayerScore | None = None
    split_found: dict = field(default_factory=dict)


def band_names_for(info: RasterInfo, spec: tuple[tuple[str, int], ...] = ()) -> tuple[str, ...]:
    """Name every data band: from ``--bands``, band descriptions or colour interpretation.

    Three or more unnamed bands are taken as red, green, blue, then ``bandN``.

    Parameters
    ----------
    info : RasterInfo
    spec : tuple of (name, band)
        Parsed ``--bands`` (see :func:`ecoscan.detect.settings.parse_band_spec`).

    Returns
    -------
    tuple of str
        One name per data band, in band order.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> info = SimpleNamespace(data_bands=(1, 2, 3, 4), descriptions=("", "", "", ""),
    ...                        colorinterp=("gray",) * 4)
    >>> band_names_for(info, (("blue", 1), ("green", 2), ("red", 3), ("nir", 4)))
    ('blue', 'green', 'red', 'nir')
    """
    names = {b: f"band{b}" for b in info.data_bands}
    given = {b: n for n, b in spec}
    known = ("red", "green", "blue", "nir")
    if given:
        for b, n in given.items():
            if b not in names:
                raise InputError(
                    f"--bands names band {b}, but the raster has bands "
                    f"{', '.join(map(str, info.data_bands))}"
                )
            names[b] = n
    else:
        for b, d, ci in zip(info.data_bands, info.descriptions, info.colorinterp, strict=True):
            if d in known:
                names[b] = d
            elif "infrared" in d or d == "nir":
                names[b] = "nir"
            elif ci in ("red", "green", "blue"):
                names[b] = ci
        if len(info.data_bands) >= 3 and not {"red", "green", "blue"} & set(names.values()):
            for b, n in zip(info.data_bands[:3], ("red", "green", "blue"), strict=True):
                names[b] = n
    out = tuple(names[b] for b in info.data_bands)
    dup = {n for n in out if out.count(n) > 1}
    if dup:
        raise InputError(f"two bands are both named {sorted(dup)[0]}; name each once with --bands")
    return out


def fold_blocks(
    bounds_px: tuple[float, float, float, float], col: np.ndarray, row: np.ndarray
) -> np.ndarray:
    """Spatial block (0–3) of pixel positions inside one training plot's bounding box.

    A plot about as wide as long is cut into 2 × 2 blocks at its middle; a long plot (aspect
    over 2) into four strips along its length. Positions beyond the box belong to the
    nearest block.

    Parameters
    ----------
    bounds_px : (col0, row0, col1, row1)
    col, row : numpy.ndarray

    Returns
    -------
    numpy.ndarray of int

    Examples
    --------
    >>> fold_blocks((0, 0, 10, 10), np.array([1, 9, 1, 9]), np.array([1, 1, 9, 9])).tolist()
    [0, 1, 2, 3]
    """
    c0, r0, c1, r1 = bounds_px
    w, h = max(c1 - c0, 1e-9), max(r1 - r0, 1e-9)
    col = np.asarray(col, float)
    row = np.asarray(row, float)
    if w > 2 * h:
        return np.clip(np.floor((col - c0) / (w / 4)), 0, 3).astype(np.int64)
    if h > 2 * w:
        return np.clip(np.floor((row - r0) / (h / 4)), 0, 3).astype(np.int64)
    return (2 * (row >= r0 + h / 2) + (col >= c0 + w / 2)).astype(np.int64)


def choice_noise(a: LayerScore, b: LayerScore) -> float:
    """Fold-to-fold noise of the difference between two routes' cross-validated F1.

    The folds are the same for every route, so the routes are compared fold by fold
    (paired): the standard error of the mean of the per-fold F1 differences,
    ``sd(d) / sqrt(k)`` over the k folds where both are defined (Student 1908, the paired
    comparison); 0 with fewer than two such folds.

    Parameters
    ----------
    a, b : LayerScore
        Scores from the same folds.

    Returns
    -------
    float

    Examples
    --------
    >>> a = LayerScore.from_counts("a", (36, 4, 4), [0.95, 0.85, 0.9, 0.9])
    >>> b = LayerScore.from_counts("b", (34, 6, 6), [0.85, 0.85, 0.85, 0.85])
    >>> round(choice_noise(a, b), 4)  # differences 0.1, 0, 0.05, 0.05
    0.0204
    """
    d = np.asarray(a.fold_f1, float) - np.asarray(b.fold_f1, float)
    d = d[np.isfinite(d)]
    if d.size < 2:
        return 0.0
    return float(np.std(d, ddof=1) / math.sqrt(d.size))


def good_enough(score: LayerScore) -> bool:
    """Whether a simple layer is good enough to skip the pixel classifier: its
    cross-validated F1 reaches :data:`GOOD_ENOUGH_F1` pooled *and* in every fold.

    A fold below it means the layer misses or adds plants somewhere in the training plots
    (a shaded corner, a darker patch of ground), which the pooled figure can hide when the
    other folds are perfect.

    Examples
    --------
    >>> good_enough(LayerScore.from_counts("ndvi", (52, 1, 1), [1.0, 1.0, 1.0, 0.93]))
    False
    >>> good_enough(LayerScore.from_counts("exg", (52, 1, 1), [1.0, 0.98, 0.99, 0.98]))
    True
    """
    folds = np.asarray(score.fold_f1, float)
    folds = folds[np.isfinite(folds)]
    return bool(
        score.f1 >= GOOD_ENOUGH_F1 and (folds.size == 0 or folds.min() >= GOOD_ENOUGH_F1)
    )


def want_classifier(classifier: str, best_simple: LayerScore | None) -> bool:
    """Whether calibration trains the pixel classifier.

    ``always``: yes; ``never``: no; ``auto``: yes, except, under ``ROUTE_LEAN = "simple"``,
    when the best simple layer is :func:`good_enough`. Under the ``learnt`` lean it is
    always trained: a simple layer perfect in every fold of a 12 % plot still lost on new
    ground (the suite's coarse development seeds 0 and 1001: Excess Green cross-validated
    0.996 and 0.993, test F1 0.978 and 0.977; the classifier, cross-validated the same,
    0.999 and 0.998).

    Examples
    --------
    >>> perfect = LayerScore.from_counts("exg", (99, 0, 0), [1.0] * 4)
    >>> want_classifier("never", None), want_classifier("always", perfect)
    (False, True)
    """
    if classifier != "auto":
        return classifier == "always"
    if best_simple is None or ROUTE_LEAN == "learnt":
        return True
    return not good_enough(best_simple)


def beats(complex_: LayerScore, simple: LayerScore, noise_se: float | None = None) -> bool:
    """Whether a more complex route's cross-validated F1 beats a simpler one's by more
    than :data:`CLASSIFIER_MARGIN` and ``noise_se`` (default :data:`NOISE_SE`) times
    :func:`choice_noise`.

    With 30-40 mapped plants, one plant moves a fold's F1 by 0.02-0.04, so a small lead of
    the complex route is as likely chance as skill; the simpler route is kept then.

    Examples
    --------
    >>> a = LayerScore.from_counts("a", (36, 4, 4), [0.95, 0.85, 0.9, 0.9])
    >>> b = LayerScore.from_counts("b", (34, 6, 6), [0.85, 0.85, 0.85, 0.85])
    >>> beats(a, b, 0.0), beats(a, b, 2.0), beats(a, b, 3.0)  # F1 0.9 against 0.85
    (True, True, False)
    """
    k = NOISE_SE if noise_se is None else noise_se
    gain = complex_.f1 - simple.f1
    if not math.isfinite(gain):
        return math.isfinite(complex_.f1) and not math.isfinite(simple.f1)
    return gain > max(CLASSIFIER_MARGIN, k * choice_noise(complex_, simple))


def _f1(tp: float, fp: float, fn: float) -> float:
    d = 2 * tp + fp + fn
    return 2 * tp / d if d > 0 else math.nan


def _to_pixels(info: RasterInfo, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    c, r = ~info.transform @ (x, y)
    return c - 0.5, r - 0.5


def _poly_to_pixels(info: RasterInfo, geom: shapely.Geometry) -> shapely.Geometry:
    inv = ~info.transform
    return shapely.transform(geom, lambda xy: np.column_stack(inv @ (xy[:, 0], xy[:, 1])) - 0.5)


# --- preparing the training windows --------------------------------------------------------


def _prepare(
    info: RasterInfo,
    reference: PointSet,
    plots: PlotLayer,
    names: tuple[str, str, str],
    margin_px: int,
) -> tuple[list[_Window], str, int, list[str]]:
    """The training windows (each plot's pixels with a margin, its plants and their folds),
    how folds are drawn (``plot`` or ``block``), the number of folds, and notes."""
    raster_name, ref_name, plots_name = names
    notes: list[str] = []
    ref_c, ref_r = _to_pixels(info, reference.x, reference.y)
    polys = _plot_polygons(info, plots, raster_name, plots_name, notes)
    owner = _plants_by_plot(polys, ref_c, ref_r, ref_name, plots_name)
    used = [i for i in range(len(polys)) if (owner == i).any() or polys[i].area > 0]
    fold_by = "plot" if len(used) >= 2 else "block"
    n_folds = min(5, len(used)) if fold_by == "plot" else 4
    boxes = _window_boxes(info, polys, used, margin_px, raster_name, plots_name)
    windows = []
    for k, (i, c0, r0, c1, r1) in enumerate(boxes):
        data, valid = read_window(info, tuple(info.data_bands), (c0, r0, c1, r1))
        sel = owner == i
        ref = np.column_stack([ref_c[sel], ref_r[sel]])
        rr, cc = np.mgrid[r0:r1, c0:c1]
        if fold_by == "plot":
            f = k % n_folds
            ref_fold = np.full(ref.shape[0], f, dtype=np.int64)
            fold_map = np.full((r1 - r0, c1 - c0), f, dtype=np.int64)
        else:
            bb = polys[i].bounds
            ref_fold = fold_blocks(bb, ref[:, 0], ref[:, 1])
            fold_map = fold_blocks(bb, cc, rr)
        windows.append(
            _Window(
                i,
                c0,
                r0,
                c1,
                r1,
                data,
                valid,
                polys[i],
                ref,
                ref_fold,
                fold_map,
                np.flatnonzero(sel),
            )
        )
    return windows, fold_by, n_folds, notes


def _plot_polygons(
    info: RasterInfo, plots: PlotLayer, raster_name: str, plots_name: str, notes: list[str]
) -> list[shapely.Geometry]:
    """Each training plot in raster pixel coordinates, cut to the raster."""
    frame = shapely.box(-0.5, -0.5, info.width - 0.5, info.height - 0.5)
    polys = []
    for p in plots.plots:
        g = _poly_to_pixels(info, p.geometry)
        if not shapely.intersects(g, frame):
            raise InputError(
                f"training plot {p.plot_id} in {plots_name} lies outside {raster_name}; "
                "check that the plots and the raster cover the same ground and CRS"
            )
        inside = shapely.intersection(g, frame)
        if inside.area < 0.999 * g.area:
            notes.append(
                f"training plot {p.plot_id} extends beyond {raster_name}; only its part "
                "inside the raster is used"
            )
        polys.append(inside)
    return polys


def _plants_by_plot(
    polys: list[shapely.Geometry],
    ref_c: np.ndarray,
    ref_r: np.ndarray,
    ref_name: str,
    plots_name: str,
) -> np.ndarray:
    """The plot holding each mapped plant (-1: none); refuses too few plants inside."""
    owner = np.full(ref_c.size, -1, dtype=np.int64)
    for i, g in enumerate(polys):
        hit = shapely.contains_xy(g, ref_c, ref_r) & (owner < 0)
        owner[hit] = i
    n_in = int((owner >= 0).sum())
    if n_in == 0:
        raise InputError(
            f"no point of {ref_name} lies inside a training plot of {plots_name}; map the "
            "plants inside the plots (and check both files use the same CRS)"
        )
    if n_in < MIN_PLANTS:
        raise InputError(
            f"only {n_in} plant(s) of {ref_name} lie inside the training plots of "
            f"{plots_name}; map at least {MIN_PLANTS} plants (more plots or larger ones)"
        )
    return owner


def _window_boxes(
    info: RasterInfo,
    polys: list[shapely.Geometry],
    used: list[int],
    margin_px: int,
    raster_name: str,
    plots_name: str,
) -> list[tuple[int, int, int, int, int]]:
    """(plot, c0, r0, c1, r1) of each training window; refuses too many pixels in all."""
    total_px = 0
    boxes = []
    for i in used:
        b0, b1, b2, b3 = polys[i].bounds
        c0 = max(0, math.floor(b0) - margin_px)
        r0 = max(0, math.floor(b1) - margin_px)
        c1 = min(info.width, math.ceil(b2) + 1 + margin_px)
        r1 = min(info.height, math.ceil(b3) + 1 + margin_px)
        boxes.append((i, c0, r0, c1, r1))
        total_px += (c1 - c0) * (r1 - r0)
    if total_px > MAX_TRAINING_PIXELS:
        raise InputError(
            f"the training plots of {plots_name} span {total_px / 1e6:.0f} million pixels of "
            f"{raster_name} (with margins); map smaller plots (at most "
            f"{MAX_TRAINING_PIXELS / 1e6:.0f} million pixels)"
        )
    return boxes


# --- scoring a layer -----------------------------------------------------------------------


def _candidates(
    maps: list[np.ndarray],
    windows: list[_Window],
    scales: BlobScales,
    floor: float,
    background: float,
) -> list[dict[str, np.ndarray]]:
    out = []
    for lay, w in zip(maps, windows, strict=True):
        found = detect_blobs(
            lay, scales, floor, -np.inf, w.valid, origin=(w.c0, w.r0), background=background
        )
        found["fold"] = np.where(
            shapely.contains_xy(w.poly_px, found["col"], found["row"]),
            w.fold_map[
                np.clip(np.round(found["row"]).astype(int) - w.r0, 0, w.fold_map.shape[0] - 1),
                np.clip(np.round(found["col"]).astype(int) - w.c0, 0, w.fold_map.shape[1] - 1),
            ],
            -1,
        )
        out.append(found)
    return out


def _strongest_near(
    cands: list[dict[str, np.ndarray]], windows: list[_Window], tol_px: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sigma, response and value of the strongest candidate within tol of each plant."""
    sig, resp, val = [], [], []
    for c, w in zip(cands, windows, strict=True):
        n = w.ref.shape[0]
        s = np.full(n, np.nan)
        r = np.full(n, np.nan)
        v = np.full(n, np.nan)
        if c["col"].size:
            tree = cKDTree(np.column_stack([c["col"], c["row"]]))
            for j, idx in enumerate(tree.query_ball_point(w.ref, tol_px)):
                if idx:
                    best = idx[int(np.argmax(c["response"][idx]))]
                    s[j], r[j], v[j] = c["sigma"][best], c["response"][best], c["value"][best]
        sig.append(s)
        resp.append(r)
        val.append(v)
    return np.concatenate(sig), np.concatenate(resp), np.concatenate(val)


def _grid_counts(
    cands: list[dict[str, np.ndarray]],
    windows: list[_Window],
    n_folds: int,
    resp_grid: np.ndarray,
    val_grid: np.ndarray,
    tol_px: float,
) -> np.ndarray:
    """tp, fp, fn per (response threshold, value threshold, fold)."""
    counts = np.zeros((resp_grid.size, val_grid.size, n_folds, 3), dtype=np.int64)
    for c, w in zip(cands, windows, strict=True):
        radius = math.sqrt(2.0) * c["sigma"]
        # many grid cells keep the same candidates: prune and match each distinct set once
        pruned: dict[bytes, np.ndarray] = {}
        matched: dict[tuple[int, bytes], tuple[int, int, int]] = {}
        for i, tr in enumerate(resp_grid):
            for j, tv in enumerate(val_grid):
                ok = (c["response"] >= tr) & (c["value"] >= tv)
                idx = np.flatnonzero(ok)
                key = idx.tobytes()
                if key not in pruned:
                    pruned[key] = idx[
                        prune_blobs(c["col"][idx], c["row"][idx], radius[idx], c["response"][idx])
                    ]
                keep = pruned[key]
                det_fold = c["fold"][keep]
                for f in range(n_folds):
                    mine = keep[det_fold == f]
                    mkey = (f, mine.tobytes())
                    if mkey not in matched:
                        a = np.column_stack([c["col"][mine], c["row"][mine]])
                        b = w.ref[w.ref_fold == f]
                        tp = match_points(a, b, tol_px).n_matched if a.size and b.size else 0
                        matched[mkey] = (tp, a.shape[0] - tp, b.shape[0] - tp)
                    counts[i, j, f] += matched[mkey]
    return counts


def _cross_validate(
    counts: np.ndarray, ordered: tuple[int, ...] = (0, 1), width: int | None = None
) -> tuple[np.ndarray, list[float], tuple[int, int]]:
    """Held-out counts with thresholds chosen on the other folds, and the all-fold choice.

    ``counts`` holds tp, fp, fn per (grid row, grid column, fold). Each choice maximises
    :func:`_smoothed_f1` of the summed counts along the ``ordered`` grid axes (those whose
    cells are thresholds in increasing order), over ``width`` cells
    (:data:`CHOICE_WIDTH` by default; 1 is the plain argmax).
    """
    width = CHOICE_WIDTH if width is None else width
    n_folds = counts.shape[2]
    total = counts.sum(axis=2)
    pooled = np.zeros(3, dtype=np.int64)
    fold_f1 = []
    for f in range(n_folds):
        f1 = _smoothed_f1(total - counts[:, :, f], ordered, width)
        i, j = np.unravel_index(int(np.nanargmax(f1)), f1.shape)
        held = counts[i, j, f]
        pooled += held
        fold_f1.append(_f1(*held))
    f1_all = _smoothed_f1(total, ordered, width)
    best = np.unravel_index(int(np.nanargmax(f1_all)), f1_all.shape)
    return pooled, fold_f1, (int(best[0]), int(best[1]))


def _smoothed_f1(c: np.ndarray, ordered: tuple[int, ...], width: int) -> np.ndarray:
    """F1 of each grid cell's counts summed with its neighbours along the ``ordered`` axes
    (a moving window of ``width`` cells; edge cells repeat themselves).

    With a few dozen mapped plants, each plant moves a cell's F1 by 0.02-0.04, so the plain
    argmax picks an isolated lucky cell as readily as the middle of a plateau; pooling the
    neighbours' counts prefers thresholds whose neighbours also score well (a plateau is
    less likely to be a chance fit than a spike).

    Examples
    --------
    >>> c = np.zeros((5, 1, 3))
    >>> c[:, 0] = [[8, 2, 2], [10, 0, 0], [5, 5, 5], [9, 1, 1], [9, 1, 1]]
    >>> int(np.argmax(_smoothed_f1(c, (0,), 1)[:, 0]))  # the lone spike
    1
    >>> int(np.argmax(_smoothed_f1(c, (0,), 3)[:, 0]))  # the plateau
    4
    """
    c = np.asarray(c, float)
    if width > 1:
        from scipy.ndimage import uniform_filter1d

        for ax in ordered:
            if c.shape[ax] > 1:
                c = uniform_filter1d(c, width, axis=ax, mode="nearest")
    return _f1_grid(c)


def _f1_grid(c: np.ndarray) -> np.ndarray:
    tp, fp, fn = c[..., 0].astype(float), c[..., 1].astype(float), c[..., 2].astype(float)
    d = 2 * tp + fp + fn
    return np.where(d > 0, 2 * tp / np.where(d > 0, d, 1), 0.0)


def _score_layer(
    name: str,
    maps: list[np.ndarray],
    windows: list[_Window],
    n_folds: int,
    tol_px: float,
    broad: tuple[float, float],
    background: float,
    diam_px: np.ndarray | None = None,
) -> _LayerRun | None:
    """Diameter range, threshold grid and cross-validated counts for one layer."""
    vals = np.concatenate([m[w.valid] for m, w in zip(maps, windows, strict=True)])
    if vals.size == 0:
        return None
    lo, hi = np.percentile(vals, [1, 99])
    floor = 0.02 * float(hi - lo) * 2.0 / math.e
    if not floor > 0:
        return None
    if diam_px is None:
        sc = blob_scales(broad[0] / 2.0, broad[1] / 2.0, 3)
        cands = _candidates(maps, windows, sc, floor, background)
        sig, _r, _v = _strongest_near(cands, windows, tol_px)
        diam_px = 2.0 * math.sqrt(2.0) * sig
    found = diam_px[np.isfinite(diam_px)]
    if found.size < 0.5 * diam_px.size:
        return None
    dmin = max(2.0, float(np.percentile(found, 2)) / 1.3)
    dmax = max(dmin * 1.2, float(np.percentile(found, 98)) * 1.3)
    scales = blob_scales(dmin / 2.0, dmax / 2.0, 3)
    cands = _candidates(maps, windows, scales, floor, background)
    _s, resp, value = _strongest_near(cands, windows, tol_px)
    ok = np.isfinite(resp)
    if ok.sum() < 0.5 * resp.size:
        return None
    rq = np.quantile(resp[ok], [0.0, 0.01, 0.03, 0.07, 0.15, 0.25])
    resp_grid = np.unique(np.concatenate([rq * f for f in (0.4, 0.6, 0.8, 1.0)]))
    resp_grid = resp_grid[resp_grid >= floor]
    if resp_grid.size == 0:
        resp_grid = np.array([floor])
    vq = np.quantile(value[ok], [0.0, 0.01, 0.03, 0.07, 0.15])
    val_grid = np.concatenate([[-np.inf], np.unique(vq)])
    # keep at most 30 candidates per mapped plant above the lowest threshold (the rest are
    # noise maxima that no threshold in the grid would keep)
    cap = 30 * sum(w.ref.shape[0] for w in windows)
    allr = np.concatenate([c["response"] for c in cands])
    if allr.size > cap:
        cut = float(np.partition(allr, allr.size - cap)[allr.size - cap])
        resp_grid = np.unique(np.maximum(resp_grid, cut))
    low = float(resp_grid[0])
    cands = [{k: v[c["response"] >= low] for k, v in c.items()} for c in cands]
    counts = _grid_counts(cands, windows, n_folds, resp_grid, val_grid, tol_px)
    pooled, fold_f1, (i, j) = _cross_validate(counts)
    score = LayerScore.from_counts(name, pooled, fold_f1)
    return _LayerRun(
        name, score, dmin, dmax, float(resp_grid[i]), float(val_grid[j]), background, diam_px
    )


def _peak_counts(
    found: dict[str, np.ndarray], w: _Window, p_grid: np.ndarray, n_folds: int, tol_px: float
) -> np.ndarray:
    """tp, fp, fn per (least peak, fold) of points with a ``peak`` value: each point counts
    in the fold of its position (inside the plot only)."""
    counts = np.zeros((p_grid.size, n_folds, 3), dtype=np.int64)
    inside = shapely.contains_xy(w.poly_px, found["col"], found["row"])
    rr = np.clip(np.round(found["row"]).astype(int) - w.r0, 0, w.fold_map.shape[0] - 1)
    cc = np.clip(np.round(found["col"]).astype(int) - w.c0, 0, w.fold_map.shape[1] - 1)
    fold = np.where(inside, w.fold_map[rr, cc], -1)
    for j, pk in enumerate(p_grid):
        keep = found["peak"] >= pk
        for f in range(n_folds):
            sel = keep & (fold == f)
            a = np.column_stack([found["col"][sel], found["row"][sel]])
            b = w.ref[w.ref_fold == f]
            tp = match_points(a, b, tol_px).n_matched if a.size and b.size else 0
            counts[j, f] += (tp, a.shape[0] - tp, b.shape[0] - tp)
    return counts


# --- crown split of a probability map (closed canopy) -------------------------------------


def _score_split(
    map_sets: list[tuple[float, list[np.ndarray]]],
    windows: list[_Window],
    n_folds: int,
    tol_px: float,
    dmin_px: float,
    dmax_px: float,
    band_names: tuple[str, ...] = (),
) -> tuple[LayerScore, dict] | None:
    """Cross-validated score of the watershed crown split over a grid of (centre-map
    weight, smoothing, joining fragments, h) × least peak.

    ``map_sets`` holds, per centre-map weight, each window's held-out layer (the plant
    probability plus that weight times the centre map). Regions come from
    :func:`ecoscan.detect.canopy.split_crowns` on each window's held-out layer; each is
    counted in the fold of its centre (inside the plot only), and
    the grid cell is chosen on the other folds exactly as for the blob thresholds.
    """
    from ecoscan.detect.canopy import (
        MERGE_MAX_AREA_SHARE,
        MIN_AREA_SHARE,
        canopy_tint,
        split_crowns,
    )

    r_min = dmin_px / 2.0
    colour = all(b in band_names for b in ("red", "green", "blue"))
    variants = [
        (k, sm, join, float(h))
        for k in range(len(map_sets))
        for sm in SPLIT_SMOOTH_GRID
        for join in (SPLIT_JOIN_GRID if colour else (False,))
        for h in SPLIT_H_GRID
    ]
    p_grid = np.asarray(SPLIT_PEAK_GRID)
    counts = np.zeros((len(variants), p_grid.size, n_folds, 3), dtype=np.int64)
    max_area = MERGE_MAX_AREA_SHARE * math.pi * (dmax_px / 2.0) ** 2
    for wi, w in enumerate(windows):
        tint = canopy_tint(w.data, band_names) if colour else None
        for i, (k, sm, join, h) in enumerate(variants):
            found = split_crowns(
                map_sets[k][1][wi],
                r_min,
                h,
                smooth_px=sm * r_min,
                min_area_px=MIN_AREA_SHARE * math.pi * r_min**2,
                valid=w.valid,
                origin=(w.c0, w.r0),
                max_area_px=max_area if join else None,
                tint=tint,
            )
            counts[i] += _peak_counts(found, w, p_grid, n_folds, tol_px)
    pooled, fold_f1, (i, j) = _cross_validate(counts, ordered=())
    score = LayerScore.from_counts("probability", pooled, fold_f1)
    if score.tp == 0:
        return None
    k, sm, join, h = variants[i]
    split = {
        "h": h,
        "min_peak": float(p_grid[j]),
        "smooth_share": float(sm),
        "min_area_share": float(MIN_AREA_SHARE),
        "join_fragments": bool(join),
    }
    if map_sets[k][0] > 0:
        split["centre_weight"] = float(map_sets[k][0])
    return score, split


# --- the classifier ------------------------------------------------------------------------


def _sample_pixels(
    windows: list[_Window],
    reach: list[np.ndarray] | float,
    rng: np.random.Generator,
    n_near: int = 2 * N_PLANT_SAMPLES,
    n_uniform: int = N_GROUND_SAMPLES,
) -> list[tuple[np.ndarray, np.ndarray]]:
    """Candidate training pixels per window (rows, columns in window pixels).

    Around every mapped plant (distance uniform in 0–``reach``, so dense near the centre and
    the same number in every distance band; ``reach`` is one number for all plants or one
    array per window) and uniform in the plot; labels are given later.
    """
    n_ref = sum(w.ref.shape[0] for w in windows)
    area = sum(w.poly_px.area for w in windows)
    out = []
    for i, w in enumerate(windows):
        n = w.ref.shape[0]
        h, wd = w.valid.shape
        m = max(1, math.ceil(n_near / max(n_ref, 1)))
        k = np.repeat(np.arange(n), m)
        rr = (reach[i][k] if isinstance(reach, list) else reach) * rng.uniform(size=k.size)
        th = rng.uniform(0, 2 * np.pi, size=k.size)
        pc = w.ref[k, 0] + rr * np.cos(th)
        pr = w.ref[k, 1] + rr * np.sin(th)
        n_g = max(1, round(n_uniform * w.poly_px.area / max(area, 1e-9)))
        b = w.poly_px.bounds
        gc = rng.uniform(b[0], b[2], size=n_g)
        gr = rng.uniform(b[1], b[3], size=n_g)
        c = np.concatenate([pc, gc])
        r = np.concatenate([pr, gr])
        inside = shapely.contains_xy(w.poly_px, c, r)
        c, r = c[inside], r[inside]
        col = np.round(c).astype(int) - w.c0
        row = np.round(r).astype(int) - w.r0
        ok = (col >= 0) & (col < wd) & (row >= 0) & (row < h)
        col, row = col[ok], row[ok]
        ok = w.valid[row, col]
        out.append((row[ok], col[ok]))
    return out


def _labels(w: _Window, row: np.ndarray, col: np.ndarray, rad: np.ndarray) -> np.ndarray:
    """1 within PLANT_INNER radii of a mapped plant, 0 beyond GROUND_OUTER radii of all,
    else -1 (unused)."""
    if w.ref.shape[0] == 0:
        return np.zeros(row.size, np.int8)
    kk = min(8, w.ref.shape[0])
    d, j = cKDTree(w.ref).query(np.column_stack([col + w.c0, row + w.r0]), k=kk)
    d = d.reshape(row.size, kk)
    j = j.reshape(row.size, kk)
    ratio = np.min(d / np.maximum(rad[j], 0.5), axis=1)
    lab = np.full(row.size, -1, np.int8)
    lab[ratio < PLANT_INNER] = 1
    lab[ratio > GROUND_OUTER] = 0
    return lab


def _features_at(
    w: _Window, band_names: tuple[str, ...], spec: FeatureSpec, row: np.ndarray, col: np.ndarray
) -> np.ndarray:
    from ecoscan.detect.pixel_model import CHUNK_ROWS

    h = w.valid.shape[0]
    out = None
    for r0 in range(0, h, CHUNK_ROWS):
        sel = (row >= r0) & (row < r0 + CHUNK_ROWS)
        if not sel.any():
            continue
        f = pixel_features(w.data, band_names, spec, slice(r0, min(h, r0 + CHUNK_ROWS)))
        if out is None:
            out = np.empty((row.size, f.shape[-1]), np.float32)
        out[sel] = f[row[sel] - r0, col[sel]]
    return out if out is not None else np.empty((0, 0), np.float32)


def _forest(x: np.ndarray, y: np.ndarray, seed: int, trees: int | None = None):
    from sklearn.ensemble import RandomForestClassifier

    model = RandomForestClassifier(
        n_estimators=trees or N_TREES,
        max_depth=16,
        min_samples_leaf=3,
        max_features="sqrt",
        n_jobs=forest_threads(),
        random_state=seed,
    )
    model.fit(x, y)
    return model


def _classifier_run(
    windows: list[_Window],
    band_names: tuple[str, ...],
    n_folds: int,
    tol_px: float,
    broad: tuple[float, float],
    diam_given: np.ndarray | None,
    best_simple: _LayerRun | None,
    seed: int,
):
    """Train and cross-validate the pixel classifier; returns (forest, spec, run, centre),
    ``centre`` being :func:`_centre_maps`'s result when the centre map was tried."""
    ref_all = np.concatenate([w.ref for w in windows])
    nn = cKDTree(ref_all).query(ref_all, k=2)[0][:, 1] if ref_all.shape[0] > 1 else np.ones(1)
    if diam_given is not None:
        diam = diam_given.copy()
    elif best_simple is not None and best_simple.score.f1 >= 0.8:
        diam = best_simple.ref_diam_px.copy()
    else:
        diam = None
    if diam is not None:
        med = float(np.nanmedian(diam)) if np.isfinite(diam).any() else float(np.median(nn))
        diam[~np.isfinite(diam)] = med
    else:
        med = float(min(broad[1], np.median(nn)))
    means = np.concatenate([w.data.mean(axis=0)[w.valid] for w in windows])
    spec = FeatureSpec(
        sigma_min=1.0,
        sigma_max=float(np.clip(0.25 * med, 2.0, 16.0)),
        num_sigma=4,
        brightness_scale=float(max(np.percentile(means, 99), 1e-6)),
    )
    rng = np.random.default_rng(seed)
    pix = _sample_pixels(windows, 1.3 * (0.5 * broad[1]), rng)
    feats = [
        _features_at(w, band_names, spec, r, c) for w, (r, c) in zip(windows, pix, strict=True)
    ]
    folds = np.concatenate([w.fold_map[r, c] for w, (r, c) in zip(windows, pix, strict=True)])
    x_all = np.concatenate(feats)

    def labels(rad: np.ndarray) -> np.ndarray:
        out, start = [], 0
        for w, (r, c) in zip(windows, pix, strict=True):
            n = w.ref.shape[0]
            out.append(_labels(w, r, c, rad[start : start + n]))
            start += n
        return np.concatenate(out)

    if diam is None:
        # no layer gives crown sizes: a first forest on conservative labels (plants within
        # a third of the spacing to the nearest neighbour), then scale selection on its map
        y = labels(np.minimum(0.35 * nn, 0.5 * broad[1]))
        ok = y >= 0
        if np.unique(y[ok]).size < 2:
            return None, None, None, None
        first = _forest(x_all[ok], y[ok], seed, trees=N_TREES_FIRST)
        maps = [predict_probability(first, w.data, band_names, spec) for w in windows]
        sc = blob_scales(broad[0] / 2.0, broad[1] / 2.0, 3)
        floor = 0.02 * 2.0 / math.e
        cands = _candidates(maps, windows, sc, floor, 0.0)
        sig, _r, _v = _strongest_near(cands, windows, tol_px)
        diam = 2.0 * math.sqrt(2.0) * sig
        fill = float(np.nanmedian(diam)) if np.isfinite(diam).any() else med
        diam[~np.isfinite(diam)] = fill
    y = labels(0.5 * diam)
    ok = y >= 0
    x, y, fold = x_all[ok], y[ok], folds[ok]
    if np.unique(y).size < 2:
        return None, None, None, None
    fold_models = []
    for f in range(n_folds):
        tr = fold != f
        if np.unique(y[tr]).size < 2:
            return None, None, None, None
        fold_models.append(_forest(x[tr], y[tr], seed))
    maps = [
        predict_probability(
            None, w.data, band_names, spec, fold_of_row=w.fold_map, forests=fold_models
        )
        for w in windows
    ]
    for m, w in zip(maps, windows, strict=True):
        m[~w.valid] = 0.0
    run = _score_layer("probability", maps, windows, n_folds, tol_px, broad, 0.0, diam)
    if run is None:
        return None, None, None, None
    centre = None
    if run.score.f1 < SPLIT_TRY_BELOW:
        centre = _touching_crowns(windows, band_names, n_folds, tol_px, spec, diam, run, maps, seed)
    return _forest(x, y, seed), spec, run, centre


def _touching_crowns(windows, band_names, n_folds, tol_px, spec, diam, run, maps, seed):
    """Closed canopy: learn where crown centres are, not only where plants are, and split
    merged crowns along the valleys of the probability (plus the centre map); ``run`` takes
    the split when it scores higher. Returns :func:`_centre_maps`'s result."""
    centre = _centre_maps(windows, band_names, n_folds, tol_px, spec, diam, run, seed)
    sets = [(0.0, maps)]
    if centre is not None:
        sets += [
            (a, [m + np.float32(a) * c for m, c in zip(maps, centre[2], strict=True)])
            for a in CENTRE_WEIGHT_GRID
            if a > 0
        ]
    got = _score_split(sets, windows, n_folds, tol_px, run.dmin_px, run.dmax_px, band_names)
    run.blob_score = run.score
    if got is not None:
        run.split_score, run.split_found = got
    if got is not None and beats(got[0], run.score):
        run.score, run.split = got
    return centre


# --- crown-centre map ----------------------------------------------------------------------


def _regressor(x: np.ndarray, y: np.ndarray, seed: int):
    """The centre-map regressor (gradient boosting on histograms; CPU, deterministic)."""
    from sklearn.ensemble import HistGradientBoostingRegressor

    model = HistGradientBoostingRegressor(
        max_iter=CENTRE_ITERATIONS,
        max_leaf_nodes=CENTRE_LEAVES,
        learning_rate=0.1,
        min_samples_leaf=20,
        early_stopping=False,
        random_state=seed,
    )
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):  # OpenMP threads spin on a shared machine
        model.fit(x, y)
    return model


def _centre_maps(
    windows: list[_Window],
    band_names: tuple[str, ...],
    n_folds: int,
    tol_px: float,
    spec: FeatureSpec,
    diam: np.ndarray,
    prob_run: _LayerRun,
    seed: int,
):
    """Train and cross-validate the crown-centre map.

    The target is :func:`ecoscan.detect.centres.centre_target` of the mapped plants, each
    plant's radius being its calibrated crown radius or :data:`CENTRE_SPACING_SHARE` of the
    distance to its nearest mapped neighbour, whichever is larger (in packed stands the
    spacing says more about crown size than scale selection); pixels are sampled around
    every plant (uniform in distance up to :data:`CENTRE_SAMPLE_REACH` radii, so every
    distance band counts the same) and uniform in the plots. The features reach
    :data:`CENTRE_SIGMA_SHARE` of the median spacing, the scale of whole crowns. Each fold's
    map comes from a regressor trained without that fold's pixels.

    Returns
    -------
    (regressor, features, held-out maps, peaks run) or None
        The peaks run is the cross-validated peak search of the held-out maps
        (:func:`ecoscan.detect.centres.find_centres`; smoothing, least distance and least
        peak chosen on the other folds), or None when it finds nothing.
    """
    from ecoscan.detect.centres import centre_target, find_centres

    rng = np.random.default_rng(seed + 7)
    ref_all = np.concatenate([w.ref for w in windows])
    nn = cKDTree(ref_all).query(ref_all, k=2)[0][:, 1]
    rad = np.maximum(0.5 * np.asarray(diam, float), CENTRE_SPACING_SHARE * nn)
    cspec = FeatureSpec(
        sigma_min=1.0,
        sigma_max=float(np.clip(CENTRE_SIGMA_SHARE * np.median(nn), 2.0, 32.0)),
        num_sigma=CENTRE_NUM_SIGMA,
        brightness_scale=spec.brightness_scale,
    )
    rads, start = [], 0
    for w in windows:
        rads.append(rad[start : start + w.ref.shape[0]])
        start += w.ref.shape[0]
    pix = _sample_pixels(
        windows, [CENTRE_SAMPLE_REACH * r for r in rads], rng, N_CENTRE_NEAR, N_CENTRE_UNIFORM
    )
    x = np.concatenate(
        [_features_at(w, band_names, cspec, r, c) for w, (r, c) in zip(windows, pix, strict=True)]
    )
    y = np.concatenate(
        [
            centre_target(w.ref, rw, c + w.c0, r + w.r0, WIDTH_SHARE)
            for w, rw, (r, c) in zip(windows, rads, pix, strict=True)
        ]
    )
    fold = np.concatenate([w.fold_map[r, c] for w, (r, c) in zip(windows, pix, strict=True)])
    if y.size == 0 or not (y > 0.5).any() or any((fold != f).sum() == 0 for f in range(n_folds)):
        return None
    models = [_regressor(x[fold != f], y[fold != f], seed) for f in range(n_folds)]
    r_min = prob_run.dmin_px / 2.0
    variants = [(sm, md) for sm in CENTRE_SMOOTH_GRID for md in CENTRE_DISTANCE_GRID]
    p_grid = np.asarray(CENTRE_PEAK_GRID)
    counts = np.zeros((len(variants), p_grid.size, n_folds, 3), dtype=np.int64)
    cmaps = []
    for w in windows:
        m = predict_probability(
            None, w.data, band_names, cspec, fold_of_row=w.fold_map, forests=models
        )
        m[~w.valid] = 0.0
        cmaps.append(m)
        for i, (sm, md) in enumerate(variants):
            found = find_centres(
                m, md * r_min, sm * r_min, float(p_grid[0]), w.valid, (w.c0, w.r0)
            )
            counts[i] += _peak_counts(found, w, p_grid, n_folds, tol_px)
    pooled, fold_f1, (i, j) = _cross_validate(counts, ordered=())
    score = LayerScore.from_counts("centre_map", pooled, fold_f1)
    peaks = None
    if score.tp > 0:
        sm, md = variants[i]
        peaks = _LayerRun(
            "centre_map",
            score,
            prob_run.dmin_px,
            prob_run.dmax_px,
            0.0,
            0.0,
            0.0,
            diam,
            centres={
                "smooth_share": float(sm),
                "distance_share": float(md),
                "min_peak": float(p_grid[j]),
                "crown_diameter_px": float(np.median(2.0 * rad)),  # metres: by the caller
            },
        )
    return _regressor(x, y, seed), cspec, cmaps, peaks


# --- the whole calibration -----------------------------------------------------------------


def calibrate_detector(
    info: RasterInfo,
    reference: PointSet,
    plots: PlotLayer,
    *,
    band_names: tuple[str, ...],
    tolerance_m: float | None = None,
    diameter_m: tuple[float, float] | None = None,
    classifier: str = "auto",
    seed: int = 1,
    names: tuple[str, str, str] = ("raster", "reference", "plots"),
) -> CalibrationResult:
    """Learn a detector from plants mapped inside training plots.

    Parameters
    ----------
    info : RasterInfo
        The raster (:func:`ecoscan.io.raster.open_raster`).
    reference : PointSet
        Every plant mapped inside the training plots, in the raster's CRS (or local metres
        for a raster without georeferencing). A ``diameter_m`` attribute, when present,
        gives the crown sizes; otherwise they are estimated from the image.
    plots : PlotLayer
        Training plots, in the raster's CRS. Plants outside them are ignored, and no
        ground outside them is assumed plant-free.
    band_names : tuple of str
        Name of each data band (:func:`band_names_for`).
    tolerance_m : float, optional
        Largest distance (metres) at which a detection counts as a mapped plant. Default:
        half the smallest mapped crown diameters (:func:`tolerance_from_diameters`), or a
        quarter of the median spacing between mapped plants when their diameters are not
        given.
    diameter_m : (float, float), optional
        Expected crown diameter range (metres) to search when estimating crown sizes;
        default from the spacing of the mapped plants.
    classifier : str
        ``auto`` (train a pixel classifier; under ``ROUTE_LEAN = "simple"`` only when no
        simple layer reaches an F1 of :data:`GOOD_ENOUGH_F1` pooled and in every fold:
        :func:`want_classifier`), ``always`` or ``never``.
    seed : int
        Seed for pixel sampling and the forest; same seed, same detector.
    names : (str, str, str)
        The raster, reference and plots files as the user wrote them (for messages).

    Returns
    -------
    CalibrationResult

    Raises
    ------
    InputError
        No mapped plant inside a training plot, fewer than :data:`MIN_PLANTS`, plots outside
        the raster, training plots too large, or no layer that finds the mapped plants.

    Examples
    --------
    See ``tests/test_calibrate.py``; in short::

        info = open_raster("ortho.tif")
        res = calibrate_detector(info, read_points("mapped.csv"), read_plots("train.gpkg"),
                                 band_names=band_names_for(info))
        write_detector("detector.toml", res.detector)
    """
    if classifier not in ("auto", "always", "never"):
        raise InputError(f"--classifier must be auto, always or never (got {classifier!r})")
    ps = info.pixel_size_m
    notes: list[str] = []
    tolerance_m, broad, given_d = _search_range(reference, ps, tolerance_m, diameter_m, notes)
    tol_px = tolerance_m / ps
    sc = blob_scales(broad[0] / 2.0, broad[1] / 2.0, 3)
    halo = math.ceil(4.0 * min(16.0, max(2.0, broad[1] / 4.0))) + 3
    margin = sc.support_px + halo
    windows, fold_by, n_folds, more = _prepare(info, reference, plots, names, margin)
    notes += more
    diam_given = (
        None if given_d is None else given_d[np.concatenate([w.ref_index for w in windows])]
    )
    runs = _simple_runs(windows, band_names, n_folds, tol_px, broad, diam_given)
    best_simple = max(runs, key=lambda r: r.score.f1) if runs else None
    want_forest = want_classifier(classifier, best_simple.score if best_simple else None)
    learnt: dict[str, dict] = {}  # what each learnt run needs at detection time
    centre_models: dict = {}
    if want_forest:
        forest, spec, run, centre = _classifier_run(
            windows, band_names, n_folds, tol_px, broad, diam_given, best_simple, seed
        )
        if run is not None:
            runs.append(run)
            learnt[run.name] = {"forest": forest, "features": spec}
            if run.split.get("centre_weight"):
                learnt[run.name].update(centre_model=centre[0], centre_features=centre[1])
        if centre is not None:
            centre_models = {"centre_model": centre[0], "centre_features": centre[1]}
        if centre is not None and centre[3] is not None:
            peaks = centre[3]
            peaks.centres["crown_diameter_m"] = peaks.centres.pop("crown_diameter_px") * ps
            runs.append(peaks)
            learnt[peaks.name] = {"centre_model": centre[0], "centre_features": centre[1]}
    if not runs:
        raise InputError(
            f"no layer of {names[0]} finds the plants mapped in {names[1]}; check that the "
            "points mark crown centres and use the raster's CRS"
        )
    runs.sort(key=lambda r: -(r.score.f1 if math.isfinite(r.score.f1) else -1))
    chosen = _choose(runs, best_simple, notes)
    if fold_by == "block":
        notes.append(ONE_PLOT_CAUTION)
    training = {
        "plants": int(sum(w.ref.shape[0] for w in windows)),
        "plot_ids": [plots.plots[w.plot].plot_id for w in windows],
    }
    fold_info = {"fold_by": fold_by, "folds": n_folds, "tolerance_m": float(tolerance_m)}
    det = _detector_record(
        info, chosen, learnt.get(chosen.name, {}), band_names, fold_info, runs, training
    )
    every = {}
    for route, run in _route_runs(runs).items():
        models = dict(learnt.get(run.name, {}))
        if run.name == "probability":
            models = {k: models[k] for k in ("forest", "features") if k in models}
            if run.split.get("centre_weight"):
                models.update(centre_models)
        every[route] = (
            det
            if run is chosen
            else _detector_record(info, run, models, band_names, fold_info, runs, training)
        )
    return CalibrationResult(
        detector=det,
        scores=[r.score for r in runs],
        chosen=chosen.score,
        folds=f"{n_folds} folds by {fold_by}",
        tolerance_m=float(tolerance_m),
        notes=notes,
        routes=_routes(runs),
        route_detectors=every,
    )


def _routes(runs: list[_LayerRun]) -> dict[str, LayerScore]:
    """Every route compared and its cross-validated score (see :class:`CalibrationResult`)."""
    out: dict[str, LayerScore] = {}
    for r in runs:
        if r.name == "probability":
            out["probability blobs"] = r.blob_score or r.score
            if r.split_score is not None:
                out["probability split"] = r.split_score
        elif r.name == "centre_map":
            out["centre peaks"] = r.score
        else:
            out[r.name] = r.score
    return out


def _route_runs(runs: list[_LayerRun]) -> dict[str, _LayerRun]:
    """The run each route of :func:`_routes` would use (the plant probability's blobs and
    its split as two runs; the chosen one is the run itself)."""
    import dataclasses

    out: dict[str, _LayerRun] = {}
    for r in runs:
        if r.name != "probability":
            out["centre peaks" if r.name == "centre_map" else r.name] = r
            continue
        blobs = r if not r.split else dataclasses.replace(r, split={}, score=r.blob_score)
        out["probability blobs"] = blobs
        if r.split:
            out["probability split"] = r
        elif r.split_found and r.split_score is not None:
            out["probability split"] = dataclasses.replace(
                r, split=dict(r.split_found), score=r.split_score
            )
    return out


def tolerance_from_diameters(diameter_m: np.ndarray) -> float:
    """Matching tolerance (metres) from mapped crown diameters: half the smallest crowns'
    diameter (:data:`TOLERANCE_PERCENTILE` of the mapped diameters, so one mis-typed tiny
    crown does not set it).

    A detection farther from a plant than the radius of the smallest crowns may lie in a
    neighbouring small crown, so it cannot be credited to either (common practice: a
    detection counts when it falls inside the smallest crowns' radius). The median crown's
    radius (the earlier rule) is far more lenient where crown sizes vary: on the suite's
    closed canopy (crowns 2-7 m) it credited points 2.7 m from a centre, so cross-validation
    chose settings that put points off centre (development seed 7: cross-validated F1 0.958,
    test F1 0.840).

    Examples
    --------
    >>> round(tolerance_from_diameters(np.r_[np.full(10, 2.0), np.full(90, 6.0)]), 3)
    1.0
    >>> round(tolerance_from_diameters(np.r_[0.05, np.full(99, 2.0)]), 3)  # one tiny typo
    1.0
    """
    d = np.asarray(diameter_m, float)
    return 0.5 * float(np.percentile(d, TOLERANCE_PERCENTILE))


def _search_range(
    reference: PointSet,
    ps: float,
    tolerance_m: float | None,
    diameter_m: tuple[float, float] | None,
    notes: list[str],
) -> tuple[float, tuple[float, float], np.ndarray | None]:
    """The matching tolerance (metres), the crown diameters searched (pixels) and the
    mapped diameters (pixels, when every plant has a valid one)."""
    xy = reference.xy
    if xy.shape[0] >= 2:
        nn = cKDTree(xy).query(xy, k=2)[0][:, 1]
    else:
        nn = np.array([1.0])
    given_d = None
    if "diameter_m" in reference.attrs:
        dd = np.asarray(reference.attrs["diameter_m"], float)
        if np.all(np.isfinite(dd)) and np.all(dd > 0):
            given_d = dd / ps
    if tolerance_m is None:
        if given_d is not None:
            tolerance_m = tolerance_from_diameters(given_d * ps)
        else:
            tolerance_m = 0.25 * float(np.median(nn))
        notes.append(f"matching tolerance {tolerance_m:.3g} m (set it with --tolerance)")
    if not (tolerance_m > 0 and math.isfinite(tolerance_m)):
        raise InputError(f"--tolerance must be a positive number of metres (got {tolerance_m})")
    if diameter_m is not None:
        broad = (max(2.0, diameter_m[0] / ps), diameter_m[1] / ps)
    else:
        broad = (2.0, float(np.clip(1.5 * np.percentile(nn, 90) / ps, 6.0, 300.0)))
    if given_d is not None:
        broad = (max(2.0, float(np.min(given_d)) / 1.3), float(np.max(given_d)) * 1.3)
    return tolerance_m, broad, given_d


def _simple_runs(windows, band_names, n_folds, tol_px, broad, diam_given) -> list[_LayerRun]:
    """Every simple layer the bands allow, scored by cross-validation (those that find
    anything)."""
    runs: list[_LayerRun] = []
    for name in available_layers(band_names):
        maps = [simple_layer(w.data, band_names, name) for w in windows]
        bg = float(
            np.median(np.concatenate([m[w.valid] for m, w in zip(maps, windows, strict=True)]))
        )
        for m, w in zip(maps, windows, strict=True):
            m[~w.valid] = bg
        run = _score_layer(name, maps, windows, n_folds, tol_px, broad, bg, diam_given)
        if run is not None:
            runs.append(run)
    return runs


def _choose(runs: list[_LayerRun], best_simple: _LayerRun | None, notes: list[str]) -> _LayerRun:
    """The best run (sorted best first) that can be used, with notes on the choice.

    A learnt route (plant probability or centre map) is used only when it :func:`beats`
    the best simple layer; the centre peaks replace the plant probability's route only when
    they beat it too (the probability's route is the simpler one).
    """

    def usable(r: _LayerRun) -> bool:
        return r.name not in LEARNT_ROUTES or best_simple is None or beats(
            r.score, best_simple.score
        )

    if ROUTE_LEAN == "learnt":
        chosen = _prefer_learnt(runs, best_simple)
    else:
        chosen = next(r for r in runs if usable(r))
        if chosen.name == "centre_map":
            prob = next((r for r in runs if r.name == "probability" and usable(r)), None)
            if prob is not None and not beats(chosen.score, prob.score):
                chosen = prob
    if (
        ROUTE_LEAN == "learnt"
        and chosen.name in LEARNT_ROUTES
        and runs[0].name not in LEARNT_ROUTES
    ):
        notes.append(
            f"{runs[0].name} scored higher than the classifier in cross-validation "
            f"({runs[0].score.f1:.3f} against {chosen.score.f1:.3f}), but by less than "
            f"{CLASSIFIER_MARGIN} F1 and {LEARNT_SE:g} standard errors of the fold-to-fold "
            "differences; with few mapped plants that lead is noise, so the classifier is used"
        )
    elif runs[0].name in LEARNT_ROUTES and chosen is not runs[0] and ROUTE_LEAN != "learnt":
        what = (
            ("the classifier", "the best simple layer", "the simple layer")
            if chosen.name not in LEARNT_ROUTES
            else ("the crown-centre peaks", "the plant probability", "the plant probability")
        )
        notes.append(
            f"{what[0]} scored no better than {what[1]} by more than {CLASSIFIER_MARGIN} F1 "
            f"and {NOISE_SE:g} standard errors of the fold-to-fold differences; {what[2]} "
            "is used"
        )
    if chosen.split:
        notes.append(
            "touching crowns merge in the plant probability: crowns are split along its "
            f"valleys (watershed, marker height {chosen.split['h']:g}, least peak "
            f"{chosen.split['min_peak']:g}; chosen by cross-validation)"
        )
    if chosen.centres:
        notes.append(
            "crowns are the peaks of a learnt crown-centre map (least peak "
            f"{chosen.centres['min_peak']:g}, crowns at least "
            f"{chosen.centres['distance_share']:g} of the smallest crown radius apart; "
            "chosen by cross-validation)"
        )
    if chosen.score.f1 < 0.9:
        notes.append(
            f"cross-validated F1 is only {chosen.score.f1:.2f}: check the mapped plants and "
            "map more training plots before relying on this detector"
        )
    return chosen


def _prefer_learnt(runs: list[_LayerRun], best_simple: _LayerRun | None) -> _LayerRun:
    """The route under ``ROUTE_LEAN = "learnt"``: the learnt route (the plant probability's
    blobs or split; the centre peaks when they beat it by :data:`CLASSIFIER_MARGIN`) unless
    the best simple layer :func:`beats` it by the margin and :data:`LEARNT_SE` standard
    errors of the paired fold differences (a one-standard-error rule: Breiman et al. 1984,
    *Classification and Regression Trees*, 3.4.3; Hastie, Tibshirani & Friedman 2009, *The
    Elements of Statistical Learning*, 7.10, here leaning to the route that learnt the
    ground's texture rather than to the one with fewer settings)."""
    prob = next((r for r in runs if r.name == "probability"), None)
    peaks = next((r for r in runs if r.name == "centre_map"), None)
    learnt = prob
    if peaks is not None and (prob is None or beats(peaks.score, prob.score, 0.0)):
        learnt = peaks
    if learnt is None:
        return best_simple if best_simple is not None else runs[0]
    if best_simple is not None and beats(best_simple.score, learnt.score, LEARNT_SE):
        return best_simple
    return learnt


def _detector_record(
    info: RasterInfo,
    chosen: _LayerRun,
    models: dict,
    band_names: tuple[str, ...],
    folds: dict,
    runs: list[_LayerRun],
    training: dict,
) -> CalibratedDetector:
    """The detector file's content for the chosen run (``models``: its forest, centre-map
    regressor and their features, as far as it uses them)."""
    import sklearn

    from ecoscan import __version__

    ps = info.pixel_size_m
    kind = {"probability": "classifier", "centre_map": "centres"}.get(chosen.name, "layer")
    return CalibratedDetector(
        kind=kind,
        layer=chosen.name,
        band_names=tuple(band_names),
        dtype=str(info.dtype),
        pixel_size_m=float(ps),
        diameter_min_m=float(chosen.dmin_px * ps),
        diameter_max_m=float(chosen.dmax_px * ps),
        min_response=chosen.min_response,
        min_value=chosen.min_value,
        background=chosen.background,
        features=models.get("features"),
        forest=models.get("forest"),
        centre_features=models.get("centre_features"),
        centre_model=models.get("centre_model"),
        split=dict(chosen.split),
        centres=dict(chosen.centres),
        cross_validation={**folds, **chosen.score.as_dict()},
        candidates=[r.score.as_dict() for r in runs],
        training=training,
        software={"ecoscan": __version__, "scikit_learn": sklearn.__version__},
    )


def describe_training(det: CalibratedDetector, files: dict[str, str | Path]) -> None:
    """Record the training files' names and SHA-256 in the detector (in place).

    Parameters
    ----------
    det : CalibratedDetector
    files : dict
        ``raster``, ``reference`` and ``plots`` paths.
    """
    from ecoscan.detect.detector_file import sha256_file

    for key, path in files.items():
        det.training[key] = Path(path).name
        det.training[f"{key}_sha256"] = sha256_file(path)
