"""The HTML report: self-contained, images decode in a real browser, no console errors."""

import os

import numpy as np
import pytest
import shapely
from browser import IMAGES_OK_JS, find_chromium, inspect_page

from ecoscan.report.figures.dispersion import nn_histogram_figure, r_against_n_figure
from ecoscan.report.html import ReportSection, build_report, figure_html, table_html


def _small_report(tmp_path):
    rng = np.random.default_rng(0)
    nn = rng.rayleigh(1.0, 80)
    f1 = nn_histogram_figure(tmp_path / "nn.png", nn, 0.08, title="test plot")
    rows = [
        {"plot_id": "a", "n": 80, "R": 1.02, "verdict": "random", "warnings": ""},
        {
            "plot_id": "b",
            "n": 20,
            "R": 1.7,
            "verdict": "regular",
            "warnings": "fewer than 30 points",
        },
    ]
    f2 = r_against_n_figure(tmp_path / "rn.png", rows)
    body = table_html(rows, ["plot_id", "n", "R", "verdict", "warnings"])
    body += figure_html(f1, "spacing") + figure_html(f2, "R against n")
    return build_report(
        tmp_path / "report.html",
        title="Test survey",
        subtitle="unit test",
        sections=[
            ReportSection("Summary", body, "summary"),
            ReportSection("Cautions", "<p>check in the field</p>", "cautions"),
        ],
    )


def test_report_is_self_contained(tmp_path):
    path = _small_report(tmp_path)
    text = path.read_text()
    assert text.count("data:image/png;base64,") == 2
    # no external resources: nothing fetched over the network (self-contained file)
    for bad in ("http://", "https://", "<script src", "<link "):
        assert bad not in text
    assert "fewer than 30 points" in text


@pytest.mark.browser
def test_report_in_headless_chromium(tmp_path):
    if find_chromium() is None:
        if os.environ.get("CI") == "true":
            pytest.fail("CI must run the browser test: install Debian's chromium")
        pytest.skip("chromium is not installed (apt-get install chromium)")
    path = _small_report(tmp_path)
    out = inspect_page(path, tmp_path / "screenshot.png", IMAGES_OK_JS)
    assert out["value"]["count"] == 2
    assert out["value"]["decoded"] == 2
    assert out["value"]["sections"] == 2
    assert out["errors"] == []
    png = (tmp_path / "screenshot.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 10_000


def test_polygon_drawing_handles_holes(tmp_path):
    from ecoscan.report.figures.dispersion import quadrat_map_figure

    poly = shapely.box(0, 0, 10, 10).difference(shapely.box(4, 4, 6, 6))
    cells = [poly.intersection(shapely.box(x, y, x + 5, y + 5)) for x in (0, 5) for y in (0, 5)]
    p = quadrat_map_figure(tmp_path / "q.png", poly, cells, np.array([1, 2, 3, 4]))
    assert p.read_bytes()[:4] == b"\x89PNG"


def test_methods_section_names_the_sources():
    from ecoscan.report.html import methods_html

    base = methods_html()
    assert "Clark, P. J." in base and "Donnelly" in base and "Besag" in base
    assert "Woebbecke" not in base and "Myllymäki" not in base
    full = methods_html(topics=["detection", "scales", "compare", "change"])
    for source in ("Woebbecke", "Popescu", "Ripley", "Myllymäki", "Holm", "Wilson", "Kuhn"):
        assert source in full


def test_long_text_cells_wrap_between_words_only():
    html = table_html(
        [{"group": "Tansy Hollow/rows 2026-04-20", "site": "Tansy Hollow"}], ["group", "site"]
    )
    # a long label may wrap, but not inside its date; a short one stays on one line
    assert '<td class="text long">Tansy Hollow/rows <span class="nw">2026-04-20</span></td>' in html
    assert '<td class="text">Tansy Hollow</td>' in html
    # a short cell with a date: the date stays whole when print lets short cells wrap
    html = table_html([{"date": "2026-04-20"}], ["date"])
    assert '<td class="text"><span class="nw">2026-04-20</span></td>' in html


def test_short_warning_flags_come_from_codes_not_wording():
    from ecoscan.analysis.change.compute import detect_change
    from ecoscan.model.notes import WARNING, JoinedNotes, Note
    from ecoscan.model.points import PointSet
    from ecoscan.survey.reporting import short_warnings

    cell = JoinedNotes(
        [
            Note("16 of 16 quadrats expect fewer than 5 points", "quadrat-approximate", WARNING),
            Note("any wording at all", "few-plants", WARNING),
        ]
    )
    assert str(cell) == "16 of 16 quadrats expect fewer than 5 points; any wording at all"
    assert short_warnings(cell) == "few plants"
    # the wording alone flags nothing: a plain text shows its start
    assert short_warnings("fewer than 30 plants") == "fewer than 30 plants"
    assert short_warnings("") == ""
    # a change row's cell: 3 plants on each date (fewer than 30) gives the few-plants code
    xy = np.array([[0.0, 0.0], [5.0, 0.0], [0.0, 5.0]])
    pts = PointSet(xy[:, 0], xy[:, 1])
    row = detect_change(pts, pts, 0.5, simulations=0, estimate_shift=False).overall
    assert row["warnings"].codes == ("few-plants",)
    assert short_warnings(row["warnings"]) == "few plants"
    # a pair of one-plot groups: its own flag, never a sentence cut inside a word
    one = JoinedNotes(
        [
            Note(
                "1 and 1 plot(s): no rearrangement of whole plots exists, so "
                "the permutation tests cannot run",
                "no-rearrangement",
                WARNING,
            )
        ]
    )
    assert short_warnings(one) == "no permutation test"
    long = "the comparison of these two groups rests on assumptions worth reading"
    shown = short_warnings(long)
    assert shown.endswith("…") and long.startswith(shown[:-1]) and len(shown) <= 41
    assert long[len(shown) - 1] == " "  # cut between words


def test_warnings_in_plain_words_once():
    from ecoscan.survey.reporting import plain_warnings

    got = plain_warnings(
        "only 22 points (fewer than 30): the tests have little power; read the verdict with "
        "caution; 16 of 16 quadrats expect fewer than 5 points: quadrat_p is approximate "
        "(quadrat_p_mc is exact)",
        "only 22 plants: only strong patterns can be detected",
    )
    text = " ".join(got)
    assert "quadrat_p" not in text and "quadrat_p_mc" not in text  # no column keys
    assert got[0].startswith("Only 22 plants (fewer than 30)")
    # the few-plants warning of the scales analysis is the same warning: said once
    assert len(got) == 2 and all(w.endswith(".") for w in got)
