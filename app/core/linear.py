"""Pearson's product-moment correlation."""

from __future__ import annotations

import math

import numba
import numpy as np
from scipy import special

from ..config import MIN_ROWS
from .results import TestResult, undefined
from .testing import fisher_z_interval

__all__ = ["pearson", "pearson_matrix", "correlation_t_pvalue", "complete_pairs", "constant_note"]

# A pair whose variance, after removing its own mean, is below this fraction of
# its raw sum of squares has lost most of its digits in the one-pass formula;
# it is recomputed directly from its rows.
_ILL_CONDITIONED = 1e-8


@numba.njit(cache=True, nogil=True)
def _mean(v):
    # blocks of 256 summed apart, then the block sums (see _r_kernel)
    n = v.shape[0]
    total = 0.0
    for start in range(0, n, 256):
        block = 0.0
        for k in range(start, min(start + 256, n)):
            block += v[k]
        total += block
    return total / n


@numba.njit(cache=True, nogil=True)
def _centred_scaled(v):
    """v minus its mean (two passes: the second removes the first mean's rounding), divided by its
    largest magnitude so that squares can neither overflow nor underflow; (values, peak)."""
    n = v.shape[0]
    m = _mean(v)
    out = np.empty(n)
    for k in range(n):
        out[k] = v[k] - m
    m2 = _mean(out)
    peak = 0.0
    for k in range(n):
        out[k] -= m2
        a = abs(out[k])
        if a > peak or a != a:
            peak = a
    if peak > 0.0 and peak < np.inf:
        for k in range(n):
            out[k] /= peak
    return out, peak


@numba.njit(cache=True, nogil=True)
def _r_kernel(x, y):
    """r of complete arrays with spread, in four passes; NaN when a side has none after centring."""
    cx, px = _centred_scaled(x)
    cy, py = _centred_scaled(y)
    if not (px > 0.0 and px < np.inf and py > 0.0 and py < np.inf):
        return np.nan
    n = cx.shape[0]
    sxx = syy = sxy = 0.0
    # blocks of 256 summed apart, then the block sums: rounding grows with 256 + n/256
    # terms rather than n (numpy's pairwise summation does the same)
    for start in range(0, n, 256):
        bxx = byy = bxy = 0.0
        for k in range(start, min(start + 256, n)):
            bxx += cx[k] * cx[k]
            byy += cy[k] * cy[k]
            bxy += cx[k] * cy[k]
        sxx += bxx
        syy += byy
        sxy += bxy
    if not (sxx > 0.0 and syy > 0.0):
        return np.nan
    return min(1.0, max(-1.0, sxy / (np.sqrt(sxx) * np.sqrt(syy))))


def _direct_r(x: np.ndarray, y: np.ndarray) -> float:
    """Two-pass r of complete arrays; NaN when a side is constant."""
    if x.size < 2 or np.all(x == x[0]) or np.all(y == y[0]):
        return math.nan
    return float(_r_kernel(np.ascontiguousarray(x, dtype=np.float64), np.ascontiguousarray(y, dtype=np.float64)))


