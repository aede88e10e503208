"""``ecoscan plan`` end to end and its refusals."""

import csv

import pytest

from ecoscan.cli import main


def test_plan_writes_tables_and_figure(tmp_path, capsys):
    out = tmp_path / "plan"
    code = main(
        [
            "plan",
            "--plot-size",
            "15x10",
            "--density",
            "400",
            "--plot-count",
            "4",
            "--patterns",
            "20",
            "-o",
            str(out),
        ]
    )
    assert code == 0
    text = capsys.readouterr().out
    # headings from the vocabulary, not raw column keys
    assert "detectable R, clustered" in text and "power, density change" in text
    rows = list(csv.DictReader((out / "plan-pattern.csv").open()))
    assert any(r["plants"] == "6" for r in rows)  # 400/ha on 150 m² = 6 plants
    design = list(csv.DictReader((out / "plan-design.csv").open()))
    powers = [float(r["power_density_change"]) for r in design]
    assert powers == sorted(powers)  # more plots, more power
    assert (out / "plan.png").stat().st_size > 10_000


@pytest.mark.parametrize(
    "args,message",
    [
        (["--plot-size", "10x10", "--density", "100"], "at least 2"),
        (["--plot-size", "30x30", "--density", "400", "--power", "1.5"], "--power"),
        (["--plot-size", "30x", "--density", "400"], "--plot-size"),
        (["--plot-size", "30x30", "--density", "many"], "--density"),
        (["--plot-size", "30x30", "--density", "400", "--survival", "0.8"], "two values"),
    ],
)
def test_plan_refusals(args, message, capsys, tmp_path):
    assert main(["plan", *args, "-o", str(tmp_path / "x")]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
    assert not (tmp_path / "x").exists()
