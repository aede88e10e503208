"""The validity-table script (benchmarks/validity.py): its core on a tiny configuration, its
flagging of a biased test, that its entries give the commands' own numbers, and one check
against an outside fact (the edge bias of the uncorrected Clark–Evans test in a square)."""

import csv
import math

import numpy as np
import pytest
from scipy import stats as sps

from benchmarks import validity as v
from ecoscan.analysis.dispersion.compute import DispersionSettings, analyse_plot
from ecoscan.analysis.scales.compute import ScalesSettings
from ecoscan.analysis.scales.compute import analyse_plot as scales_plot
from ecoscan.stats.csr import plot_rng, uniform_in_polygon
from ecoscan.stats.nearest import clark_evans, donnelly


def _entries(*prefixes):
    out = [e for e in v.REGISTRY if e.name.startswith(prefixes)]
    assert len(out) >= len(prefixes)
    return out


def test_registry_lists_every_reported_test():
    names = " / ".join(e.name for e in v.REGISTRY)
    for word in (
        "no edge correction",
        "Donnelly",
        "guard",
        "Monte Carlo NN",
        "quadrat χ²",
        "quadrat exact",
        "VMR",
        "Morisita I_δ",
        "standardised Morisita",
        "global envelope, L",
        "global envelope, g",
        "cross-type",
        "rate test",
        "ΔR z test",
        "ΔR permutation",
        "Mann–Whitney",
        "Kolmogorov–Smirnov",
        "count change",
        "R change",
    ):
        assert word in names, word
    assert len({e.name for e in v.REGISTRY}) == len(v.REGISTRY)
    assert {e.kind for e in v.REGISTRY} >= {"plot", "labelled", "groups", "dates"}


def test_core_runs_a_tiny_configuration(tmp_path):
    chosen = _entries("Clark–Evans R, no", "quadrat χ²", "rate test", "count change")
    res = v.run_validity(
        shapes=["square", "strip"],
        sizes=[30],
        replicates=6,
        power_replicates=3,
        processes=["csr", "thomas"],
        entries=chosen,
        seed=3,
    )
    # one row per test and cell: 4 tests × 2 shapes × 1 size × 2 processes
    assert len(res) == 16
    for r in res:
        assert r.replicates == (6 if r.process == "csr" else 3)
        assert 0 <= r.rejected <= r.computed <= r.replicates
    md = v.markdown_report(res, command="python benchmarks/validity.py --test", seconds=1.0)
    assert "| test | command | verdict | square n=30 | strip n=30 |" in md
    assert md.count("\n| Clark–Evans R, no edge correction |") == 2  # size and power tables
    path = tmp_path / "v.csv"
    v.write_csv(str(path), res)
    rows = list(csv.DictReader(path.open(encoding="utf-8")))
    assert len(rows) == 16 and tuple(rows[0]) == v.CSV_COLUMNS
    # same seed, same numbers, whatever the number of jobs
    again = v.run_validity(
        shapes=["square", "strip"],
        sizes=[30],
        replicates=6,
        power_replicates=3,
        processes=["csr", "thomas"],
        entries=chosen,
        seed=3,
        chunk=2,
    )
    assert [r.rejected for r in again] == [r.rejected for r in res]


def test_a_biased_test_is_flagged_and_a_fair_one_is_not():
    always = v.Entry("always 0.01", "test", "plot", lambda d, p, r: 0.01, verdict=True)
    fair = v.Entry("uniform p", "test", "plot", lambda d, p, r: float(r.uniform()), verdict=True)
    silent = v.Entry("not a verdict", "test", "plot", lambda d, p, r: 0.01, verdict=False)
    res = v.run_validity(
        shapes=["square"],
        sizes=[30],
        replicates=3000,
        power_replicates=0,
        entries=[always, fair, silent],
        seed=5,
        chunk=1000,
    )
    rate = {r.test: r.rate for r in res}
    assert rate["always 0.01"] == 1.0
    # a uniform p-value rejects 5 %: 3000 replicates give SE 0.4 %, the band is ±2 %
    assert 0.03 <= rate["uniform p"] <= 0.07
    assert v.flag_approximate(res) == ["always 0.01"]
    md = v.markdown_report(res, command="x", seconds=0.0)
    assert "| always 0.01 | test | yes | **100.0** |" in md
    assert "| not a verdict | test | no | 100.0 |" in md


