"""The public Python API: same numbers as the engines, attributes named like the CSV columns,
arguments checked first, one random stream per plot or pair, results pandas reads."""

from __future__ import annotations

import subprocess
import sys
import types
import zlib

import numpy as np
import pytest
import shapely

import ecoscan
from ecoscan.analysis.change.compute import ChangeSettings
from ecoscan.analysis.compare.compute import CompareSettings
from ecoscan.analysis.dispersion.columns import DISPERSION_COLUMNS, EXTRA_COLUMNS
from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot
from ecoscan.analysis.scales.columns import FUNCTION_COLUMNS, SCALES_COLUMNS
from ecoscan.errors import InputError
from ecoscan.stats.csr import keyed_rng, plot_rng, run_seed

BOX = (0.0, 0.0, 50.0, 50.0)


def _random_xy(n=120, seed=3, side=50.0):
    return np.random.default_rng(seed).uniform(0, side, (n, 2))


# ------------------------------------------------------------------------ dispersion


def test_dispersion_is_the_engine_with_csv_column_attributes():
    xy = _random_xy()
    res = ecoscan.dispersion(xy, BOX, plot_id="A", simulations=99, rng=5)
    ref = analyse_plot(xy, shapely.box(*BOX), "A", DispersionSettings(simulations=99, seed=5))
    row = ref.row()
    assert list(res) == list(DISPERSION_COLUMNS) + list(EXTRA_COLUMNS) == list(row)
    for col in DISPERSION_COLUMNS:
        assert getattr(res, col) == res[col]
        a, b = res[col], row[col]
        assert a == b or (isinstance(a, float) and np.isnan(a) and np.isnan(b)), col
    with pytest.raises(AttributeError, match="no column 'r'"):
        _ = res.r


def test_square_lattice_has_r_two():
    # Clark & Evans (1954), Ecology 35:445: mean NN distance of a square lattice is its
    # spacing, twice the 0.5/sqrt(density) of randomness, so R = 2 exactly (no edge effect
    # on the lattice's own spacing)
    grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T
    res = ecoscan.dispersion(grid, shapely.box(0, 0, 20, 20), simulations=99)
    assert res.R == pytest.approx(2.0) and res.mean_nn_m == pytest.approx(2.0)
    assert res.verdict == "regular"


def test_repr_is_short_and_never_prints_simulations():
    res = ecoscan.dispersion(_random_xy(), BOX, simulations=999, stop_after=0)
    assert len(repr(res)) < 160 and "\n" not in repr(res)
    assert res.detail.monte_carlo.simulated_nn_m.size == 999
    assert len(repr(res.detail.monte_carlo)) < 500


def test_several_plots_give_a_table_pandas_and_shapely_read():
    pd = pytest.importorskip("pandas")  # statsmodels (test extra) brings pandas
    xy = _random_xy()
    plots = {"w": (0, 0, 25, 50), "e": shapely.box(25, 0, 50, 50)}
    table = ecoscan.dispersion(xy, plots, simulations=19)
    frame = pd.DataFrame(table)
    assert list(frame.columns) == table.columns
    assert list(frame["plot_id"]) == ["w", "e"]
    assert pd.DataFrame(table.to_records()).equals(frame)
    assert pd.DataFrame(table.to_dict()).equals(frame)
    # points on the shared edge x = 25 count in both plots (boundary included)
    on_edge = int(np.sum(xy[:, 0] == 25.0))
    assert frame["n"].sum() == len(xy) + on_edge
    feats = table.__geo_interface__["features"]
    assert shapely.geometry.shape(feats[1]["geometry"]).equals(shapely.box(25, 0, 50, 50))
    assert feats[0]["properties"]["plot_id"] == "w"


def test_points_outside_every_plot_are_noted():
    xy = np.vstack([_random_xy(40, 1, 20.0), [[90.0, 90.0]]])
    table = ecoscan.dispersion(xy, {"a": (0, 0, 20, 20)}, simulations=19)
    assert table[0].n == 40
    assert table.notes == ["1 of 41 points lie outside every plot and were left out"]


