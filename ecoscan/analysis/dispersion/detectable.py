"""What a plot could have detected: the detectable Clark–Evans R beside each verdict.

Orchestration around :func:`ecoscan.stats.power.detectable_range`: a bounded simulation
budget for per-plot use, a cache keyed by the plot's exact polygon and its number of plants
(so a survey that meets the same plot shape and count twice pays once), and the plain words
that go beside a verdict.
"""

from __future__ import annotations

import zlib
from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import shapely

from ecoscan.stats.csr import run_seed
from ecoscan.stats.power import detectable_range

__all__ = [
    "DETECTABLE_COLUMNS",
    "NO_DEPARTURE",
    "TELL_LIMITS",
    "TOO_FEW",
    "VERDICTS",
    "Detectable",
    "detectable_range_short",
    "plot_detectable",
    "settle_verdict",
    "verdict_with_range",
]

#: Columns added to a plot's row.
DETECTABLE_COLUMNS = ("detectable_clustered_R", "detectable_regular_R", "detectable_reading")

#: The verdict of a plot whose test did not reject and that could have detected a moderate
#: pattern (its detectable range lies inside :data:`TELL_LIMITS`).
NO_DEPARTURE = "no departure detected"
#: The verdict of a plot whose test did not reject and that could only have detected a
#: strong pattern (or none at all).
TOO_FEW = "too few plants to tell"
#: Every value of a plot's ``verdict`` column ('' when no test could run: fewer than 2 plants).
VERDICTS = ("clustered", "regular", NO_DEPARTURE, TOO_FEW)
#: A plot that cannot detect clustering down to R 0.6 and regularity up to R 1.5 (80% power)
#: reads "too few plants to tell". R 0.6 is a pattern whose neighbours stand 40% closer than
#: at random, R 1.5 one whose neighbours stand 50% further apart: strong patterns that a
#: survey ought to see. The limits are ecoscan's choice, stated in docs/methods-power.md.
TELL_LIMITS = (0.6, 1.5)

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
    return Detectable(d.clustered_r, d.regular_r, d.describe(*TELL_LIMITS))


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
        return Detectable(float("nan"), float("nan"), TOO_FEW)
    return _cached(shapely.to_wkb(polygon), int(n), float(alpha), run_seed(rng))


def settle_verdict(significant: str, detectable: Detectable | None) -> str:
    """A plot's short, stable verdict from its test and its detectable range.

    Parameters
    ----------
    significant : str
        ``'clustered'`` or ``'regular'`` when the Monte Carlo test rejected, else ``''``.
    detectable : Detectable or None
        The plot's detectable range (None when unknown).

    Returns
    -------
    str
        One of :data:`VERDICTS`: the direction when the test rejected; otherwise
        :data:`TOO_FEW` when the plot could not detect a pattern within
        :data:`TELL_LIMITS`, else :data:`NO_DEPARTURE`.

    Examples
    --------
    >>> settle_verdict("", Detectable(0.78, 1.25, "this plot could detect R below 0.78 or "
    ...                "above 1.25"))
    'no departure detected'
    >>> settle_verdict("", Detectable(0.45, 1.70, TOO_FEW))
    'too few plants to tell'
    >>> settle_verdict("clustered", Detectable(0.45, 1.70, TOO_FEW))
    'clustered'
    """
    if significant in ("clustered", "regular"):
        return significant
    if detectable is not None and detectable.reading == TOO_FEW:
        return TOO_FEW
    return NO_DEPARTURE


def verdict_with_range(
    verdict: str, detectable: Detectable | None, *, few_simulations_p: float = 0.0
) -> str:
    """A verdict as a sentence, with what the plot could detect when nothing was detected.

    Parameters
    ----------
    verdict : str
        The plot's verdict (one of :data:`VERDICTS`, or ``'random'`` meaning not significant).
    detectable : Detectable or None
        The plot's detectable range.
    few_simulations_p : float
        The smallest p-value the simulations allow, when it is above the level of the test
        (the test could not reject however strong the pattern); 0 otherwise.

    Returns
    -------
    str
        The verdict unchanged when significant; otherwise "no departure detected (this plot
        could detect R below … or above …)", or "too few plants to tell (this plot could only
        detect R below … or above …)".

    Examples
    --------
    >>> verdict_with_range("no departure detected", Detectable(0.78, 1.25, "this plot could "
    ...                    "detect R below 0.78 or above 1.25"))
    'no departure detected (this plot could detect R below 0.78 or above 1.25)'
    >>> verdict_with_range("too few plants to tell", Detectable(0.41, 1.62, TOO_FEW))
    'too few plants to tell (this plot could only detect R below 0.41 or above 1.62)'
    """
    if verdict in ("clustered", "regular", ""):
        return verdict
    if few_simulations_p > 0:
        word = TOO_FEW if verdict == TOO_FEW else NO_DEPARTURE
        return (
            f"{word} (too few simulations: p cannot go below {few_simulations_p:.2g}, "
            "so no pattern could be detected)"
        )
    if detectable is None or not detectable.reading:
        return NO_DEPARTURE if verdict != TOO_FEW else TOO_FEW
    lo, hi = detectable.clustered_r, detectable.regular_r
    if verdict == TOO_FEW or detectable.reading == TOO_FEW:
        if np.isfinite(lo) and np.isfinite(hi):
            return f"{TOO_FEW} (this plot could only detect R below {lo:.2f} or above {hi:.2f})"
        return TOO_FEW
    return f"{NO_DEPARTURE} ({detectable.reading})"


def detectable_range_short(row: Mapping[str, object]) -> str:
    """The detectable range of a plot row, compact: "R < 0.87 or > 1.25" ('' when unknown).

    Parameters
    ----------
    row : mapping
        A plot's row with ``detectable_clustered_R`` and ``detectable_regular_R``.

    Returns
    -------
    str

    Examples
    --------
    >>> detectable_range_short({"detectable_clustered_R": 0.871, "detectable_regular_R": 1.25})
    'R < 0.87 or > 1.25'
    >>> detectable_range_short({"detectable_clustered_R": float("nan")})
    ''
    """
    try:
        lo = float(row.get("detectable_clustered_R"))
        hi = float(row.get("detectable_regular_R"))
    except (TypeError, ValueError):
        return ""
    if not (lo == lo and hi == hi):
        return ""
    return f"R < {lo:.2f} or > {hi:.2f}"
