"""One vocabulary: every column has one heading everywhere, and old names are refused."""

import argparse

import numpy as np
import pytest
import shapely

from ecoscan.analysis import habitat, planning
from ecoscan.analysis.change import columns as change
from ecoscan.analysis.compare import columns as compare
from ecoscan.analysis.dispersion import columns as dispersion
from ecoscan.analysis.scales import columns as scales
from ecoscan.analysis.validation import columns as validation
from ecoscan.cli import build_parser, main
from ecoscan.report.html import table_html
from ecoscan.report.tables import format_table
from ecoscan.stats.csr import uniform_in_polygon
from ecoscan.survey import reporting
from ecoscan.vocabulary import (
    COLUMNS,
    FORMATS,
    RENAMED_OPTIONS,
    RENAMED_SURVEY_KEYS,
    format_cell,
    label,
)

#: Every table ecoscan writes or shows, by name.
TABLES = {
    "dispersion.csv": [*dispersion.DISPERSION_COLUMNS, *dispersion.EXTRA_COLUMNS],
    "groups.csv": compare.GROUP_COLUMNS,
    "comparison.csv": compare.PAIR_COLUMNS,
    "change.csv": change.CHANGE_COLUMNS,
    "plants.csv": change.PLANT_COLUMNS,
    "accuracy.csv": validation.COLUMNS,
    "scales.csv": scales.SCALES_COLUMNS,
    "functions.csv": scales.FUNCTION_COLUMNS,
    "scales.csv with habitat and marks": [*scales.SCALES_COLUMNS, *habitat.HABITAT_COLUMNS],
    "effects.csv": habitat.EFFECT_COLUMNS,
    "plan-pattern.csv": planning.PATTERN_COLUMNS,
    "plan-design.csv": planning.DESIGN_COLUMNS,
    "report index": reporting.SUMMARY_COLUMNS,
    "report detail": reporting.DETAIL_COLUMNS,
}


@pytest.mark.parametrize("name", sorted(TABLES))
def test_every_column_is_in_the_vocabulary_and_headings_differ(name):
    cols = list(TABLES[name])
    missing = [c for c in cols if c not in COLUMNS]
    assert not missing, f"{name}: {missing} have no heading in ecoscan/vocabulary.py"
    labels = [label(c) for c in cols]
    dupes = {lab for lab in labels if labels.count(lab) > 1}
    assert not dupes, f"{name}: two columns would read {dupes}"


def test_one_heading_per_column_in_terminal_and_report():
    """The terminal and the report take headings only from the vocabulary: same key, same
    heading, and no caller can pass headings of its own."""
    import inspect

    assert "headers" not in inspect.signature(format_table).parameters
    assert "headers" not in inspect.signature(table_html).parameters
    rows = [{"plot_id": "a", "R_donnelly": 1.234, "p_mc": 0.0004, "density_per_ha": 952.381}]
    cols = ["plot_id", "R_donnelly", "p_mc", "density_per_ha"]
    term = format_table(rows, cols).splitlines()[0]
    # the report may mark where a heading can wrap (after a slash) but shows the same words
    html = table_html(rows, cols).replace("&amp;", "&").replace("<wbr>", "")
    for c in cols:
        assert label(c) in term and f">{label(c)}</th>" in html


def test_every_column_has_a_format_and_description():
    for c in COLUMNS.values():
        assert c.fmt in FORMATS, c.key
        assert c.description.endswith((".", "?")), c.key
        assert c.heading and c.heading == c.heading.strip()


def test_number_formats():
    # p-values: three decimals, and "<0.001" rather than a row of zeros (common practice)
    assert format_cell("p_mc", 0.0004) == "<0.001"
    assert format_cell("p_mc", 0.001) == "0.001"
    assert format_cell("p_donnelly", 0.04213) == "0.042"
    # densities in whole plants per hectare: 140 plants on 1470 m² = 952.38/ha -> 952
    assert format_cell("density_per_ha", 140 / 0.147) == "952"
    # R to two decimals
    assert format_cell("R", 1.7571) == "1.76" and format_cell("R_donnelly", 0.765) in (
        "0.77",
        "0.76",
    )
    assert format_cell("R", float("nan")) == "" and format_cell("warnings", None) == ""
    assert format_cell("perm_exact", True) == "yes"


def test_no_retired_names_in_the_vocabulary():
    # identifiers of other programs' interfaces are not ours to use
    retired = {"observed", "theoretical", "lo", "hi", "envelope", "alternative", "r_max_m"}
    assert not retired & set(COLUMNS)
    assert not any(k.endswith("_border") for k in COLUMNS)