def test_a_plot_stream_does_not_depend_on_other_plots():
    xy = _random_xy(200, 9)
    both = ecoscan.dispersion(xy, {"w": (0, 0, 25, 50), "e": (25, 0, 50, 50)}, simulations=99)
    west = xy[shapely.intersects_xy(shapely.box(0, 0, 25, 50), xy[:, 0], xy[:, 1])]
    alone = ecoscan.dispersion(west, (0, 0, 25, 50), plot_id="w", simulations=99)
    assert alone.p_mc == both[0].p_mc and alone.quadrat_p_mc == both[0].quadrat_p_mc


def test_rng_seed_or_generator():
    xy = _random_xy()
    a = ecoscan.dispersion(xy, BOX, simulations=99, stop_after=0, rng=11)
    b = ecoscan.dispersion(xy, BOX, simulations=99, stop_after=0, rng=11)
    assert a.p_mc == b.p_mc
    g1 = ecoscan.dispersion(xy, BOX, simulations=99, rng=np.random.default_rng(4))
    g2 = ecoscan.dispersion(xy, BOX, simulations=99, rng=np.random.default_rng(4))
    assert g1.p_mc == g2.p_mc and g1.quadrat_p_mc == g2.quadrat_p_mc


@pytest.mark.parametrize(
    "call, match",
    [
        (
            lambda: ecoscan.dispersion(np.zeros((2, 40)), BOX),
            r"shape \(n, 2\); got \(2, 40\): pass xy\.T",
        ),
        (lambda: ecoscan.dispersion(np.zeros((10, 3)), BOX), r"shape \(n, 2\).*got \(10, 3\)"),
        (lambda: ecoscan.dispersion([["a", "b"]], BOX), "array of numbers"),
        (lambda: ecoscan.dispersion([[1, np.nan], [2, 2]], BOX), "row 0"),
        (lambda: ecoscan.dispersion(_random_xy(), (0, 0, -1, 5)), "xmin < xmax"),
        (lambda: ecoscan.dispersion(_random_xy(), shapely.Point(0, 0)), "got Point"),
        (lambda: ecoscan.dispersion(_random_xy(), "plot.gpkg"), "got str"),
        (
            lambda: ecoscan.dispersion([[1, 1]], shapely.Polygon([(0, 0), (2, 2), (2, 0), (0, 2)])),
            r"not a valid polygon.*make_valid",
        ),
        (lambda: ecoscan.dispersion(_random_xy(), (0, 0, 10, 10)), "outside plot"),
        (lambda: ecoscan.dispersion(_random_xy(), BOX, rng=-1), "rng as a seed must be >= 0"),
        (lambda: ecoscan.dispersion(_random_xy(), BOX, rng="x"), "rng must be"),
        (lambda: ecoscan.dispersion(_random_xy(), BOX, simulations=0), "simulations"),
        (lambda: ecoscan.scales(_random_xy(), BOX, labels=["a"] * 120), "labels and kinds"),
        (lambda: ecoscan.change([[0, 0]], np.empty((0, 2)), 0.5), "later holds no plants"),
        (lambda: ecoscan.change([[0, 0]], [[0, 0]], "1 m"), "tolerance_m must be a number"),
        (lambda: ecoscan.compare([1, 2]), "list holding int"),
        (
            lambda: ecoscan.compare({"a": [(_random_xy(), (0, 0, 9, 9))], "b": []}),
            r"of groups\['a'\]\[0\] lie outside its plot",
        ),
        (lambda: ecoscan.detect("no-such.tif"), "does not exist"),
    ],
)
def test_bad_arguments_are_named_without_command_line_options(call, match):
    with pytest.raises(InputError, match=match) as err:
        call()
    assert "--" not in str(err.value)


# ---------------------------------------------------------------------------- scales


def test_scales_rows_and_function_table():
    res = ecoscan.scales(_random_xy(), BOX, simulations=19, steps=20, functions=["K", "L"])
    assert list(res)[: len(SCALES_COLUMNS)] == SCALES_COLUMNS
    curves = res.functions()
    assert curves.columns == FUNCTION_COLUMNS
    k = [r for r in curves if r.function == "K"]
    # under randomness K(r) is near pi r^2 (Ripley 1976); the csr_value column is exactly it
    assert all(r.csr_value == pytest.approx(np.pi * r.distance_m**2) for r in k)
    assert len(repr(res)) < 200


