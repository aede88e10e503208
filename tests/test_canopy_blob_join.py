"""Joining crown fragments that are one blob at their union's scale
(ecoscan.detect.canopy.join_single_blobs).

Crowns are rendered here with numpy as Lambertian hemispheres (brightness proportional to
the cosine between the surface normal and the sun; Lambert's cosine law, common practice
in shading models) lit from one side, as in the scene suite's closed canopy.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from skimage.segmentation import watershed

from ecoscan.detect import canopy
from tests.detect_helpers import lambert_domes

R_MIN, R_MAX = 8.0, 36.0
MAX_AREA = canopy.MERGE_MAX_AREA_SHARE * math.pi * R_MAX**2
SHAPE = (100, 140)


def _domes(crowns, elev_deg=45.0, az_deg=140.0, floor=0.05):
    """log(1 + 100 × brightness) of Lambert hemispheres (col, row, radius) lit at
    ``elev_deg``; the higher surface wins where crowns overlap."""
    return np.log1p(100 * lambert_domes(SHAPE, crowns, elev_deg, az_deg, floor))


def _join(layer, regions):
    idx = np.unique(regions[regions > 0])
    col, row, area, _w, _p, _l = canopy._crown_centres(
        layer, regions, idx, np.ones(layer.shape, bool)
    )
    lut = canopy.join_single_blobs(regions, idx, layer, col, row, area, R_MIN, R_MAX, MAX_AREA)
    return lut[idx].tolist()


def _grown(layer, seeds):
    """Watershed regions of the crowns grown from one marker each; open floor masked."""
    markers = np.zeros(layer.shape, int)
    for k, (c, r) in enumerate(seeds, 1):
        markers[r, c] = k
    reg = watershed(-layer, markers)
    reg[layer < np.log1p(100 * 0.2)] = 0
    return reg


@pytest.mark.parametrize("axis", ["col", "row"])
def test_two_halves_of_one_dome_are_joined(axis):
    # one dome cut through its centre (as a leaf clump's valley does): its union is one
    # blob whose response at the union's scale beats each half's at the half's scale
    lay = _domes([(60, 50, 30)])
    yy, xx = np.mgrid[: SHAPE[0], : SHAPE[1]]
    disc = (xx - 60) ** 2 + (yy - 50) ** 2 < 30**2
    cut = (xx < 60) if axis == "col" else (yy < 50)
    regions = np.where(disc, np.where(cut, 1, 2), 0)
    assert _join(lay, regions) == [1, 1]


@pytest.mark.parametrize(
    "crowns",
    [
        [(40, 50, 20), (80, 50, 20)],  # touching, equal
        [(45, 50, 20), (74, 50, 20)],  # overlapping: centres 0.72 of the sum of radii apart
        [(50, 50, 30), (86, 50, 13)],  # a small crown on a big one's flank (R + 0.45 r)
    ],
)
def test_two_crowns_stay_apart(crowns):
    lay = _domes(crowns)
    regions = _grown(lay, [(c, r) for c, r, _ in crowns])
    assert _join(lay, regions) == [1, 2]


def test_normalised_laplacian_peaks_at_the_blob_scale():
    # Lindeberg (1998), Int. J. Computer Vision 30: 79-116: for a Gaussian blob of variance
    # t0 the scale-normalised Laplacian at its centre is -2 t t0 / (t0 + t)^2 (times the
    # blob's height), largest in magnitude at t = t0; the join compares these responses
    s0 = 6.0
    yy, xx = np.mgrid[:121, :121].astype(float)
    blob = np.exp(-((xx - 60) ** 2 + (yy - 60) ** 2) / (2 * s0**2))
    sig = np.array([3.0, 4.5, 6.0, 8.0, 12.0])
    got = canopy._blob_responses(blob, np.array([[60.0, 60.0]]), sig)[:, 0]
    t, t0 = sig**2, s0**2
    np.testing.assert_allclose(got, 2 * t * t0 / (t0 + t) ** 2, atol=0.01)
    assert int(np.argmax(got)) == 2
