"""One vocabulary for every table ecoscan shows or writes.

Each column key (the name in CSV files, JSON records and Python result rows) has exactly one
heading, one unit, one description and one number format here. The terminal tables
(:mod:`ecoscan.report.tables`), the HTML report (:mod:`ecoscan.report.html`) and the column
reference in ``docs/columns.md`` all read this table, so one quantity never has two names.

Number formats
--------------
``text``      as written
``int``       whole number
``p``         p-value: three decimals, ``<0.001`` below 0.001
``density``   plants per hectare, rounded to whole plants
``index``     dimensionless index (Clark–Evans R, ratios, shares): two decimals
``m``         metres: two decimals
``area``      square metres: whole numbers
``stat``      test statistic (z, X², U, D): two decimals
``float``     three significant digits
``bool``      yes / no

Examples
--------
>>> COLUMNS["density_per_ha"].label
'plants/ha'
>>> format_cell("p_mc", 0.0004)
'<0.001'
>>> format_cell("density_per_ha", 952.381)
'952'
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

__all__ = [
    "COLUMNS",
    "RENAMED_OPTIONS",
    "RENAMED_SURVEY_KEYS",
    "RENAMED_VALUES",
    "Column",
    "format_cell",
    "label",
]

FORMATS = ("text", "int", "p", "density", "index", "m", "area", "stat", "float", "bool")


@dataclass(frozen=True)
class Column:
    """One column of ecoscan's tables.

    Attributes
    ----------
    key : str
        Name in CSV files, JSON and Python rows.
    heading : str
        Short heading for the terminal and the report (without the unit).
    unit : str
        Unit shown after the heading, e.g. ``m``; empty when dimensionless.
    description : str
        One plain sentence for the column reference and the report's tooltips.
    fmt : str
        Number format, one of :data:`FORMATS`.
    """

    key: str
    heading: str
    unit: str
    description: str
    fmt: str

    @property
    def label(self) -> str:
        """The heading with its unit, e.g. ``mean NN (m)``; plants/ha stands alone."""
        if not self.unit or self.unit == self.heading:
            return self.heading
        return f"{self.heading} ({self.unit})"


def _c(key: str, heading: str, unit: str, fmt: str, description: str) -> Column:
    return Column(key, heading, unit, description, fmt)


_ALL = [
    # --- identity
    _c("site", "site", "", "text", "Site name from the survey file."),
    _c("date", "date", "", "text", "Survey date (ISO 8601)."),
    _c("raster", "raster", "", "text", "Raster name from the survey file."),
    _c("plot_id", "plot", "", "text", "Plot identifier from the plots file."),
    _c("group", "group", "", "text", "Site, date, plot or folder that forms a comparison group."),
    _c("group_a", "group A", "", "text", "First group of the pair."),
    _c("group_b", "group B", "", "text", "Second group of the pair."),
    _c("plant_id", "plant", "", "text", "Plant number in the change table."),
    _c("status", "status", "", "text", "persisting, lost or new."),
    _c("kind_a", "kind A", "", "text", "First kind of plant (e.g. live)."),
    _c("kind_b", "kind B", "", "text", "Second kind of plant (e.g. dead)."),
    _c("function", "function", "", "text", "Summary function: K, L, L_minus_r, g, G, F, J..."),
    _c("unit", "unit", "", "text", "Unit of the function's values (m2, m or 1)."),
    _c("warnings", "warnings", "", "text", "What limits the result, in plain words."),
    _c("flags", "check", "", "text", "Short flags for what limits a result; details below."),
    # --- counts, areas, densities
    _c("n", "n", "", "int", "Plants in the plot (or group)."),
    _c("n_plots", "plots", "", "int", "Plots in the group."),
    _c("n_a", "n A", "", "int", "Plants in group (or kind) A."),
    _c("n_b", "n B", "", "int", "Plants in group (or kind) B."),
    _c("area_m2", "area", "m²", "area", "Plot area."),
    _c("area_a_m2", "area A", "m²", "area", "Area of group A."),
    _c("area_b_m2", "area B", "m²", "area", "Area of group B."),
    _c("perimeter_m", "perimeter", "m", "m", "Plot perimeter, holes included."),
    _c("density_per_ha", "plants/ha", "plants/ha", "density", "Plants per hectare."),
    _c("density_a_per_ha", "plants/ha A", "", "density", "Plants per hectare in group A."),
    _c("density_b_per_ha", "plants/ha B", "", "density", "Plants per hectare in group B."),
    _c("density_diff_per_ha", "Δ plants/ha", "", "density", "Density of A minus density of B."),
    _c("density_ratio", "density ratio", "", "index", "Density of A divided by density of B."),
    _c("density_ratio_low95", "ratio low 95%", "", "index", "Lower 95% limit of the ratio."),
    _c("density_ratio_high95", "ratio high 95%", "", "index", "Upper 95% limit of the ratio."),
    _c(
        "p_density",
        "p density",
        "",
        "p",
        "Exact test of equal plant densities (two Poisson rates).",
    ),
    # --- nearest neighbour and Clark–Evans
    _c("mean_nn_m", "mean NN", "m", "m", "Mean distance from each plant to its nearest neighbour."),
    _c(
        "expected_nn_m", "expected NN", "m", "m", "Mean NN distance expected if plants were random."
    ),
    _c(
        "expected_nn_donnelly_m",
        "expected NN, Donnelly",
        "m",
        "m",
        "Expected mean NN distance with Donnelly's edge correction.",
    ),
    _c(
        "expected_nn_mc_m",
        "expected NN, simulated",
        "m",
        "m",
        "Mean NN distance of random patterns simulated in the exact plot outline.",
    ),
    _c("R", "R", "", "index", "Clark–Evans index: 1 random, below 1 clustered, above 1 regular."),
    _c("z", "z", "", "stat", "Clark–Evans z score (no edge correction)."),
    _c("p", "p", "", "p", "Clark–Evans p-value (no edge correction)."),
    _c("R_se", "R std. error", "", "index", "Standard error of the pooled R."),
    _c("R_low95", "R low 95%", "", "index", "Lower 95% limit of R."),
    _c("R_high95", "R high 95%", "", "index", "Upper 95% limit of R."),
    _c("R_donnelly", "R Donnelly", "", "index", "Clark–Evans R with Donnelly's edge correction."),
    _c("z_donnelly", "z Donnelly", "", "stat", "z score with Donnelly's edge correction."),
    _c("p_donnelly", "p Donnelly", "", "p", "p-value with Donnelly's edge correction."),
    _c("R_donnelly_low95", "R Donnelly low 95%", "", "index", "Lower 95% limit of R Donnelly."),
    _c("R_donnelly_high95", "R Donnelly high 95%", "", "index", "Upper 95% limit of R Donnelly."),
    _c("summary", "in words", "", "text", "The plot's result in one plain sentence."),
    _c(
        "detectable_reading",
        "could detect",
        "",
        "text",
        "What this plot's Monte Carlo test could detect with 80% power, as Clark–Evans R.",
    ),
    _c(
        "R_donnelly_se",
        "R Donnelly std. error",
        "",
        "index",
        "Standard error of pooled R Donnelly.",
    ),
    _c("guard_m", "guard zone", "m", "m", "Width of the guard zone inside the plot edge."),
    _c(
        "n_guard_focal", "n inside guard", "", "int", "Plants farther than the guard from the edge."
    ),
    _c("R_guard", "R guard zone", "", "index", "Clark–Evans R measured from the guarded plants."),
    _c("z_guard", "z guard zone", "", "stat", "z score of the guard-zone estimate."),
    _c("p_guard", "p guard zone", "", "p", "p-value of the guard-zone estimate."),
    _c(
        "p_mc",
        "p Monte Carlo",
        "",
        "p",
        "Monte Carlo test in the exact plot outline; it gives the verdict.",
    ),
    _c("p_mc_clustered", "p MC clustered", "", "p", "One-sided Monte Carlo p towards clustering."),
    _c("p_mc_regular", "p MC regular", "", "p", "One-sided Monte Carlo p towards regularity."),
    _c("simulations", "simulations", "", "int", "Random patterns simulated for the test."),
    _c(
        "verdict",
        "verdict",
        "",
        "text",
        "clustered, regular, no departure detected, or too few plants to tell (no departure "
        "detected by a plot that could only detect R below 0.6 or above 1.5): per plot from "
        "the Monte Carlo test and the plot's detectable range, per group from the R interval.",
    ),
    _c(
        "verdict_in_words",
        "verdict in words",
        "",
        "text",
        "The verdict as a sentence, with the R this plot could detect when it found no departure.",
    ),
    _c(
        "detectable_range",
        "could detect",
        "",
        "text",
        "Clark–Evans R this plot's test detects with 80% power: below the first value "
        "(clustering) or above the second (regularity).",
    ),
    _c(
        "pattern_in_metres",
        "pattern in metres",
        "",
        "text",
        "Fitted cluster size and spacing (clustered plots) or how far apart plants keep "
        "(regular plots), with 95% intervals.",
    ),
    _c(
        "cluster_plants",
        "plants per cluster",
        "",
        "index",
        "Mean plants per cluster of the fitted Thomas process (clustered plots).",
    ),
    _c("cluster_plants_low95", "plants per cluster low 95%", "", "index", "Lower 95% limit."),
    _c("cluster_plants_high95", "plants per cluster high 95%", "", "index", "Upper 95% limit."),
    _c(
        "cluster_width_m",
        "cluster width",
        "m",
        "m",
        "Twice the fitted cluster spread σ: a typical cluster's width.",
    ),
    _c("cluster_width_low95_m", "cluster width low 95%", "m", "m", "Lower 95% limit."),
    _c("cluster_width_high95_m", "cluster width high 95%", "m", "m", "Upper 95% limit."),
    _c("clusters_per_ha", "clusters/ha", "", "density", "Fitted clusters per hectare."),
    _c("clusters_per_ha_low95", "clusters/ha low 95%", "", "density", "Lower 95% limit."),
    _c("clusters_per_ha_high95", "clusters/ha high 95%", "", "density", "Upper 95% limit."),
    _c(
        "cluster_fit_p",
        "p cluster model",
        "",
        "p",
        "Global envelope test of the fitted Thomas process; small means it fits poorly.",
    ),
    _c(
        "inhibition_m",
        "plants keep apart",
        "m",
        "m",
        "Distance that 95% of plants keep from their nearest neighbour (regular plots).",
    ),
    _c("n_coincident", "coincident", "", "int", "Plants sharing a position with another plant."),
    # --- quadrats
    _c("quadrat_size_m", "quadrat width", "m", "m", "Width (east-west side) of the quadrats."),
    _c(
        "quadrat_height_m",
        "quadrat height",
        "m",
        "m",
        "Height (north-south side) of the quadrats; cells are fitted to the plot.",
    ),
    _c("quadrat_chi2", "quadrat X²", "", "stat", "Pearson's X² of the quadrat counts."),
    _c("quadrat_df", "quadrat df", "", "int", "Degrees of freedom of the quadrat X²."),
    _c("quadrat_p", "quadrat p", "", "p", "Quadrat test p-value from the X² distribution."),
    _c(
        "quadrat_p_mc",
        "quadrat p, simulated",
        "",
        "p",
        "Quadrat test p-value from simulated counts (exact for small counts).",
    ),
    _c("quadrat_cells", "quadrats", "", "int", "Quadrats (clipped to the plot)."),
    _c(
        "quadrat_low_expected",
        "quadrats < 5 expected",
        "",
        "int",
        "Quadrats expecting fewer than 5 plants.",
    ),
    _c("vmr", "variance/mean", "", "index", "Variance-to-mean ratio of quadrat counts."),
    _c("morisita", "Morisita", "", "index", "Morisita's index of dispersion."),
    _c(
        "morisita_std",
        "Morisita std.",
        "",
        "index",
        "Standardised Morisita index, −1 (even) to +1 (clumped); ±0.5 at the 95% limits.",
    ),
    # --- comparison
    _c("rank_regularity", "rank", "", "int", "Rank from most regular (1) to most clustered."),
    _c("R_a", "R A", "", "index", "Pooled Clark–Evans R of group A."),
    _c("R_b", "R B", "", "index", "Pooled Clark–Evans R of group B."),
    _c("R_diff", "ΔR", "", "index", "R of A minus R of B."),
    _c("R_diff_se", "ΔR std. error", "", "index", "Standard error of ΔR."),
    _c("z_R_diff", "z ΔR", "", "stat", "z score of ΔR."),
    _c("p_R_diff", "p ΔR", "", "p", "z test of ΔR."),
    _c("R_donnelly_a", "R Donnelly A", "", "index", "Pooled R Donnelly of group A."),
    _c("R_donnelly_b", "R Donnelly B", "", "index", "Pooled R Donnelly of group B."),
    _c("R_donnelly_diff", "ΔR Donnelly", "", "index", "R Donnelly of A minus that of B."),
    _c(
        "R_donnelly_diff_se",
        "ΔR Donnelly std. error",
        "",
        "index",
        "Standard error of ΔR Donnelly.",
    ),
    _c("z_R_donnelly_diff", "z ΔR Donnelly", "", "stat", "z score of ΔR Donnelly."),
    _c("p_R_donnelly_diff", "p ΔR Donnelly", "", "p", "z test of ΔR Donnelly."),
    _c("p_R_perm", "p ΔR permutation", "", "p", "Permutation test of ΔR moving whole plots."),
    _c("perm_arrangements", "arrangements", "", "int", "Arrangements of plots used."),
    _c("perm_exact", "all arrangements", "", "bool", "Whether every arrangement was used."),
    _c("mw_u", "Mann-Whitney U", "", "stat", "Mann-Whitney U of the NN distances."),
    _c("p_mw", "p Mann-Whitney", "", "p", "Mann-Whitney test of the NN distances."),
    _c("ks_d", "Kolmogorov-Smirnov D", "", "stat", "Kolmogorov-Smirnov D of the NN distances."),
    _c("p_ks", "p Kolmogorov-Smirnov", "", "p", "Kolmogorov-Smirnov test of the NN distances."),
    _c(
        "nn_distribution_gap",
        "NN distribution gap",
        "",
        "stat",
        "Largest gap between the two groups' NN-distance distributions (permutation D).",
    ),
    _c(
        "p_nn_distribution",
        "p NN distances (perm.)",
        "",
        "p",
        "Permutation test of the NN-distance distributions, moving whole plots.",
    ),
    _c(
        "nn_distribution_arrangements",
        "NN arrangements",
        "",
        "int",
        "Arrangements of plots used by the NN-distance test.",
    ),
    _c("paired_plots", "plots on both", "", "int", "Plots surveyed in both groups (dates)."),
    _c(
        "density_diff_paired_per_ha",
        "mean Δ plants/ha",
        "",
        "density",
        "Mean over paired plots of the density difference.",
    ),
    _c(
        "p_density_paired",
        "p density (paired)",
        "",
        "p",
        "Sign-flip test of the paired density differences.",
    ),
    _c("R_diff_paired", "mean ΔR", "", "index", "Mean over paired plots of the R difference."),
    _c("p_R_paired", "p ΔR (paired)", "", "p", "Sign-flip test of the paired R differences."),
    _c(
        "paired_arrangements",
        "sign arrangements",
        "",
        "int",
        "Sign arrangements used by the paired tests.",
    ),
    _c(
        "p_nn_distribution_holm",
        "p NN distances (perm., Holm)",
        "",
        "p",
        "p NN distances adjusted for several pairs.",
    ),
    _c(
        "p_density_paired_holm",
        "p density (paired, Holm)",
        "",
        "p",
        "p density (paired) adjusted for several pairs.",
    ),
    _c(
        "p_R_paired_holm",
        "p ΔR (paired, Holm)",
        "",
        "p",
        "p ΔR (paired) adjusted for several pairs.",
    ),
    _c("p_density_holm", "p density (Holm)", "", "p", "p density adjusted for several pairs."),
    _c("p_R_diff_holm", "p ΔR (Holm)", "", "p", "p ΔR adjusted for several pairs."),
    _c(
        "p_R_donnelly_diff_holm",
        "p ΔR Donnelly (Holm)",
        "",
        "p",
        "p ΔR Donnelly adjusted for several pairs.",
    ),
    _c(
        "p_R_perm_holm",
        "p ΔR permutation (Holm)",
        "",
        "p",
        "p ΔR permutation adjusted for several pairs.",
    ),
    _c("p_mw_holm", "p Mann-Whitney (Holm)", "", "p", "p Mann-Whitney adjusted for several pairs."),
    _c(
        "p_ks_holm",
        "p Kolmogorov-Smirnov (Holm)",
        "",
        "p",
        "p Kolmogorov-Smirnov adjusted for several pairs.",
    ),
    # --- change between dates
    _c("n_earlier", "n before", "", "int", "Plants at the earlier date."),
    _c("n_later", "n after", "", "int", "Plants at the later date."),
    _c("persisting", "persisting", "", "int", "Plants found at both dates."),
    _c("lost", "lost", "", "int", "Plants found only at the earlier date."),
    _c("new", "new", "", "int", "Plants found only at the later date."),
    _c("survival", "survival", "", "index", "Share of earlier plants still there."),
    _c("survival_low95", "survival low 95%", "", "index", "Lower 95% Wilson limit of survival."),
    _c("survival_high95", "survival high 95%", "", "index", "Upper 95% Wilson limit of survival."),
    _c("mortality", "mortality", "", "index", "Share of earlier plants lost."),
    _c("recruitment", "recruitment", "", "index", "New plants per earlier plant."),
    _c("density_earlier_per_ha", "plants/ha before", "", "density", "Density at the earlier date."),
    _c("density_later_per_ha", "plants/ha after", "", "density", "Density at the later date."),
    _c(
        "density_change_per_ha",
        "Δ plants/ha",
        "",
        "density",
        "Density at the later date minus density at the earlier date.",
    ),
    _c("p_count_change", "p count change", "", "p", "Exact test of equal counts at both dates."),
    _c("R_earlier", "R before", "", "index", "Clark–Evans R at the earlier date."),
    _c("R_later", "R after", "", "index", "Clark–Evans R at the later date."),
    _c("R_change", "ΔR", "", "index", "R after minus R before."),
    _c("R_change_se", "ΔR std. error", "", "index", "Standard error of the change in R."),
    _c("z_R_change", "z ΔR", "", "stat", "z score of the change in R."),
    _c("p_R_change", "p ΔR", "", "p", "z test of the change in R."),
    _c(
        "R_later_null",
        "R after, random change",
        "",
        "index",
        "Mean R after when losses and recruits fall at random.",
    ),
    _c(
        "p_R_change_mc",
        "p ΔR vs random change",
        "",
        "p",
        "Monte Carlo test: did R change more than random losses and recruits would give?",
    ),
    _c("x", "x", "m", "m", "Easting."),
    _c("y", "y", "m", "m", "Northing."),
    _c("x_earlier_m", "x before", "m", "m", "Easting at the earlier date."),
    _c("y_earlier_m", "y before", "m", "m", "Northing at the earlier date."),
    _c("x_later_m", "x after", "m", "m", "Easting at the later date (shift removed)."),
    _c("y_later_m", "y after", "m", "m", "Northing at the later date (shift removed)."),
    _c("offset_m", "offset", "m", "m", "Distance between a plant's two positions."),
    _c("earlier_row", "row before", "", "int", "Row of the plant in the earlier points file."),
    _c("later_row", "row after", "", "int", "Row of the plant in the later points file."),
    # --- detection accuracy
    _c("tp", "found", "", "int", "Detections paired with a reference plant (true positives)."),
    _c("fp", "false", "", "int", "Detections without a reference plant (false positives)."),
    _c("fn", "missed", "", "int", "Reference plants without a detection."),
    _c("precision", "precision", "", "index", "Share of detections that are real plants."),
    _c("recall", "recall", "", "index", "Share of real plants detected."),
    _c("f1", "F1", "", "index", "Harmonic mean of precision and recall."),
    _c("count_error", "count error", "", "int", "Detected minus reference count."),
    _c("mean_offset_m", "mean offset", "m", "m", "Mean distance of paired detections."),
    # --- scales
    _c("global_test", "global test", "", "text", "Global test that gives the scales verdict."),
    _c("p_global", "p global", "", "p", "p-value of the global test."),
    _c("clustered_ranges_m", "clustered at", "m", "text", "Distances at which plants cluster."),
    _c("regular_ranges_m", "regular at", "m", "text", "Distances at which plants are regular."),
    _c("test_function", "test function", "", "text", "Function of the global test (L or g)."),
    _c("max_distance_m", "max distance", "m", "m", "Largest distance analysed."),
    _c("bandwidth_m", "bandwidth", "m", "m", "Kernel bandwidth of the pair correlation g."),
    _c("p_kinds", "p kinds", "", "p", "Random-labelling test of L between the two kinds of plant."),
    _c(
        "p_kind_difference",
        "p K difference",
        "",
        "p",
        "Random-labelling test of K of kind B minus K of kind A.",
    ),
    _c(
        "kinds_verdict",
        "kinds verdict",
        "",
        "text",
        "Is kind B placed like a random subset of all plants?",
    ),
    _c("distance_m", "distance", "m", "m", "Distance r at which the function is evaluated."),
    _c("value", "value", "", "float", "The function measured on the plants."),
    _c(
        "csr_value",
        "random value",
        "",
        "float",
        "The function's value if plants were placed at random.",
    ),
    _c(
        "band_low", "band low", "", "float", "Lower edge of the global 95% band of random patterns."
    ),
    _c(
        "band_high",
        "band high",
        "",
        "float",
        "Upper edge of the global 95% band of random patterns.",
    ),
    _c("pointwise_low", "pointwise low", "", "float", "Lower edge of the pointwise band."),
    _c("pointwise_high", "pointwise high", "", "float", "Upper edge of the pointwise band."),
    _c("band", "band", "", "text", "What the band is (level and global test)."),
    # --- why the pattern: habitat covariates and marks (ecoscan.analysis.habitat)
    _c(
        "intensity_model",
        "density model",
        "",
        "text",
        "What the fitted plant density follows: the covariates, or a kernel smoothing.",
    ),
    _c(
        "p_habitat",
        "p beyond habitat",
        "",
        "p",
        "Global test of the inhomogeneous L against the fitted density model.",
    ),
    _c(
        "beyond_clustered_m",
        "clustered beyond model at",
        "m",
        "text",
        "Distances at which plants cluster more than the fitted density explains.",
    ),
    _c(
        "beyond_regular_m",
        "more even than model at",
        "m",
        "text",
        "Distances at which plants are more evenly spaced than the fitted density implies.",
    ),
    _c(
        "habitat_verdict",
        "habitat verdict",
        "",
        "text",
        "Is the clustering explained by the covariates, or is there clustering beyond them?",
    ),
    _c("mark", "mark", "", "text", "Point column whose relation to spacing was tested."),
    _c(
        "p_marks",
        "p marks",
        "",
        "p",
        "Random-permutation global test of the mark correlation function.",
    ),
    _c(
        "marks_smaller_m",
        "neighbours smaller at",
        "m",
        "text",
        "Distances at which neighbouring plants have smaller marks than average.",
    ),
    _c(
        "marks_larger_m",
        "neighbours larger at",
        "m",
        "text",
        "Distances at which neighbouring plants have larger marks than average.",
    ),
    _c(
        "marks_verdict",
        "size and spacing",
        "",
        "text",
        "Does a plant's mark depend on how close its neighbours are?",
    ),
    _c("covariate", "covariate", "", "text", "Habitat covariate (a raster) in the density model."),
    _c("covariate_unit", "covariate unit", "", "text", "Unit of the covariate's values."),
    _c(
        "coefficient_per_unit",
        "coefficient",
        "per unit",
        "float",
        "Change in log plant density per unit of the covariate.",
    ),
    _c("std_error", "std. error", "per unit", "float", "Standard error of the coefficient."),
    _c(
        "coefficient_low",
        "coefficient low",
        "per unit",
        "float",
        "Lower confidence limit of the coefficient (level 1 - alpha).",
    ),
    _c(
        "coefficient_high",
        "coefficient high",
        "per unit",
        "float",
        "Upper confidence limit of the coefficient (level 1 - alpha).",
    ),
    _c("p_covariate", "p covariate", "", "p", "Wald test of no effect of the covariate."),
    _c("step", "step", "", "float", "Round change of the covariate used to state its effect."),
    _c(
        "ratio_per_step",
        "density ratio per step",
        "",
        "index",
        "Plant density after one step up the covariate divided by density before.",
    ),
    _c("ratio_low", "ratio low", "", "index", "Lower confidence limit of the density ratio."),
    _c("ratio_high", "ratio high", "", "index", "Upper confidence limit of the density ratio."),
    _c("effect", "effect", "", "text", "The covariate's effect on plant density in words."),
    # --- planning (ecoscan plan)
    _c("plot_shape", "plot shape", "", "text", "Plot shape the plan is for."),
    _c("plants", "plants", "", "int", "Plants per plot at the planned density."),
    _c(
        "detectable_clustered_R",
        "detectable R, clustered",
        "",
        "index",
        "Largest clustered R detected with the target power.",
    ),
    _c(
        "detectable_regular_R",
        "detectable R, regular",
        "",
        "index",
        "Smallest regular R detected with the target power.",
    ),
    _c(
        "power_clustered_target",
        "power, clustered target",
        "",
        "index",
        "Power against the clustered target R.",
    ),
    _c(
        "power_regular_target",
        "power, regular target",
        "",
        "index",
        "Power against the regular target R.",
    ),
    _c("reading", "reading", "", "text", "The detectable range in words."),
    _c("plots", "plots", "", "int", "Plots per site or date."),
    _c("surveyed_area_m2", "surveyed area", "m²", "area", "Area of all plots together."),
    _c(
        "power_density_change",
        "power, density change",
        "",
        "index",
        "Power to detect the planned change in density.",
    ),
    _c("plants_per_site", "plants per site", "", "int", "Plants in all plots of a site."),
    _c(
        "power_survival_difference",
        "power, survival difference",
        "",
        "index",
        "Power to detect the planned difference in survival.",
    ),
    # --- calibration (ecoscan calibrate)
    _c("layer", "layer", "", "text", "Image layer (band, index or classifier) scored."),
    _c("diameter_range_m", "diameter range", "m", "text", "Crown diameters detected, MIN:MAX."),
    _c("mapped_plants", "mapped plants", "", "int", "Reference plants used for training."),
    # --- detection summary
    _c("method", "method", "", "text", "Detector and vegetation layer used."),
    _c("pixel_size_m", "pixel size", "m", "m", "Raster pixel size."),
    _c("tiles", "tiles read", "", "text", "Tiles read of all tiles in the raster."),
    _c("megapixels_read", "megapixels read", "", "float", "Pixels read, in millions."),
    _c("output", "output", "", "text", "File written."),
]

#: Every column, by key.
COLUMNS: dict[str, Column] = {c.key: c for c in _ALL}

#: Command-line options renamed in 0.2; the old spelling is refused with the new one named.
RENAMED_OPTIONS: dict[str, str] = {
    "--alternative": "--direction",
    "--rmax": "--max-distance",
    "--test": "--global-test",
    "--out": "--output",
}

#: Survey-file keys renamed in 0.2 (old key -> new key).
RENAMED_SURVEY_KEYS: dict[str, str] = {
    "alternative": "direction",
    "r_max_m": "max_distance_m",
    "n_r": "steps",
    "test": "global_test",
}

#: Option and key values renamed in 0.2 (old value -> new value).
RENAMED_VALUES: dict[str, str] = {
    "two-sided": "either",
    "erl": "rank-length",
    "mad": "max-deviation",
}


def label(key: str) -> str:
    """The heading (with unit) of a column; an unknown key is shown as it is.

    Examples
    --------
    >>> label("mean_nn_m")
    'mean NN (m)'
    """
    c = COLUMNS.get(key)
    return c.label if c else key


def _is_missing(v: Any) -> bool:
    return v is None or v == "" or (isinstance(v, float) and math.isnan(v))


def format_cell(key: str, value: Any) -> str:
    """A value as shown in the terminal and the report, in its column's format.

    Parameters
    ----------
    key : str
        Column key (see :data:`COLUMNS`); unknown keys get the ``float`` format for numbers.
    value : object
        The value; None, NaN and ``""`` are shown as ``""``.

    Returns
    -------
    str

    Examples
    --------
    >>> format_cell("R", 1.7571)
    '1.76'
    >>> format_cell("p_donnelly", 0.0421)
    '0.042'
    """
    if _is_missing(value):
        return ""
    if isinstance(value, str):
        return value
    fmt = COLUMNS[key].fmt if key in COLUMNS else "float"
    if isinstance(value, bool) or fmt == "bool":
        return "yes" if value else "no"
    if not isinstance(value, (int, float)):
        return str(value)
    v = float(value)
    if math.isinf(v):
        return "∞" if v > 0 else "−∞"
    if fmt == "int":
        return f"{v:.0f}"
    if fmt == "p":
        return "<0.001" if v < 0.001 else f"{v:.3f}"
    if fmt in ("density", "area"):
        s = f"{v:.0f}"
        return "0" if s == "-0" else s
    if fmt in ("index", "m", "stat"):
        s = f"{v:.2f}"
        return "0.00" if s == "-0.00" else s
    if fmt == "text":
        return str(value)
    if isinstance(value, int):
        return str(value)
    return f"{v:.3g}"


def format_row(row: Mapping[str, Any], columns) -> list[str]:
    """The cells of one row, formatted by :func:`format_cell`."""
    return [format_cell(c, row.get(c)) for c in columns]