def complete_pairs(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The rows where both values are finite, as float arrays.

    NaN (and +/-inf, which no measure here can use) count as missing.
    """
    x = np.asarray(x, dtype=float).reshape(-1)
    y = np.asarray(y, dtype=float).reshape(-1)
    if x.shape != y.shape:
        raise ValueError(f"x and y must have the same length ({x.size} != {y.size})")
    keep = np.isfinite(x) & np.isfinite(y)
    if keep.all():
        return x, y
    return x[keep], y[keep]


def constant_note(x: np.ndarray, y: np.ndarray) -> str:
    """"constant column: x" (or y, or both) when a side has a single value, else ""."""
    const_x = bool(np.all(x == x[0]))
    const_y = bool(np.all(y == y[0]))
    if const_x and const_y:
        return "constant column: x and y"
    if const_x:
        return "constant column: x"
    if const_y:
        return "constant column: y"
    return ""


def screen_pair(x: np.ndarray, y: np.ndarray, method: str = "") -> tuple[np.ndarray, np.ndarray, TestResult | None]:
    """The pair's complete rows, and the undefined result when too few rows or a constant side.

    Shared by the correlation coefficients, which all need at least ``MIN_ROWS``
    rows and spread on both sides.
    """
    x, y = complete_pairs(x, y)
    n = x.size
    if n < MIN_ROWS:
        return x, y, undefined(n, f"fewer than {MIN_ROWS} rows", method)
    note = constant_note(x, y)
    return x, y, (undefined(n, note, method) if note else None)


def correlation_t_pvalue(r, n):
    """Two-sided p-value of the t-test of zero correlation, n-2 degrees of freedom.

    Parameters
    ----------
    r : float or array_like
        Correlation estimates.
    n : int or array_like
        Rows used (broadcast against ``r``); NaN is returned where ``n < 3``.

    Returns
    -------
    float or numpy.ndarray
        :math:`P(|T_{n-2}| \\ge |t|)`, :math:`t = r\\sqrt{(n-2)/(1-r^2)}`.

    Notes
    -----
    Evaluated as the regularised incomplete beta function
    :math:`I_{1-r^2}((n-2)/2, 1/2)`, which equals the two-sided t tail and
    keeps full relative precision for tiny p-values; :math:`1 - r^2` is formed
    as :math:`(1-r)(1+r)` so that it does not cancel near :math:`|r| = 1`.

    Examples
    --------
    >>> round(float(correlation_t_pvalue(0.3, 50)), 6)
    0.034286
    """
    if isinstance(r, float) and isinstance(n, int):
        # one pair: the same operations on scalars, without the array machinery
        if not n >= MIN_ROWS or r != r:
            return math.nan
        r = min(1.0, max(-1.0, r))
        return float(special.betainc((n - 2.0) / 2.0, 0.5, (1.0 - r) * (1.0 + r)))
    r_arr = np.clip(np.asarray(r, dtype=float), -1.0, 1.0)
    n_arr = np.asarray(n, dtype=float)
    df = n_arr - 2.0
    one_minus_r2 = (1.0 - r_arr) * (1.0 + r_arr)
    with np.errstate(invalid="ignore"):
        p = special.betainc(np.where(df > 0, df, 1.0) / 2.0, 0.5, one_minus_r2)
    p = np.where((n_arr >= MIN_ROWS) & ~np.isnan(r_arr), p, np.nan)
    return float(p) if np.ndim(p) == 0 else p


def pearson_matrix(data: np.ndarray, *, missing: str = "pairwise") -> tuple[np.ndarray, np.ndarray]:
    """All-pairs Pearson r and the number of rows used, by (masked) BLAS products.

    Parameters
    ----------
    data : numpy.ndarray
        (n, p) float array; NaN (or inf) marks a missing value.
    missing : {"pairwise", "complete"}
        ``"pairwise"``: each pair uses the rows where both of its columns are
        present. ``"complete"``: only rows with every column present.

    Returns
    -------
    r : numpy.ndarray
        (p, p) correlations; NaN where a pair has fewer than 3 rows or a side
        is constant on the pair's rows. The diagonal is 1 for usable columns.
    n_used : numpy.ndarray
        (p, p) int64, rows used by each pair.

    Notes
    -----
    Each column is standardised by its own mean and SD over its present
    values (zeros where missing, so that missing rows drop out of every
    product) and :math:`M` is the 0/1 presence mask. For a pair (i, j):

    .. math::

        n_{ij} = (M^T M)_{ij},\\quad S_{ij} = (Z^T M)_{ij},\\quad
        Q_{ij} = ((Z \\circ Z)^T M)_{ij},\\quad P_{ij} = (Z^T Z)_{ij}

    and :math:`r_{ij} = (P_{ij} - S_{ij}S_{ji}/n_{ij}) /
    \\sqrt{(Q_{ij} - S_{ij}^2/n_{ij})(Q_{ji} - S_{ji}^2/n_{ij})}`, the
    pair-specific means entering only as the small corrections
    :math:`S/n`. Because the data are centred first, a large common offset
    costs no digits. A pair whose variance about its own mean is a tiny
    fraction of :math:`Q` (a column nearly constant on that pair's rows) is
    recomputed directly from its rows, which also detects exact constancy.

    References
    ----------
    Pearson, K. (1895). Notes on regression and inheritance in the case of two
    parents. Proc. R. Soc. Lond. 58:240-242. doi:10.1098/rspl.1895.0041

    Examples
    --------
    >>> rng = np.random.default_rng(3)
    >>> data = rng.normal(size=(100, 3))
    >>> data[::10, 0] = np.nan
    >>> r, n_used = pearson_matrix(data)
    >>> int(n_used[0, 1]), int(n_used[1, 2])
    (90, 100)
    """
    if missing not in ("pairwise", "complete"):
        raise ValueError(f"unknown missing-data policy {missing!r}; choose pairwise or complete")
    data = np.asarray(data, dtype=float)
    if data.ndim != 2:
        raise ValueError("data must be a 2-D (rows, columns) array")
    present = np.isfinite(data)
    if missing == "complete":
        rows = present.all(axis=1)
        data = data[rows]
        present = present[rows]
    n_rows, p = data.shape
    mask = present.astype(float)

    counts = present.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.where(counts > 0, np.where(present, data, 0.0).sum(axis=0) / np.maximum(counts, 1), 0.0)
        centred = np.where(present, data - means, 0.0)
        # Second pass removes the rounding left in the first mean.
        means_fix = centred.sum(axis=0) / np.maximum(counts, 1)
        centred = np.where(present, centred - means_fix, 0.0)
        # Scale by the largest magnitude before squaring so extreme units cannot overflow.
        peak = np.abs(centred).max(axis=0, initial=0.0)
        centred = centred / np.where(peak > 0, peak, 1.0)
        scale = np.sqrt((centred * centred).sum(axis=0))
    usable_col = (scale > 0) & np.isfinite(scale)
    if usable_col.any():
        col_max = np.where(present, data, -np.inf).max(axis=0)
        col_min = np.where(present, data, np.inf).min(axis=0)
        usable_col &= col_max > col_min
    z = np.where(usable_col, centred / np.where(usable_col, scale, 1.0), 0.0)

    n_used = np.rint(mask.T @ mask).astype(np.int64)
    sums = z.T @ mask              # sums[i, j]: column i over rows where j is present
    squares = (z * z).T @ mask
    cross = z.T @ z
    n_f = np.maximum(n_used, 1).astype(float)
    var_i = squares - sums * sums / n_f
    var_j = var_i.T
    cov = cross - sums * sums.T / n_f
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cov / np.sqrt(var_i * var_j)
    r = np.clip(r, -1.0, 1.0)

    defined = (n_used >= MIN_ROWS) & usable_col[:, None] & usable_col[None, :]
    fragile = defined & ((var_i <= _ILL_CONDITIONED * squares) | (var_j <= _ILL_CONDITIONED * squares.T)
                         | ~np.isfinite(r))
    r = np.where(defined, r, np.nan)
    for i, j in zip(*np.nonzero(np.triu(fragile, k=1))):
        both = present[:, i] & present[:, j]
        r[i, j] = r[j, i] = _direct_r(data[both, i], data[both, j])
    diagonal = np.where(defined.diagonal(), 1.0, np.nan)
    np.fill_diagonal(r, diagonal)
    # The products are symmetric in exact arithmetic; make them so in floating point.
    upper = np.triu(r, k=1)
    r = upper + upper.T + np.diag(diagonal)
    return r, n_used


def _permutation_pvalue(x: np.ndarray, y: np.ndarray, r: float, permutations: int, seed) -> float:
    """Two-sided (1 + #{|r_b| >= |r|}) / (B + 1) over random relabellings of y."""
    xc = x - x.mean()
    yc = y - y.mean()
    scale = math.sqrt(float(xc @ xc) * float(yc @ yc))
    rng = np.random.default_rng(seed)
    # Relative slack so that resamples equal to r up to rounding count as ties.
    threshold = abs(r) * (1.0 - 1e-12)
    hits = 0
    chunk = max(1, min(permutations, 2_000_000 // max(x.size, 1)))
    done = 0
    while done < permutations:
        b = min(chunk, permutations - done)
        perms = rng.permuted(np.tile(yc, (b, 1)), axis=1)
        hits += int(np.count_nonzero(np.abs(perms @ xc) / scale >= threshold))
        done += b
    return (1.0 + hits) / (permutations + 1.0)


def pearson(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, permutations: int = 0,
            seed=None) -> TestResult:
    """Pearson r of two 1-D arrays, t-test p-value, Fisher z interval.

    Parameters
    ----------
    x, y : numpy.ndarray
        1-D arrays of equal length. Rows where either value is NaN (or inf)
        are dropped.
    confidence : float
        Level of the interval.
    permutations : int
        When positive, the p-value is the two-sided permutation p-value
        ``(1 + #{|r_b| >= |r|}) / (B + 1)`` over ``B`` random relabellings,
        exact in level whatever the margins. The t-test assumes one margin is
        normal and is liberal when both are skewed or heavy-tailed.
    seed : numpy.random.SeedSequence or int, optional
        Seed of the relabellings.

    Returns
    -------
    TestResult
        ``estimate`` r; ``p_value`` two-sided, method ``"t, n-2 df"`` (or
        ``"permutation, B=..."``);
        Fisher z interval; ``n`` rows used. Undefined (NaN with a note) when
        fewer than 3 rows remain or a column is constant. With exactly 3 rows
        the Fisher SE is infinite and the interval is the whole range
        (-1, 1), with a note.

    Notes
    -----
    .. math::

        r = \\frac{\\sum (x_i-\\bar x)(y_i-\\bar y)}
                 {\\sqrt{\\sum (x_i-\\bar x)^2 \\sum (y_i-\\bar y)^2}},\\qquad
        t = r\\sqrt{\\frac{n-2}{1-r^2}} \\sim t_{n-2}

    under independence with a normal margin (Fisher 1915). The interval is
    :math:`\\tanh(\\operatorname{atanh} r \\mp z_{(1+c)/2}/\\sqrt{n-3})`
    (Fisher 1921).

    References
    ----------
    Pearson, K. (1895). Proc. R. Soc. Lond. 58:240-242. doi:10.1098/rspl.1895.0041

    Fisher, R.A. (1915). Frequency distribution of the values of the
    correlation coefficient in samples from an indefinitely large population.
    Biometrika 10:507-521. doi:10.2307/2331838

    Fisher, R.A. (1921). Metron 1:3-32.

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> x = rng.normal(size=40)
    >>> y = 0.6 * x + rng.normal(size=40)
    >>> res = pearson(x, y)
    >>> res.method, res.n, bool(res.ci_low < res.estimate < res.ci_high)
    ('t, n-2 df', 40, True)
    """
    method = "t, n-2 df"
    x, y, degenerate = screen_pair(x, y, method)
    if degenerate is not None:
        return degenerate
    return pearson_screened(x, y, confidence=confidence, permutations=permutations, seed=seed)


def pearson_screened(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, permutations: int = 0,
                     seed=None) -> TestResult:
    """:func:`pearson` of a pair that passed :func:`screen_pair` (complete, >= 3 rows, spread on both sides).

    The engine's presorted path has screened the pair already; both paths end here.
    """
    method = "t, n-2 df"
    n = x.size
    r = float(_r_kernel(np.ascontiguousarray(x, dtype=np.float64), np.ascontiguousarray(y, dtype=np.float64)))
    if math.isnan(r):
        return undefined(n, "column without spread after centring", method)
    if permutations > 0:
        method = f"permutation, B={int(permutations)}"
        p = _permutation_pvalue(x, y, r, int(permutations), seed)
    else:
        p = correlation_t_pvalue(r, n)
    if n > 3:
        low, high = fisher_z_interval(r, 1.0 / math.sqrt(n - 3), confidence)
        note = ""
    else:
        low, high = -1.0, 1.0
        note = "interval is the whole range: Fisher z needs more than 3 rows"
    return TestResult(r, p, method, low, high, n, note)
