"""What a plot could have detected: the detectable Clark–Evans R beside each verdict.

Orchestration around :func:`ecoscan.stats.power.detectable_range`: a bounded simulation
budget for per-plot use, a cache keyed by the plot's exact polygon and its number of plants
(so a survey that meets the same plot shape and count twice pays once), and the plain words
that go beside a verdict.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import shapely

from ecoscan.stats.csr import run_seed
from ecoscan.stats.power import detectable_range

__all__ = ["DETECTABLE_COLUMNS", "Detectable", "plot_detectable", "verdict_with_range"]

#: Columns added to a plot's row.
DETECTABLE_COLUMNS = ("detectable_clustered_R", "detectable_regular_R", "detectable_reading")

#: Random patterns forming the reference set, and simulated patterns per alternative
#: strength, for per-plot use (``ecoscan plan`` uses more).
REFERENCE_PATTERNS = 499
PATTERNS_PER_STRENGTH = 60
#: Plants above which the range comes from the normal approximation straight away.
PER_PLOT_SIMULATE_UP_TO = 600


@dataclass(frozen=True)
class Detectable:
    """The detectable range of one plot.

    Attributes
    ----------
    clustered_r, regular_r : float
        R below which clustering, and above which regularity, the plot's Monte Carlo test
        detects with 80% power (NaN when no alternative tried reaches it).
    reading : str
        Plain words: "this plot could detect R below 0.78 or above 1.25", or "too few
        plants to tell".
    """

    clustered_r: float
    regular_r: float
    reading: str

    def row(self) -> dict[str, object]:
        """The :data:`DETECTABLE_COLUMNS` of a plot's row."""
        return dict(
            zip(DETECTABLE_COLUMNS, (self.clustered_r, self.regular_r, self.reading), strict=True)
        )


@lru_cache(maxsize=4096)
def _cached(wkb: bytes, n: int, alpha: float, seed: int) -> Detectable:
    polygon = shapely.from_wkb(wkb)
    rng = np.random.default_rng(np.random.SeedSequence([seed, zlib.crc32(wkb), n]))
    d = detectable_range(
        polygon,
        n,
        alpha=alpha,
        simulations=REFERENCE_PATTERNS,
        patterns=PATTERNS_PER_STRENGTH,
        simulate_up_to=PER_PLOT_SIMULATE_UP_TO,
        rng=rng,
    )
    return Detectable(d.clustered_r, d.regular_r, d.describe())


def plot_detectable(
    polygon: shapely.Geometry,
    n: int,
    *,
    alpha: float = 0.05,
    rng: int | np.random.Generator | None = 1,
) -> Detectable:
    """The detectable Clark–Evans R of a plot with ``n`` plants (80% power).

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    n : int
        Plants in the plot.
    alpha : float
        Level of the plot's test.
    rng : int, numpy.random.Generator or None
        Seed (a generator gives one draw); the stream also depends on the polygon and n,
        not on other plots.

    Returns
    -------
    Detectable
        NaN and "too few plants to tell" below 3 plants.

    Examples
    --------
    >>> import shapely
    >>> plot_detectable(shapely.box(0, 0, 10, 10), 2).reading
    'too few plants to tell'
    """
    if n < 3 or polygon is None or polygon.is_empty or not polygon.area > 0:
        return Detectable(float("nan"), float("nan"), "too few plants to tell")
    return _cached(shapely.to_wkb(polygon), int(n), float(alpha), run_seed(rng))


def verdict_with_range(verdict: str, detectable: Detectable) -> str:
    """A verdict in words, with what the plot could detect when nothing was detected.

    Parameters
    ----------
    verdict : str
        ``'clustered'``, ``'regular'`` or ``'random'``.
    detectable : Detectable
        The plot's detectable range.

    Returns
    -------
    str
        The verdict unchanged when significant; otherwise "no departure detected (this plot
        could detect R below … or above …)" or "too few plants to tell".

    Examples
    --------
    >>> verdict_with_range("random", Detectable(0.78, 1.25, "this plot could detect R below "
    ...                    "0.78 or above 1.25"))
    'no departure detected (this plot could detect R below 0.78 or above 1.25)'
    """
    if verdict in ("clustered", "regular"):
        return verdict
    if detectable.reading == "too few plants to tell":
        return "too few plants to tell"
    return f"no departure detected ({detectable.reading})"
