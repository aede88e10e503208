"""Quadrat analysis on a square grid clipped to the plot.

A grid of square cells of side ``s`` is laid from the lower-left corner of the plot's bounding
box. Each cell is clipped to the plot, and its expected count under complete spatial
randomness is ``n · aᵢ / A`` (aᵢ its area inside the plot, A the plot area), so irregular plots
and edge cells are handled without discarding anything.

Boundary rule: cells are half-open, ``[x0 + i·s, x0 + (i+1)·s) × [y0 + j·s, y0 + (j+1)·s)``;
a point exactly on an inner grid line belongs to the cell to its right (or above). The last
column and row are closed, so a point on the far edge of the grid stays in the grid. A point
that would land in a cell with no area inside the plot (possible only for points on the plot
boundary along a grid line) goes to the neighbouring cell on the other side of that line.

Statistics: Pearson's X² with q − 1 degrees of freedom and a two-sided p-value (too even is
as informative as too clumped); the index of dispersion (variance-to-mean ratio); Morisita's
index (Morisita 1959) and the standardised Morisita index (Smith-Gill 1975, as given by
Krebs 1999, Ecological Methodology, 2nd ed.).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely
from scipy import stats as sps

from ecoscan.stats.csr import as_rng

__all__ = [
    "MIN_EXPECTED",
    "QuadratResult",
    "default_quadrat_size",
    "morisita_index",
    "quadrat_monte_carlo",
    "quadrat_test",
    "standardised_morisita",
]

#: Expected count below which the chi-square approximation is doubtful (Cochran's rule of
#: thumb; common practice).
MIN_EXPECTED = 5.0

#: Largest grid (cells in the bounding box) that is built; larger grids are refused.
MAX_CELLS = 4_000_000


def default_quadrat_size(n: int, area_m2: float) -> float:
    """Default quadrat side: cell area ≈ 2A/n, i.e. about two points per cell.

    Parameters
    ----------
    n : int
        Number of points in the plot (≥ 1).
    area_m2 : float
        Plot area in m².

    Returns
    -------
    float
        Side length in metres, √(2A/n); NaN when n = 0.

    Notes
    -----
    The "2A/n" quadrat size is a long-standing rule of thumb for quadrat counts (common
    practice, quoted from memory). With about two points expected per cell the chi-square
    approximation is rough; the result then carries a warning (see :data:`MIN_EXPECTED`).
    """
    if n <= 0:
        return float("nan")
    return float(np.sqrt(2.0 * area_m2 / n))


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
    i = float(morisita)
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
        Side of the square cells, metres.
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

    @property
    def q(self) -> int:
        """Number of cells with area inside the plot."""
        return int(self.counts.size)


def _grid_cells(polygon, x0: float, y0: float, s: float, nrows: int, ncols: int):
    """Clipped cell areas and geometries for a full grid (flat index j * ncols + i)."""
    jj, ii = np.divmod(np.arange(nrows * ncols), ncols)
    boxes = shapely.box(x0 + ii * s, y0 + jj * s, x0 + (ii + 1) * s, y0 + (jj + 1) * s)
    shapely.prepare(polygon)
    inside = shapely.contains(polygon, boxes)
    cand = ~inside & shapely.intersects(polygon, boxes)
    area = np.zeros(boxes.size)
    area[inside] = s * s
    cells = np.empty(boxes.size, dtype=object)
    cells[inside] = boxes[inside]
    if np.any(cand):
        clipped = shapely.intersection(boxes[cand], polygon)
        area[cand] = shapely.area(clipped)
        cells[cand] = clipped
    return area, cells


def quadrat_test(xy: np.ndarray, polygon, cell_size_m: float | None = None) -> QuadratResult:
    """Quadrat counts on a square grid clipped to the plot, with chi-square and indices.

    Parameters
    ----------
    xy : numpy.ndarray, shape (n, 2)
        Points inside (or on the boundary of) the plot, metres.
    polygon : shapely.Polygon or shapely.MultiPolygon
        The plot, metres.
    cell_size_m : float, optional
        Side of the square cells in metres; default :func:`default_quadrat_size`.

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
    """
    xy = np.asarray(xy, float).reshape(-1, 2)
    n = xy.shape[0]
    area_total = float(polygon.area)
    s = default_quadrat_size(max(n, 1), area_total) if cell_size_m is None else cell_size_m
    s = float(s)
    if not (np.isfinite(s) and s > 0):
        raise ValueError("quadrat size must be a positive number of metres")
    x0, y0, x1, y1 = polygon.bounds
    ncols = max(1, int(np.ceil((x1 - x0) / s - 1e-9)))
    nrows = max(1, int(np.ceil((y1 - y0) / s - 1e-9)))
    if nrows * ncols > MAX_CELLS:
        raise ValueError(
            f"a {s:g} m quadrat grid over this plot has {nrows * ncols} cells; use larger quadrats"
        )
    area, cells = _grid_cells(polygon, x0, y0, s, nrows, ncols)
    tiny = area <= 1e-9 * s * s
    area[tiny] = 0.0

    ix = np.floor((xy[:, 0] - x0) / s).astype(np.int64)
    iy = np.floor((xy[:, 1] - y0) / s).astype(np.int64)
    tol = 1e-9 * max(s, 1.0)
    if n and (
        np.any(xy[:, 0] < x0 - tol)
        or np.any(xy[:, 0] > x0 + ncols * s + tol)
        or np.any(xy[:, 1] < y0 - tol)
        or np.any(xy[:, 1] > y0 + nrows * s + tol)
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
            on_x = dx == 0 or np.isclose(xy[b, 0], x0 + ix[b] * s, rtol=0, atol=tol)
            on_y = dy == 0 or np.isclose(xy[b, 1], y0 + iy[b] * s, rtol=0, atol=tol)
            ok = (cx >= 0) & (cy >= 0) & on_x & on_y
            cf = np.where(ok, cy * ncols + cx, 0)
            ok &= area[cf] > 0
            flat[b[ok]] = cf[ok]
            b = b[~ok]
        if b.size:
            raise ValueError("some points lie outside the plot; pass only the plot's points")

    keep = area > 0
    counts_full = np.bincount(flat, minlength=nrows * ncols)
    counts = counts_full[keep]
    a = area[keep]
    share = a / a.sum()
    expected = n * share
    q = int(counts.size)
    rows, cols = np.divmod(np.flatnonzero(keep), ncols)
    nan = float("nan")
    if q >= 2 and n > 0:
        x2 = float(np.sum((counts - expected) ** 2 / expected))
        df = q - 1
        p_up = float(sps.chi2.sf(x2, df))
        p_lo = float(sps.chi2.cdf(x2, df))
        p = float(min(1.0, 2.0 * min(p_up, p_lo)))
        vmr = x2 / df
    else:
        x2, p, p_lo, p_up, vmr = nan, nan, nan, nan, nan
        df = max(q - 1, 0)
    mor = morisita_index(counts, share)
    q_eff = 1.0 / float(np.sum(share * share))
    mor_std = standardised_morisita(mor, n, q, q_eff)
    return QuadratResult(
        statistic=x2,
        pvalue=p,
        p_lower=p_lo,
        p_upper=p_up,
        df=int(df),
        cell_size_m=s,
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
    )


def quadrat_monte_carlo(
    result: QuadratResult,
    simulations: int = 999,
    *,
    rng: int | np.random.Generator | None = None,
) -> tuple[float, float, float]:
    """Monte Carlo p-values of Pearson's X² for quadrat counts, exact for small expectations.

    The n points are dropped into the clipped cells with probabilities aᵢ / A (a multinomial
    draw: complete spatial randomness given n), X² is computed for each simulated table, and
    the observed X² is ranked among them, so tiny expected counts in edge cells do not
    distort the p-value as they do the chi-square approximation.

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
        Two-sided min(1, 2 · min(p_lower, p_upper)); p_lower = (1 + #{X²_sim ≤ X²}) / (N + 1)
        (too even), p_upper = (1 + #{X²_sim ≥ X²}) / (N + 1) (too clumped). NaN when the
        chi-square statistic is undefined.

    References
    ----------
    Besag & Diggle (1977), Applied Statistics 26: 327–333 (rank p-values).
    """
    nan = float("nan")
    if not np.isfinite(result.statistic) or simulations < 1:
        return nan, nan, nan
    gen = as_rng(rng)
    share = result.expected / result.expected.sum()
    expected = result.expected
    per_batch = max(1, 2_000_000 // max(result.q, 1))
    below = above = 0
    done = 0
    x_obs = result.statistic
    tol = 1e-9 * max(1.0, abs(x_obs))
    while done < simulations:
        b = min(per_batch, simulations - done)
        tab = gen.multinomial(result.n, share, size=b)
        x2 = np.sum((tab - expected) ** 2 / expected, axis=1)
        below += int(np.sum(x2 <= x_obs + tol))
        above += int(np.sum(x2 >= x_obs - tol))
        done += b
    lo = (1.0 + below) / (simulations + 1.0)
    up = (1.0 + above) / (simulations + 1.0)
    return float(min(1.0, 2.0 * min(lo, up))), float(lo), float(up)