def test_scales_between_two_kinds():
    xy = _random_xy(100, 2)
    labels = np.where(np.arange(100) % 2 == 0, "live", "dead")
    res = ecoscan.scales(
        xy, BOX, simulations=19, steps=20, functions=["L"], labels=labels, kinds=("live", "dead")
    )
    assert res.kind_a == "live" and res.kind_b == "dead" and res.n_a == res.n_b == 50


# ----------------------------------------------------------------------------- change


def _two_dates(seed=0):
    rng = np.random.default_rng(seed)
    earlier = rng.uniform(0, 60, (300, 2))
    keep = rng.random(300) > 0.2
    later = np.vstack([earlier[keep] + rng.normal(0, 0.03, (keep.sum(), 2)),
                       rng.uniform(0, 60, (40, 2))])  # fmt: skip
    return earlier, later, int((~keep).sum())


def test_change_counts_and_tables():
    earlier, later, lost = _two_dates()
    res = ecoscan.change(earlier, later, 0.3, plots={"w": (0, 0, 30, 60), "e": (30, 0, 60, 60)},
                         simulations=19, estimate_shift=False)  # fmt: skip
    # ground truth by construction; a recruit can fall within 0.3 m of a lost plant's
    # place only rarely at this density, so allow one mismatch
    assert abs(res.overall.lost - lost) <= 1
    assert res.overall.persisting + res.overall.lost == 300
    assert [r.plot_id for r in res.plots] == ["w", "e"]
    assert res.plants.columns[0] == "plant_id" and len(res.plants) == len(res.detail.status)
    assert "persisting=" in repr(res) and len(repr(res)) < 160


def test_change_stream_per_plot():
    earlier, later, _ = _two_dates(1)
    plots = {"w": (0, 0, 30, 60), "e": (30, 0, 60, 60)}
    both = ecoscan.change(earlier, later, 0.3, plots=plots, simulations=39, rng=3)
    west = ecoscan.change(earlier, later, 0.3, plots={"w": plots["w"]}, simulations=39, rng=3)
    assert west.plots[0].p_R_change_mc == both.plots[0].p_R_change_mc
    assert west.plots[0].R_later_null == both.plots[0].R_later_null


# ---------------------------------------------------------------------------- compare


def _groups(seed=4):
    rng = np.random.default_rng(seed)
    box = (0, 0, 40, 40)
    lattice = np.mgrid[1:40:2.0, 1:40:2.0].reshape(2, -1).T
    return {
        "planted": [(lattice + rng.normal(0, 0.1, lattice.shape), box) for _ in range(3)],
        "natural": [(rng.uniform(0, 40, (400, 2)), box) for _ in range(3)],
        "thicket": [(rng.normal(20, 4, (400, 2)).clip(0.1, 39.9), box) for _ in range(3)],
    }


def test_compare_tables_and_a_regular_group_ranks_first():
    res = ecoscan.compare(_groups(), permutations=99)
    assert [g.group for g in res.groups] == ["planted", "natural", "thicket"]
    ranks = {g.group: g.rank_regularity for g in res.groups}
    assert ranks == {"planted": 1, "natural": 2, "thicket": 3}
    assert len(res.pairs) == 3 and all(p.p_R_diff_holm >= p.p_R_diff for p in res.pairs)


def test_compare_stream_per_pair():
    g = _groups()
    three = ecoscan.compare(g, permutations=99, rng=8)
    two = ecoscan.compare({k: g[k] for k in ("planted", "natural")}, permutations=99, rng=8)
    p3 = next(p for p in three.pairs if (p.group_a, p.group_b) == ("planted", "natural"))
    assert p3.p_nn_distribution == two.pairs[0].p_nn_distribution
    assert p3.p_R_perm == two.pairs[0].p_R_perm


# --------------------------------------------------------------------------- settings


