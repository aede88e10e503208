"""Quadrat analysis on a grid clipped to the plot.

A grid of rectangular cells of width ``sx`` and height ``sy`` (square when the user gives one
side) is laid from the lower-left corner of the plot's bounding box. The default grid
(:func:`default_quadrat_cells`) divides the bounding box into whole cells, so no thin strip of
cells is left along its far edges. Each cell is clipped to the plot, and its expected count
under complete spatial randomness is ``n · aᵢ / A`` (aᵢ its area inside the plot, A the plot
area), so irregular plots and edge cells are handled without discarding anything.

Boundary rule: cells are half-open,
``[x0 + i·sx, x0 + (i+1)·sx) × [y0 + j·sy, y0 + (j+1)·sy)``;
a point exactly on an inner grid line belongs to the cell to its right (or above). The last
column and row are closed, so a point on the far edge of the grid stays in the grid. A point
that would land in a cell with no area inside the plot (possible only for points on the plot
boundary along a grid line) goes to the neighbouring cell on the other side of that line.

Statistics: Pearson's X² with q − 1 degrees of freedom and a two-sided p-value (too even is
as informative as too clumped); the index of dispersion (variance-to-mean ratio); Morisita's
index (Morisita 1959) and the standardised Morisita index (Smith-Gill 1975, as given by
Krebs 1999, Ecological Methodology, 2nd ed.). On clipped (unequal) cells the chi-square
limits of the standardised index are wrong, so :func:`quadrat_null` takes them from the
multinomial simulation that also gives the exact p-value of X².
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely
from scipy import stats as sps

from ecoscan.stats.csr import as_rng

__all__ = [
    "DEFAULT_EXPECTED",
    "MIN_EXPECTED",
    "QuadratNull",
    "QuadratResult",
    "default_quadrat_cells",
    "morisita_index",
    "quadrat_monte_carlo",
    "quadrat_null",
    "quadrat_test",
    "standardised_morisita",
]

#: Expected count below which the chi-square approximation is doubtful (Cochran's rule of
#: thumb; common practice).
MIN_EXPECTED = 5.0

#: Points a whole default cell expects under complete spatial randomness, where n allows
#: (Cochran's rule of at least 5 expected per cell; common practice).
DEFAULT_EXPECTED = 5.0

#: Largest grid (cells in the bounding box) that is built; larger grids are refused.
MAX_CELLS = 4_000_000


def default_quadrat_cells(polygon, n: int) -> tuple[float, float]:
    """Default quadrat cells: a grid fitted to the plot whose whole cells expect ≥ 5 points.

    Parameters
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    n : int
        Number of points in the plot.

    Returns
    -------
    width_m, height_m : float
        Cell width and height in metres.

    Notes
    -----
    Target cell area a = A / max(2, ⌊n / 5⌋), so that a whole cell expects at least
    :data:`DEFAULT_EXPECTED` = 5 points when n ≥ 10 (Cochran's rule, common practice) and the
    grid has at least two cells. The bounding box (width W, height H) is then divided into
    equal cells: along the shorter side ``max(1, ⌊H/√a⌋)`` rows of height h = H / rows, along
    the longer side ``max(1, ⌊W h / a⌋)`` columns (for W ≥ H; the other way round otherwise).
    Each cell then has area ≥ a and is nearly square (sides within a ratio of 2 unless the
    plot is narrower than √a), and no thin strip of cells is left along the far edges, as a
    grid of fixed side laid from one corner would. In a rectangle all cells are equal; in
    other shapes only the cells cut by the boundary are smaller.

    Examples
    --------
    >>> import shapely
    >>> default_quadrat_cells(shapely.box(0, 0, 50, 50), 100)  # a = 125 m²: 4 rows, 5 columns
    (10.0, 12.5)
    """
    x0, y0, x1, y1 = polygon.bounds
    width, height = x1 - x0, y1 - y0
    target = float(polygon.area) / max(2, int(n // DEFAULT_EXPECTED))
    side = np.sqrt(target)
    # the shorter side first; the other side's cells are then long enough for area ≥ a
    if width >= height:
        nrows = max(1, int(np.floor(height / side + 1e-9)))
        ncols = max(1, int(np.floor(width / (target / (height / nrows)) + 1e-9)))
    else:
        ncols = max(1, int(np.floor(width / side + 1e-9)))
        nrows = max(1, int(np.floor(height / (target / (width / ncols)) + 1e-9)))
    if ncols * nrows < 2:  # at least two cells: halve the longer side
        ncols, nrows = (2, 1) if width >= height else (1, 2)
    return float(width / ncols), float(height / nrows)


def morisita_index(counts: np.ndarray, cell_share: np.ndarray | None = None) -> float:
    """Morisita's index of dispersion I_δ.

    Parameters
    ----------
    counts : numpy.ndarray, shape (q,)
        Points per quadrat.
    cell_share : numpy.ndarray, shape (q,), optional
        Each quadrat's share of the total area (sums to 1). Default: equal quadrats.

    Returns
    -------
    float
        ``I_δ = q Σ nᵢ(nᵢ − 1) / (N (N − 1))`` for equal quadrats: 1 for a random pattern,
        q when all points are in one quadrat, 0 when no quadrat holds two points. NaN for
        N < 2. For unequal (clipped) quadrats q is replaced by 1 / Σ pᵢ², which keeps
        E(I_δ) = 1 under complete spatial randomness because E[Σ nᵢ(nᵢ − 1)] = N(N − 1) Σ pᵢ².

    References
    ----------
    Morisita, M. (1959). Mem. Fac. Sci. Kyushu Univ. Ser. E (Biol.) 2: 215–235.

    Examples
    --------
    >>> import numpy as np
    >>> morisita_index(np.array([10, 0, 0, 0]))  # all in one of 4 quadrats: I = q
    4.0
    >>> morisita_index(np.array([1, 1, 1, 1]))  # no quadrat holds two points
    0.0
    """
    c = np.asarray(counts, float)
    big_n = float(c.sum())
    if big_n < 2 or c.size == 0:
        return float("nan")
    if cell_share is None:
        s2 = 1.0 / c.size
    else:
        p = np.asarray(cell_share, float)
        s2 = float(np.sum(p * p))
    return float(np.sum(c * (c - 1.0)) / (big_n * (big_n - 1.0) * s2))


def standardised_morisita(
    morisita: float, n_points: int, q: int, q_eff: float | None = None
) -> float:
    """Standardised Morisita index I_p, from −1 (regular) to +1 (clumped).

    Parameters
    ----------
    morisita : float
        Morisita's index I_δ (:func:`morisita_index`).
    n_points : int
        Total number of points N (≥ 2).
    q : int
        Number of quadrats; the chi-square quantiles use q − 1 degrees of freedom.
    q_eff : float, optional
        Effective number of quadrats 1 / Σ pᵢ² for unequal quadrats (default q).

    Returns
    -------
    float
        I_p; ±0.5 mark the 95 % limits of a random pattern. NaN when undefined.

    Notes
    -----
    Uniform index M_u = (χ²_lo − q + N) / (N − 1) and clumped index
    M_c = (χ²_hi − q + N) / (N − 1), where χ²_lo is the 2.5 % quantile and χ²_hi the 97.5 %
    quantile of χ² with q − 1 df (sources name these χ²₀.₉₇₅ and χ²₀.₀₂₅, by the upper-tail
    convention). Then

    - I_δ ≥ M_c > 1:      I_p = 0.5 + 0.5 (I_δ − M_c) / (q − M_c)
    - M_c > I_δ ≥ 1:      I_p = 0.5 (I_δ − 1) / (M_c − 1)
    - 1 > I_δ > M_u:      I_p = −0.5 (I_δ − 1) / (M_u − 1)
    - 1 > M_u > I_δ:      I_p = −0.5 + 0.5 (I_δ − M_u) / M_u

    For clipped grids ``q_eff`` takes the place of q outside the degrees of freedom; this is
    an approximation (exact for equal quadrats).

    References
    ----------
    Smith-Gill, S. J. (1975). J. Morphology 146: 35–54; formulas as given in Krebs, C. J.
    (1999). Ecological Methodology, 2nd ed., Addison-Wesley.

    Examples
    --------
    >>> standardised_morisita(1.0, 100, 10)  # a random-like index sits at 0
    0.0
    """
    if not np.isfinite(morisita) or n_points < 2 or q < 2:
        return float("nan")
    qe = float(q if q_eff is None else q_eff)
    big_n = float(n_points)
    df = q - 1
    chi_lo = float(sps.chi2.ppf(0.025, df))
    chi_hi = float(sps.chi2.ppf(0.975, df))
    mu = (chi_lo - qe + big_n) / (big_n - 1.0)
    mc = (chi_hi - qe + big_n) / (big_n - 1.0)
    return _standardise(float(morisita), mu, mc, qe)


def _standardise(i: float, mu: float, mc: float, qe: float) -> float:
    """Smith-Gill's piecewise scaling of I_δ between the limits M_u and M_c (to ±0.5)."""
    if not (np.isfinite(i) and np.isfinite(mu) and np.isfinite(mc)):
        return float("nan")
    if i >= mc > 1.0:
        ip = 0.5 + 0.5 * (i - mc) / (qe - mc) if qe > mc else 1.0
    elif mc > i >= 1.0:
        ip = 0.5 * (i - 1.0) / (mc - 1.0)
    elif 1.0 > i > mu:
        ip = -0.5 * (i - 1.0) / (mu - 1.0)
    elif mu > 0 and i <= mu:
        ip = -0.5 + 0.5 * (i - mu) / mu
    else:
        return float("nan")
    return float(np.clip(ip, -1.0, 1.0))


@dataclass(frozen=True)
class QuadratResult:
    """Quadrat counts and their tests.

    Attributes
    ----------
    statistic : float
        Pearson's X² = Σ (Oᵢ − Eᵢ)² / Eᵢ over cells with area inside the plot.
    pvalue : float
        Two-sided: min(1, 2 · min(P(χ² ≤ X²), P(χ² ≥ X²))).
    p_lower, p_upper : float
        Lower tail (too even) and upper tail (too clumped).
    df : int
        q − 1.
    cell_size_m : float
        Width of the cells, metres (their side when square).
    n : int
        Number of points.
    counts : numpy.ndarray of int, shape (q,)
        Points per cell.
    expected : numpy.ndarray, shape (q,)
        Expected counts n · aᵢ / A.
    cell_area_m2 : numpy.ndarray, shape (q,)
        Area of each cell inside the plot, m².
    cells : numpy.ndarray of shapely geometries, shape (q,)
        The clipped cells (for maps).
    row, col : numpy.ndarray of int, shape (q,)
        Grid position of each cell (row 0 at the bottom).
    origin_m : tuple of float
        Lower-left corner of the grid (x0, y0), metres.
    grid_shape : tuple of int
        (rows, columns) of the full grid over the bounding box.
    vmr : float
        Index of dispersion X² / (q − 1); equals s² / x̄ for equal cells.
    morisita : float
        Morisita's I_δ (:func:`morisita_index`).
    morisita_std : float
        Standardised Morisita I_p (:func:`standardised_morisita`).
    n_low_expected : int
        Cells with an expected count below :data:`MIN_EXPECTED`.
    cell_height_m : float
        Height of the cells, metres (equal to ``cell_size_m`` for square cells).
    """

    statistic: float
    pvalue: float
    p_lower: float
    p_upper: float
    df: int
    cell_size_m: float
    n: int
    counts: np.ndarray
    expected: np.ndarray
    cell_area_m2: np.ndarray
    cells: np.ndarray
    row: np.ndarray
    col: np.ndarray
    origin_m: tuple[float, float]
    grid_shape: tuple[int, int]
    vmr: float
    morisita: float
    morisita_std: float
    n_low_expected: int
    cell_height_m: float = float("nan")

    @property
    def q(self) -> int:
        """Number of cells with area inside the plot."""
        return int(self.counts.size)


def _grid_cells(polygon, x0: float, y0: float, sx: float, sy: float, nrows: int, ncols: int):
    """Clipped cell areas and geometries for a full grid (flat index j * ncols + i)."""
    jj, ii = np.divmod(np.arange(nrows * ncols), ncols)
    boxes = shapely.box(x0 + ii * sx, y0 + jj * sy, x0 + (ii + 1) * sx, y0 + (jj + 1) * sy)
    shapely.prepare(polygon)
    inside = shapely.contains(polygon, boxes)
    cand = ~inside & shapely.intersects(polygon, boxes)
    area = np.zeros(boxes.size)
    area[inside] = sx * sy
    cells = np.empty(boxes.size, dtype=object)
    cells[inside] = boxes[inside]
    if np.any(cand):
        clipped = shapely.intersection(boxes[cand], polygon)
        area[cand] = shapely.area(clipped)
        cells[cand] = clipped
    return area, cells


def quadrat_test(
    xy: np.ndarray,
    polygon,
    cell_size_m: float | None = None,
    *,
    cell_height_m: float | None = None,
) -> QuadratResult:
    """Quadrat counts on a rectangular grid clipped to the plot, with chi-square and indices.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Points inside (or on the boundary of) the plot, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    cell_size_m : float, optional
        Width of the cells in metres (square cells unless ``cell_height_m`` is given).
        Default: the grid of :func:`default_quadrat_cells`, fitted to the plot.
    cell_height_m : float, optional
        Height of the cells in metres (default: ``cell_size_m``).

    Returns
    -------
    QuadratResult
        NaN tests when fewer than 2 cells or no points.

    Raises
    ------
    ValueError
        For a non-positive cell size, a grid of more than 4 million cells, or a point outside
        the plot's grid.

    Notes
    -----
    Counting uses integer binning (floor of the offset over the cell size), not
    point-in-polygon tests; see the module docstring for the boundary rule.

    References
    ----------
    Pearson's X² with expected counts proportional to area; index of dispersion s² / x̄;
    Morisita (1959); Smith-Gill (1975) via Krebs (1999).

    Examples
    --------
    >>> import numpy as np, shapely
    >>> xy = np.array([[1.0, 1.0], [3.0, 1.0], [1.0, 3.0], [3.5, 3.5]])
    >>> quadrat_test(xy, shapely.box(0, 0, 4, 4), 2.0).counts.tolist()
    [1, 1, 1, 1]
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    n = xy.shape[0]
    sx, sy = _cell_size(polygon, n, cell_size_m, cell_height_m)
    x0, y0, x1, y1 = polygon.bounds
    ncols = max(1, int(np.ceil((x1 - x0) / sx - 1e-9)))
    nrows = max(1, int(np.ceil((y1 - y0) / sy - 1e-9)))
    if nrows * ncols > MAX_CELLS:
        raise ValueError(
            f"a {sx:g} m quadrat grid over this plot has {nrows * ncols} cells; use larger quadrats"
        )
    area, cells = _grid_cells(polygon, x0, y0, sx, sy, nrows, ncols)
    tiny = area <= 1e-9 * sx * sy
    area[tiny] = 0.0
    flat = _cell_of_points(xy, area, (x0, y0), (sx, sy), (nrows, ncols))

    keep = area > 0
    counts_full = np.bincount(flat, minlength=nrows * ncols)
    counts = counts_full[keep]
    a = area[keep]
    share = a / a.sum()
    expected = n * share
    q = int(counts.size)
    rows, cols = np.divmod(np.flatnonzero(keep), ncols)
    x2, df, p, p_lo, p_up, vmr = _pearson_test(counts, expected, n)
    mor = morisita_index(counts, share)
    q_eff = 1.0 / float(np.sum(share * share))
    mor_std = standardised_morisita(mor, n, q, q_eff)
    return QuadratResult(
        statistic=x2,
        pvalue=p,
        p_lower=p_lo,
        p_upper=p_up,
        df=int(df),
        cell_size_m=sx,
        n=n,
        counts=counts.astype(np.int64),
        expected=expected,
        cell_area_m2=a,
        cells=cells[keep],
        row=rows.astype(np.int64),
        col=cols.astype(np.int64),
        origin_m=(float(x0), float(y0)),
        grid_shape=(nrows, ncols),
        vmr=float(vmr),
        morisita=mor,
        morisita_std=mor_std,
        n_low_expected=int(np.sum(expected < MIN_EXPECTED)) if n > 0 else q,
        cell_height_m=sy,
    )


def _cell_size(
    polygon, n: int, cell_size_m: float | None, cell_height_m: float | None
) -> tuple[float, float]:
    """Width and height of the quadrats in metres: as given, or fitted to the plot."""
    if cell_size_m is None:
        sx, sy = default_quadrat_cells(polygon, n)
    else:
        sx = float(cell_size_m)
        sy = sx if cell_height_m is None else float(cell_height_m)
    if not (np.isfinite(sx) and sx > 0 and np.isfinite(sy) and sy > 0):
        raise ValueError("quadrat size must be a positive number of metres")
    return sx, sy


def _cell_of_points(
    xy: np.ndarray,
    area: np.ndarray,
    origin: tuple[float, float],
    size: tuple[float, float],
    shape: tuple[int, int],
) -> np.ndarray:
    """The flat grid index of each point's cell, by integer binning.

    A point on a grid line beside a cell with no plot area goes to the cell across the line
    (the module docstring's boundary rule); a point off the grid or in no cell with plot
    area is an error.
    """
    (x0, y0), (sx, sy), (nrows, ncols) = origin, size, shape
    n = xy.shape[0]
    ix = np.floor((xy[:, 0] - x0) / sx).astype(np.int64)
    iy = np.floor((xy[:, 1] - y0) / sy).astype(np.int64)
    tol = 1e-9 * max(sx, sy, 1.0)
    if n and (
        np.any(xy[:, 0] < x0 - tol)
        or np.any(xy[:, 0] > x0 + ncols * sx + tol)
        or np.any(xy[:, 1] < y0 - tol)
        or np.any(xy[:, 1] > y0 + nrows * sy + tol)
    ):
        raise ValueError("some points lie outside the plot; pass only the plot's points")
    ix = np.clip(ix, 0, ncols - 1)
    iy = np.clip(iy, 0, nrows - 1)
    flat = iy * ncols + ix
    bad = area[flat] == 0.0
    if np.any(bad):
        # points on a grid line beside a cell with no plot area: use the cell across the line
        b = np.flatnonzero(bad)
        for dx, dy in ((-1, 0), (0, -1), (-1, -1)):
            if b.size == 0:
                break
            cx, cy = ix[b] + dx, iy[b] + dy
            on_x = dx == 0 or np.isclose(xy[b, 0], x0 + ix[b] * sx, rtol=0, atol=tol)
            on_y = dy == 0 or np.isclose(xy[b, 1], y0 + iy[b] * sy, rtol=0, atol=tol)
            ok = (cx >= 0) & (cy >= 0) & on_x & on_y
            cf = np.where(ok, cy * ncols + cx, 0)
            ok &= area[cf] > 0
            flat[b[ok]] = cf[ok]
            b = b[~ok]
        if b.size:
            raise ValueError("some points lie outside the plot; pass only the plot's points")
    return flat


def _pearson_test(counts: np.ndarray, expected: np.ndarray, n: int) -> tuple:
    """Pearson's X², its degrees of freedom, two-sided, lower and upper chi-square p and the
    variance-to-mean ratio X² / df (NaN tests with fewer than 2 cells or no points)."""
    q = int(counts.size)
    nan = float("nan")
    if q >= 2 and n > 0:
        x2 = float(np.sum((counts - expected) ** 2 / expected))
        df = q - 1
        p_up = float(sps.chi2.sf(x2, df))
        p_lo = float(sps.chi2.cdf(x2, df))
        p = float(min(1.0, 2.0 * min(p_up, p_lo)))
        return x2, df, p, p_lo, p_up, x2 / df
    return nan, max(q - 1, 0), nan, nan, nan, nan


@dataclass(frozen=True)
class QuadratNull:
    """The exact null distribution of the quadrat statistics, by multinomial simulation.

    Attributes
    ----------
    pvalue : float
        Two-sided Monte Carlo p-value of Pearson's X², min(1, 2 · min(p_lower, p_upper)).
    p_lower, p_upper : float
        (1 + #{X²_sim ≤ X²}) / (N + 1) (too even) and (1 + #{X²_sim ≥ X²}) / (N + 1) (too
        clumped).
    morisita_low, morisita_high : float
        Exact uniform and clumped limits of Morisita's I_δ: an observed I_δ lies at or
        beyond them exactly when its one-sided rank p-value, (1 + #{I_sim ≤ I_δ}) / (N + 1)
        or (1 + #{I_sim ≥ I_δ}) / (N + 1), is at most 0.025. NaN when N is too small for
        that (N < 39).
    morisita_std : float
        Standardised Morisita index with these limits in place of the chi-square ones, so
        that |I_p| ≥ 0.5 exactly when the two-sided Monte Carlo test of I_δ rejects at 5 %.
    simulations : int
        N.
    """

    pvalue: float
    p_lower: float
    p_upper: float
    morisita_low: float
    morisita_high: float
    morisita_std: float
    simulations: int


def _limit(sims: np.ndarray, tail: str, level: float = 0.025) -> float:
    """Exact rank limit of a simulated statistic for a one-sided test at ``level``.

    ``tail='high'``: a value v such that an observed value t ≥ v exactly when its rank
    p-value (1 + #{sim ≥ t}) / (N + 1) ≤ level; ``'low'`` likewise with ≤. Ties are kept on
    the conservative side (a value equal to a simulated one counts that one against it).
    NaN when even the most extreme value cannot reach ``level`` (N + 1 < 1 / level).
    """
    big_n = sims.size
    allowed = int(np.floor(level * (big_n + 1.0) - 1.0 + 1e-9))  # #{sim beyond v} allowed
    if allowed < 0:
        return float("nan")
    srt = np.sort(sims)
    if tail == "high":
        v = srt[big_n - allowed - 1]  # t must lie strictly above this value
        return float(v + 1e-9 * max(1.0, abs(v)))
    v = srt[allowed]  # t must lie strictly below this value
    return float(v - 1e-9 * max(1.0, abs(v)))


def quadrat_null(
    result: QuadratResult,
    simulations: int = 999,
    *,
    rng: int | np.random.Generator | None = None,
) -> QuadratNull:
    """Exact p-value of X² and exact limits of the standardised Morisita index.

    The n points are dropped into the clipped cells with probabilities aᵢ / A (a multinomial
    draw: complete spatial randomness given n). For each simulated table X² and Morisita's
    I_δ are computed; the observed X² is ranked among the simulated ones (so tiny expected
    counts in edge cells do not distort the p-value as they do the chi-square
    approximation), and the 2.5 % limits of I_δ replace the chi-square limits M_u and M_c of
    Smith-Gill's standardisation, which assume equal cells.

    Parameters
    ----------
    result : QuadratResult
        Observed counts and cell areas from :func:`quadrat_test`.
    simulations : int
        Number of simulated tables N (≥ 1; at least 39 for the Morisita limits).
    rng : int or numpy.random.Generator, optional
        Seed or generator.

    Returns
    -------
    QuadratNull
        NaN fields when the chi-square statistic is undefined.

    References
    ----------
    Besag & Diggle (1977), Applied Statistics 26: 327–333 (rank p-values); Smith-Gill (1975)
    via Krebs (1999) for the standardisation between the limits.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> xy = np.random.default_rng(0).uniform(0, 40, (200, 2))
    >>> res = quadrat_null(quadrat_test(xy, shapely.box(0, 0, 40, 40)), 199, rng=1)
    >>> 0 < res.pvalue <= 1 and res.morisita_low < 1 < res.morisita_high
    True
    """
    nan = float("nan")
    if not np.isfinite(result.statistic) or simulations < 1:
        return QuadratNull(nan, nan, nan, nan, nan, nan, int(max(simulations, 0)))
    gen = as_rng(rng)
    share = result.expected / result.expected.sum()
    expected = result.expected
    big_n = float(result.n)
    norm = big_n * (big_n - 1.0) * float(np.sum(share * share))
    per_batch = max(1, 2_000_000 // max(result.q, 1))
    x2 = np.empty(simulations)
    mor = np.empty(simulations)
    done = 0
    while done < simulations:
        b = min(per_batch, simulations - done)
        tab = gen.multinomial(result.n, share, size=b)
        x2[done : done + b] = np.sum((tab - expected) ** 2 / expected, axis=1)
        mor[done : done + b] = np.sum(tab * (tab - 1.0), axis=1) / norm
        done += b
    x_obs = result.statistic
    tol = 1e-9 * max(1.0, abs(x_obs))
    lo = (1.0 + np.sum(x2 <= x_obs + tol)) / (simulations + 1.0)
    up = (1.0 + np.sum(x2 >= x_obs - tol)) / (simulations + 1.0)
    m_lo, m_hi = _limit(mor, "low"), _limit(mor, "high")
    q_eff = 1.0 / float(np.sum(share * share))
    c = result.counts.astype(float)
    m_obs = float(np.sum(c * (c - 1.0)) / norm) if result.n >= 2 else nan  # same rounding
    std = _standardise(m_obs, m_lo, m_hi, q_eff)
    return QuadratNull(
        float(min(1.0, 2.0 * min(lo, up))), float(lo), float(up), m_lo, m_hi, std, simulations
    )


def quadrat_monte_carlo(
    result: QuadratResult,
    simulations: int = 999,
    *,
    rng: int | np.random.Generator | None = None,
) -> tuple[float, float, float]:
    """Monte Carlo p-values of Pearson's X² (the p-value part of :func:`quadrat_null`).

    Parameters
    ----------
    result : QuadratResult
        Observed counts and cell areas from :func:`quadrat_test`.
    simulations : int
        Number of simulated tables N (≥ 1).
    rng : int or numpy.random.Generator, optional
        Seed or generator.

    Returns
    -------
    pvalue, p_lower, p_upper : float
        See :class:`QuadratNull`.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> grid = np.mgrid[1:20:2.0, 1:20:2.0].reshape(2, -1).T  # 4 points in every 4 m cell
    >>> res = quadrat_test(grid, shapely.box(0, 0, 20, 20), 4.0)
    >>> p, p_low, p_high = quadrat_monte_carlo(res, 199, rng=1)
    >>> p_low < 0.01  # counts far more even than random
    True
    """
    res = quadrat_null(result, simulations, rng=rng)
    return res.pvalue, res.p_lower, res.p_upper
