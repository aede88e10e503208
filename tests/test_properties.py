"""Property-based tests (hypothesis): invariances of the statistics, and readers that never
crash on any text. Bounded to a few dozen examples each so the file runs in well under a
minute of CPU.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from shapely import affinity

from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse
from ecoscan.errors import InputError
from ecoscan.io.inputs import SurveyInputs
from ecoscan.io.vector import plots_from_geometries, read_points
from ecoscan.model.membership import assign_plots
from ecoscan.model.plots import PlotLayer
from ecoscan.model.points import PointSet
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.stats.montecarlo import monte_carlo_nn
from ecoscan.stats.nearest import clark_evans, donnelly
from ecoscan.stats.quadrat import quadrat_test

FEW = settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])

polygons = st.sampled_from(
    [
        shapely.box(0, 0, 40, 40),
        shapely.box(0, 0, 100, 12),  # long and thin
        shapely.Polygon([(0, 0), (60, 0), (30, 50)]),  # triangle
        shapely.box(0, 0, 50, 50).difference(shapely.box(20, 20, 30, 30)),  # with a hole
    ]
)


def _transform(xy, poly, dx, dy, angle, scale):
    g = affinity.rotate(poly, angle, origin=(0, 0))
    g = affinity.scale(g, scale, scale, origin=(0, 0))
    g = affinity.translate(g, dx, dy)
    t = math.radians(angle)
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    return (xy @ rot.T) * scale + [dx, dy], g


@FEW
@given(
    poly=polygons,
    n=st.integers(5, 60),
    seed=st.integers(0, 2**31),
    dx=st.floats(-1e6, 1e6),
    dy=st.floats(-1e6, 7e6),
    angle=st.floats(0, 360),
    scale=st.floats(0.1, 50),
)
def test_r_invariant_under_translation_rotation_and_scaling(poly, n, seed, dx, dy, angle, scale):
    # R = observed mean NN / (0.5 / sqrt(density)) is dimensionless (Clark & Evans 1954,
    # Ecology 35:445); Donnelly's (1978) correction uses area and perimeter, which scale
    # as s^2 and s, so it is invariant too.
    xy = uniform_in_polygon(poly, n, rng=np.random.default_rng(seed))
    xy2, poly2 = _transform(xy, poly, dx, dy, angle, scale)
    a = clark_evans(xy, poly.area).statistic
    b = clark_evans(xy2, poly2.area).statistic
    assert b == pytest.approx(a, rel=1e-6)
    assert donnelly(xy2, poly2).statistic == pytest.approx(donnelly(xy, poly).statistic, rel=1e-6)


@FEW
@given(n=st.integers(2, 30), sims=st.integers(1, 60), seed=st.integers(0, 2**31), poly=polygons)
def test_monte_carlo_p_between_one_over_n_plus_one_and_one(n, sims, seed, poly):
    # a rank p-value from N simulations is a multiple of 1/(N+1) in [1/(N+1), 1]
    # (Davison & Hinkley 1997, eq. 4.11; common practice)
    xy = uniform_in_polygon(poly, n, rng=np.random.default_rng(seed))
    for direction in ("either", "clustered", "regular"):
        try:
            p = monte_carlo_nn(xy, poly, simulations=sims, direction=direction, rng=seed).pvalue
        except (TypeError, ValueError, InputError):  # direction spelled differently later
            continue
        assert 1 / (sims + 1) - 1e-12 <= p <= 1 + 1e-12


@FEW
@given(poly=polygons, n=st.integers(1, 200), seed=st.integers(0, 2**31), cell=st.floats(2, 25))
def test_quadrat_counts_sum_to_n(poly, n, seed, cell):
    # every point inside the plot falls in exactly one quadrat (a fact of the method)
    xy = uniform_in_polygon(poly, n, rng=np.random.default_rng(seed))
    res = quadrat_test(xy, poly, cell)
    assert int(np.sum(res.counts)) == n


def _inputs(plots: dict, xy: np.ndarray) -> SurveyInputs:
    built, _ = plots_from_geometries(list(plots.values()), list(plots))
    layer = PlotLayer(built, None, [])
    pts = PointSet(xy[:, 0], xy[:, 1], {}, None, [])
    return SurveyInputs(pts, layer, assign_plots(pts, layer), [])


@settings(max_examples=4, deadline=None)
@given(seed=st.integers(0, 2**31), far=st.floats(1e3, 1e5))
def test_a_far_away_plot_changes_no_other_plot(seed, far):
    # one random stream per plot (SeedSequence([seed, crc32(id)])): adding a plot must not
    # change another plot's numbers
    rng = np.random.default_rng(seed)
    a, b = shapely.box(0, 0, 30, 30), shapely.box(40, 0, 70, 30)
    c = shapely.box(far, far, far + 30, far + 30)
    xy = np.vstack([uniform_in_polygon(g, 25, rng=rng) for g in (a, b, c)])
    s = DispersionSettings(simulations=39, seed=seed % 1000)
    two = analyse(_inputs({"A": a, "B": b}, xy[:50]), s)
    three = analyse(_inputs({"A": a, "B": b, "C": c}, xy), s)
    for r2, r3 in zip(two, three[:2], strict=True):
        assert r2.plot_id == r3.plot_id
        assert repr(r2) == repr(r3)


@settings(max_examples=60, deadline=None)
@given(st.text(alphabet=st.sampled_from("xy,;\t\r\n 0123456789.-eE+nafNAF\"'#é\x00"), max_size=200))
def test_any_csv_text_is_read_or_refused_in_one_line(tmp_path_factory, text):
    p = tmp_path_factory.mktemp("csv") / "p.csv"
    p.write_text(text, encoding="utf-8")
    try:
        read_points(p, "EPSG:32633")
    except InputError as exc:
        assert str(exc) and "\n" not in str(exc)


TOML_BITS = [
    "[survey]\n",
    '[survey]\nplots = "p.gpkg"\n',
    "[statistics]\n",
    "simulations = 9\n",
    'simulations = "x"\n',
    "[[raster]]\n",
    'path = "a.tif"\n',
    "[raster.detect]\n",
    "diameter = 5\n",
    'diameter = "1:0"\n',
    "diameter = [1, 2, 3]\n",
    "[change]\n",
    "tolerance_m = -1\n",
    "[compare]\n",
    "permutations = 1e9\n",
    "by = 3\n",
    "x = [\n",
    '"\n',
    "= 1\n",
    "[scales]\nenabled = 1\n",
    "workers = 0\n",
]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.sampled_from(TOML_BITS), max_size=12), st.text(max_size=20))
def test_any_survey_text_is_loaded_or_refused(tmp_path_factory, bits, noise):
    from ecoscan.survey.config import load_survey

    f = tmp_path_factory.mktemp("survey") / "s.toml"
    f.write_text("".join(bits) + noise, encoding="utf-8")
    try:
        load_survey(f)
    except InputError as exc:
        assert str(exc).startswith("s.toml")