def test_keyed_streams_follow_the_published_rule():
    # numpy's SeedSequence documentation: entropy given as a list of ints; the plot rule of
    # docs/architecture.md is SeedSequence([seed, crc32(plot_id)])
    ref = np.random.default_rng(np.random.SeedSequence([7, zlib.crc32(b"P1")])).random(3)
    assert np.array_equal(plot_rng(7, "P1").random(3), ref)
    assert np.array_equal(keyed_rng(7, "P1").random(3), ref)
    assert run_seed(5) == 5 and run_seed(np.random.default_rng(1)) == run_seed(
        np.random.default_rng(1)
    )


@pytest.mark.parametrize(
    "cls, d, match",
    [
        (ChangeSettings, {"tolerance": 1.0}, "unknown change setting"),
        (ChangeSettings, {"simulations": True}, "must be int"),
        (ChangeSettings, {"tolerance_m": -1.0}, "positive distance"),
        (CompareSettings, {"by": "county"}, "by must be one of"),
        (CompareSettings, {"permutations": 10}, ">= 99"),
        (CompareSettings, {"pool_dates": "yes"}, "must be bool"),
    ],
)
def test_new_settings_refuse_bad_values(cls, d, match):
    with pytest.raises(InputError, match=match):
        cls.from_mapping(d)


def test_every_settings_class_shares_one_from_mapping_and_round_trips():
    from ecoscan.analysis.planning import PlanSettings
    from ecoscan.analysis.scales.compute import ScalesSettings
    from ecoscan.detect import DetectionSettings
    from ecoscan.settings import Settings

    examples = [
        DispersionSettings(simulations=99, guard_m=2.0),
        ScalesSettings(kinds=("live", "dead"), kind_field="status", functions=("L",)),
        DetectionSettings(classes=(3, 4), diameter_max_m=4.0),
        ChangeSettings(tolerance_m=0.4, seed=3),
        CompareSettings(by="site"),
        PlanSettings(densities_per_ha=(400.0, 900.0)),
    ]
    for s in examples:
        cls = type(s)
        assert (
            isinstance(s, Settings) and cls.from_mapping.__func__ is Settings.from_mapping.__func__
        )
        assert cls.from_mapping(s.to_dict()) == s
        with pytest.raises(InputError, match=f"unknown {cls.SECTION} setting"):
            cls.from_mapping({"no_such_key": 1})


def test_survey_seed_reaches_change_and_compare():
    from ecoscan.survey.runner import _section_settings

    run = types.SimpleNamespace(config=types.SimpleNamespace(statistics={"seed": 2026}))
    got = _section_settings(run, ChangeSettings, {"enabled": True, "tolerance_m": 0.8})
    assert got == ChangeSettings(tolerance_m=0.8, seed=2026)
    own = _section_settings(run, CompareSettings, {"seed": 3})
    assert own.seed == 3


# ----------------------------------------------------------------------- the package


def test_import_ecoscan_loads_no_engine():
    code = (
        "import sys, ecoscan; "
        "heavy = [m for m in ('ecoscan.api', 'ecoscan.analysis', 'scipy', 'rasterio', "
        "'matplotlib', 'shapely') if m in sys.modules]; print(heavy)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_api_names_are_the_functions_and_detect_is_also_the_package():
    import ecoscan.analysis.change.columns as change_columns
    import ecoscan.detect as detect_package
    from ecoscan import api

    assert ecoscan.change is api.change and ecoscan.scales is api.scales
    assert ecoscan.compare is api.compare
    assert "tolerance_m" in str(__import__("inspect").signature(ecoscan.change))
    assert change_columns.CHANGE_COLUMNS[0] == "plot_id"
    # ecoscan.detect: the package (import ecoscan.detect as d; d.detect_raster) and, called,
    # the API function with its signature
    assert ecoscan.detect is detect_package and callable(ecoscan.detect)
    assert hasattr(detect_package, "detect_raster")
    assert "path" in str(__import__("inspect").signature(ecoscan.detect))
    for name in ecoscan.__all__:
        assert getattr(ecoscan, name) is not None
