"""The table of the per-plot dispersion analysis: ``dispersion.csv``.

The required columns in order, the further ones, and the row builder over
:class:`~ecoscan.analysis.dispersion.compute.PlotDispersion` records.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import TYPE_CHECKING, Any

from ecoscan.analysis.dispersion.detectable import DETECTABLE_COLUMNS

if TYPE_CHECKING:
    from ecoscan.analysis.dispersion.compute import PlotDispersion

__all__ = [
    "DISPERSION_COLUMNS",
    "EXTRA_COLUMNS",
    "dispersion_rows",
]


#: Required columns of ``dispersion.csv``, in order (results-folder convention).
DISPERSION_COLUMNS: tuple[str, ...] = (
    "plot_id",
    "n",
    "area_m2",
    "density_per_ha",
    "mean_nn_m",
    "expected_nn_m",
    "R",
    "z",
    "p",
    "R_donnelly",
    "z_donnelly",
    "p_donnelly",
    "p_mc",
    "verdict",
    "quadrat_size_m",
    "quadrat_chi2",
    "quadrat_df",
    "quadrat_p",
    "vmr",
    "morisita",
    "morisita_std",
    "warnings",
)


#: Further columns that follow the required ones.
EXTRA_COLUMNS: tuple[str, ...] = (
    "perimeter_m",
    "expected_nn_donnelly_m",
    "expected_nn_mc_m",
    "p_mc_clustered",
    "p_mc_regular",
    "simulations",
    "guard_m",
    "n_guard_focal",
    "R_guard",
    "z_guard",
    "p_guard",
    "quadrat_p_mc",
    "quadrat_height_m",
    "quadrat_cells",
    "quadrat_low_expected",
    "n_coincident",
    "summary",
    *DETECTABLE_COLUMNS,
    "verdict_in_words",
    "pattern_in_metres",
    "cluster_plants",
    "cluster_plants_low95",
    "cluster_plants_high95",
    "cluster_width_m",
    "cluster_width_low95_m",
    "cluster_width_high95_m",
    "clusters_per_ha",
    "clusters_per_ha_low95",
    "clusters_per_ha_high95",
    "cluster_fit_p",
    "inhibition_m",
)


def dispersion_rows(results: Iterable[PlotDispersion]) -> list[dict[str, Any]]:
    """Table rows, one per plot: :data:`DISPERSION_COLUMNS` in order, then the extras."""
    return [r.row() for r in results]