def test_entries_give_the_commands_numbers():
    poly = v.SHAPES["L+hole"]
    xy = uniform_in_polygon(poly, 60, rng=11)
    seed = int(np.random.default_rng(0).integers(2**31))  # what the entries draw first
    settings = DispersionSettings(simulations=v.ANALYSE_SIMULATIONS, seed=seed)
    row = analyse_plot(xy, poly, "plot", settings).row()
    rng = np.random.default_rng(0)
    p = {e.name: e.pvalue(xy, poly, rng) for e in v.REGISTRY if e.command == "analyse"}
    assert p["Clark–Evans R, no edge correction"] == row["p"]
    assert p["Clark–Evans R, Donnelly correction"] == row["p_donnelly"]
    assert p["Monte Carlo NN test (the `verdict`)"] == row["p_mc"]
    assert p["quadrat exact (quadrat_p_mc)"] == row["quadrat_p_mc"]
    reject = abs(row["morisita_std"]) >= 0.5
    assert p["standardised Morisita I_p beyond ±0.5"] == (0.0 if reject else 1.0)
    # VMR = X² / (q − 1) (docs/methods-dispersion.md), so its test is the quadrat χ² test
    assert p["VMR: (q−1)·VMR against χ²(q−1)"] == pytest.approx(row["quadrat_p"], rel=1e-9)
    # the envelope test simulates as `scales` does: same stream, same p-value
    v.POOLS.clear()
    (erl,) = _entries("global envelope, L, extreme")
    mine = erl.pvalue(xy, poly, plot_rng(1, "a"))
    theirs = scales_plot(xy, poly, "a", ScalesSettings(simulations=99, functions=("L",)))
    assert theirs.global_test == "rank-length" and theirs.test_function == "L"
    assert mine == theirs.p_global


def test_uncorrected_clark_evans_size_matches_donnellys_edge_bias():
    # Outside fact: Donnelly (1978), Simulation Studies in Archaeology pp. 91–95, found by
    # simulation in rectangles that without edge correction the mean NN distance of n random
    # points is E ≈ 0.5 √(A/n) + (0.0514 + 0.041/√n) P/n with Var ≈ 0.0703 A/n² +
    # 0.037 P √(A/n⁵) (constants as listed in the project's reference list; from the
    # source's secondary quotations). The uncorrected test (Clark & Evans 1954, Ecology 35:
    # 445, SE 0.26136/√(nρ)) therefore rejects more than 5 % in a square, by an amount these
    # formulas predict; and the Donnelly-corrected test holds about 5 % in a square.
    n, side = 300, 100.0
    area, perim = side * side, 4 * side
    e_ce = 0.5 * math.sqrt(area / n)
    se_ce = 0.26136 / math.sqrt(n * n / area)
    e_d = e_ce + (0.0514 + 0.041 / math.sqrt(n)) * perim / n
    sd_d = math.sqrt(0.0703 * area / n**2 + 0.037 * perim * math.sqrt(area / n**5))
    z = sps.norm.ppf(0.975)
    predicted = sps.norm.sf((e_ce + z * se_ce - e_d) / sd_d) + sps.norm.cdf(
        (e_ce - z * se_ce - e_d) / sd_d
    )
    assert 0.10 < predicted < 0.20  # about 13 %: the edge bias is most of a standard error
    # the two functions `analyse` calls, as cheap entries of the script's registry type
    naive_entry = v.Entry(
        "naive", "analyse", "plot", lambda xy, p, r: clark_evans(xy, p.area).pvalue, False
    )
    donnelly_entry = v.Entry(
        "donnelly", "analyse", "plot", lambda xy, p, r: donnelly(xy, p).pvalue, False
    )
    res = v.run_validity(
        shapes=["square"],
        sizes=[n],
        replicates=2000,
        power_replicates=0,
        entries=[naive_entry, donnelly_entry],
        seed=7,
        chunk=500,
    )
    naive, corrected = res
    # binomial tolerance: 2000 replicates, SE ≤ 0.8 %; 4 SE plus 1 % for the formulas
    assert abs(naive.rate - predicted) < 4 * math.sqrt(predicted * (1 - predicted) / 2000) + 0.01
    assert abs(corrected.rate - 0.05) < 4 * math.sqrt(0.05 * 0.95 / 2000)  # 3.0–7.0 %


def test_quoted_tables_in_the_method_references_are_replaced(tmp_path):
    res = [
        v.Result("Monte Carlo NN test", "analyse", True, "square", 30, "csr", 100, 100, 12),
        v.Result("Monte Carlo NN test", "analyse", True, "square", 30, "thomas", 50, 50, 40),
        v.Result("ΔR permutation", "compare", False, "square", 30, "csr", 100, 100, 5),
    ]
    doc = tmp_path / "methods-dispersion.md"
    doc.write_text(f"# x\n\n{v._MARK_START}\nold numbers\n{v._MARK_END}\n\nafter\n", "utf-8")
    assert v.update_docs(res, str(tmp_path), "run.csv") == [str(doc)]
    text = doc.read_text("utf-8")
    assert "old numbers" not in text and text.endswith("\n\nafter\n")
    assert "| Monte Carlo NN test | analyse | yes | **12.0** |" in text  # outside 3–7 %
    assert "| Monte Carlo NN test | analyse | yes | 80.0 |" in text  # power, not flagged
    assert "ΔR permutation" not in text  # compare rows go to methods-compare.md
    assert v.update_docs(res, str(tmp_path), "run.csv") == []  # nothing left to change