def _options(parser: argparse.ArgumentParser) -> dict[str, dict[str, str]]:
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    out = {}
    for name, p in sub.choices.items():
        out[name] = {
            o: a.dest for a in p._actions for o in a.option_strings if a.help != argparse.SUPPRESS
        }
    return out


def test_output_option_is_spelt_the_same_in_every_command():
    for cmd, opts in _options(build_parser()).items():
        if "-o" in opts:
            assert opts["-o"] == "output" and "--output" in opts, cmd
        for old in RENAMED_OPTIONS:
            assert old not in opts, (cmd, old)


@pytest.mark.parametrize(
    "argv, new",
    [
        (
            ["analyse", "p.csv", "--plots", "x", "-o", "o", "--alternative", "two-sided"],
            "--direction",
        ),
        (["analyse", "p.csv", "--plots", "x", "-o", "o", "--direction", "two-sided"], "either"),
        (["scales", "p.csv", "--plots", "x", "-o", "o", "--rmax", "5"], "--max-distance"),
        (["scales", "p.csv", "--plots", "x", "-o", "o", "--test", "erl"], "--global-test"),
        (["scales", "p.csv", "--plots", "x", "-o", "o", "--global-test", "mad"], "max-deviation"),
        (["compare", "a", "b", "--out", "o"], "--output"),
        (["change", "a", "b", "--tolerance", "0.5", "--out", "o"], "--output"),
    ],
)
def test_retired_options_are_refused_with_the_new_name(argv, new, capsys, tmp_path):
    with pytest.raises(SystemExit) as exc:
        main(argv)
    assert exc.value.code == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("error: ") and new in err and "\n" not in err
    assert not (tmp_path / "o").exists()


def test_retired_survey_keys_are_refused_with_the_new_name(tmp_path):
    from ecoscan.errors import InputError
    from ecoscan.survey.config import load_survey

    (tmp_path / "plots.gpkg").write_bytes(b"")
    (tmp_path / "a.tif").write_bytes(b"")
    f = tmp_path / "s.toml"
    f.write_text(
        '[survey]\nplots = "plots.gpkg"\n[statistics]\nalternative = "two-sided"\n'
        '[scales]\nr_max_m = 5.0\nn_r = 50\n[[raster]]\npath = "a.tif"\n'
    )
    with pytest.raises(InputError) as exc:
        load_survey(f)
    msg = str(exc.value)
    for old in ("alternative", "r_max_m", "n_r"):
        assert f"'{old}'" in msg and f"renamed '{RENAMED_SURVEY_KEYS[old]}'" in msg


def test_results_to_stdout_notes_to_stderr_quiet_silences_notes_only(tmp_path, capsys):
    rng = np.random.default_rng(3)
    plots = {"a": shapely.box(0, 0, 30, 30), "b": shapely.box(30, 0, 50, 20)}
    xy = np.vstack(
        [uniform_in_polygon(plots["a"], 40, rng=rng), uniform_in_polygon(plots["b"], 8, rng=rng)]
    )
    pts = tmp_path / "p.csv"
    pts.write_text("x,y\n" + "".join(f"{a:.3f},{b:.3f}\n" for a, b in xy))
    from pyproj import CRS

    from ecoscan.io.vector import plots_from_geometries, write_plots
    from ecoscan.model.plots import PlotLayer

    recs, _ = plots_from_geometries(list(plots.values()), list(plots))
    plots_file = write_plots(PlotLayer(recs, CRS.from_epsg(32633)), tmp_path / "plots.gpkg")
    base = ["analyse", str(pts), "--plots", str(plots_file), "--crs", "EPSG:32633",
            "--simulations", "39"]  # fmt: skip
    assert main([*base, "-o", str(tmp_path / "r1")]) == 0
    out, err = capsys.readouterr()
    assert out.splitlines()[0].split()[:3] == ["plot", "n", "plants/ha"]
    assert "note:" not in out and "warning:" not in out
    assert "note: results in" in err and "warning: plot b:" in err  # b has 8 plants (< 30)
    assert main([*base, "-o", str(tmp_path / "r2"), "--quiet"]) == 0
    out_q, err_q = capsys.readouterr()
    assert out_q == out.replace(str(tmp_path / "r1"), str(tmp_path / "r2"))
    assert "note:" not in err_q and "warning: plot b:" in err_q
