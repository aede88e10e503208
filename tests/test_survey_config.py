"""The survey file: parsing, relative paths, and problems reported all at once with lines."""

import pytest

from ecoscan.errors import InputError
from ecoscan.survey.config import load_survey, locate_keys

GOOD = """\
[survey]
name = "trial"
plots = "plots.gpkg"
output = "out"

[[raster]]
path = "a.tif"
site = "North"
date = 2026-04-20

[[raster]]
path = "b.tif"
site = "North"
date = "2026-10-03"
"""


def _touch(tmp_path, *names):
    for n in names:
        (tmp_path / n).write_bytes(b"")


def test_good_file_and_relative_paths(tmp_path):
    _touch(tmp_path, "plots.gpkg", "a.tif", "b.tif")
    f = tmp_path / "s.toml"
    f.write_text(GOOD)
    cfg = load_survey(f)
    assert cfg.plots == (tmp_path / "plots.gpkg").resolve()
    assert cfg.output == (tmp_path / "out").resolve()
    assert [r.name for r in cfg.rasters] == ["a", "b"]
    assert cfg.rasters[0].date == "2026-04-20"  # TOML dates become ISO text
    assert cfg.rasters[1].line == 11


def test_locate_keys_tracks_array_tables():
    where = locate_keys(GOOD)
    assert where[("survey", "plots")] == 3
    assert where[("raster", 1, "path")] == 12
    assert where[("raster", 0)] == 6


def test_all_problems_reported_at_once_with_lines(tmp_path):
    _touch(tmp_path, "plots.gpkg")
    text = GOOD.replace('site = "North"\ndate = 2026', 'sight = "North"\ndate = 2026')
    text += "\n[statistic]\nseed = 3\n"
    f = tmp_path / "s.toml"
    f.write_text(text)
    with pytest.raises(InputError) as e:
        load_survey(f)
    msg = str(e.value)
    assert "3 problems" in msg or "4 problems" in msg
    assert "line 7: raster file 'a.tif' does not exist" in msg
    assert "line 8: unknown key 'sight' in [raster] (did you mean 'site'?)" in msg
    assert "line 12: raster file 'b.tif' does not exist" in msg
    assert "unknown section [statistic] (did you mean [statistics]?)" in msg


def test_invalid_toml(tmp_path):
    f = tmp_path / "s.toml"
    f.write_text("[survey\n")
    with pytest.raises(InputError, match="not valid TOML"):
        load_survey(f)


def test_documented_example_parses(tmp_path):
    """The example in docs/survey-file.md uses only keys the parser knows."""
    import re
    from pathlib import Path

    doc = (Path(__file__).resolve().parent.parent / "docs" / "survey-file.md").read_text()
    text = re.search(r"```toml\n(.*?)```", doc, re.S).group(1)
    _touch(tmp_path, "plots.gpkg", "spring_rgb.tif", "dem.tif", "twi.tif")
    f = tmp_path / "s.toml"
    f.write_text(text)
    cfg = load_survey(f)
    assert cfg.scales_enabled and cfg.rasters[0].detect["method"] == "imagery"
    assert set(cfg.scales["covariates"]) == {"elevation", "wetness"}
    assert cfg.statistics["simulations"] == 999 and cfg.workers == 2


def test_bad_values_reported_with_lines_before_any_work(tmp_path):
    _touch(tmp_path, "plots.gpkg", "a.tif", "b.tif")
    text = GOOD.replace(
        'date = "2026-10-03"\n', 'date = "2026-10-03"\n[raster.detect]\nmethod = "lidar"\n'
    )
    text += '\n[statistics]\nalpha = "high"\n'
    f = tmp_path / "s.toml"
    f.write_text(text)
    with pytest.raises(InputError) as e:
        load_survey(f)
    msg = str(e.value)
    assert "2 problems" in msg
    assert "line 15: [raster.detect] method 'lidar' is unknown" in msg
    # the line of the key itself, not of its section header
    assert 'line 19: [statistics] alpha should be a number between 0 and 1, not "high"' in msg


@pytest.mark.parametrize("bad", ["03/10/2026", "20/04/2026", "autumn", "2026-4-20"])
def test_dates_must_be_iso_so_that_they_sort_in_time_order(tmp_path, bad):
    # 03/10/2026 is 3 October day-first and 10 March month-first; sorted as text, 03/10
    # comes before 20/04 and autumn before spring. ISO 8601 (YYYY-MM-DD) has one reading
    # and sorts in time order (common practice).
    _touch(tmp_path, "plots.gpkg", "a.tif", "b.tif")
    f = tmp_path / "s.toml"
    f.write_text(GOOD.replace('date = "2026-10-03"', f'date = "{bad}"'))
    with pytest.raises(InputError) as exc:
        load_survey(f)
    msg = str(exc.value)
    assert f"line 14: date '{bad}'" in msg and "YYYY-MM-DD" in msg


def test_iso_dates_sort_in_time_order(tmp_path):
    _touch(tmp_path, "plots.gpkg", "a.tif", "b.tif")
    f = tmp_path / "s.toml"
    f.write_text(GOOD.replace("date = 2026-04-20", 'date = "2026-11-02"'))
    cfg = load_survey(f)
    dates = [r.date for r in cfg.rasters]
    assert sorted(dates) == ["2026-10-03", "2026-11-02"]
    with pytest.raises(InputError, match="not a calendar date"):
        f.write_text(GOOD.replace('date = "2026-10-03"', 'date = "2026-02-30"'))
        load_survey(f)
