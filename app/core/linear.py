"""Pearson's product-moment correlation."""

from __future__ import annotations

import cmath
import itertools
import math
from functools import lru_cache

import numpy as np
from scipy import special

from .jit import kernel
from ..config import (MIN_ROWS, PEARSON_EXACT_MAX_N, PEARSON_SPLIT2_GROUPS, PEARSON_SPLIT2_SHARE,
                      PEARSON_SPLIT_GROUPS, PEARSON_SPLIT_MAX_N, PEARSON_SPLIT_SHARE, T_SERIES_MAX_DF,
                      T_SERIES_MIN_P)
from .results import TestResult, undefined
from .testing import fisher_z_interval

__all__ = ["pearson", "pearson_matrix", "correlation_t_pvalue", "permutation_moments",
           "pearson_curve_sf", "moment_pvalue", "complete_pairs", "constant_note", "TESTS",
           "DEFAULT_TEST", "resolved_test"]

# Methods of Pearson's p-value that --test pearson=METHOD can choose (the first is the default).
TESTS = ("moments", "t", "permutation")
DEFAULT_TEST = TESTS[0]
_METHOD_LABELS = {"moments": "permutation law from exact moments (Pearson curve)",
                  "exact": "exact permutation (all relabellings)",
                  "t": "t, n-2 df"}

# A pair whose variance, after removing its own mean, is below this fraction of
# its raw sum of squares has lost most of its digits in the one-pass formula;
# it is recomputed directly from its rows.
_ILL_CONDITIONED = 1e-8


@kernel(cache=True, nogil=True, python_max_n=64)
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


@kernel(cache=True, nogil=True, python_max_n=64)
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


@kernel(cache=True, nogil=True, python_max_n=64)
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


_T_SERIES_CHUNK = 512     # pairs a Horner pass runs over at once (three arrays of it stay in L1)


@kernel(cache=True, nogil=True)
def _t_series_pvalues(r, df, coefficients, min_p, out):
    """Two-sided t p-values at one even or odd ``df`` from the finite series; NaN where the caller
    must use the incomplete beta function (p at or below ``min_p``).

    Horner's rule runs over a chunk of pairs at a time so that the inner loop is over pairs
    (vectorised) rather than over the coefficients (a chain of dependent multiply-adds).
    """
    size = r.shape[0]
    terms = coefficients.shape[0]
    a = np.empty(_T_SERIES_CHUNK)
    x = np.empty(_T_SERIES_CHUNK)
    s = np.empty(_T_SERIES_CHUNK)
    odd = df % 2 == 1
    for start in range(0, size, _T_SERIES_CHUNK):
        stop = min(size, start + _T_SERIES_CHUNK)
        m = stop - start
        for e in range(m):
            v = abs(r[start + e])
            if v > 1.0:
                v = 1.0
            a[e] = v
            x[e] = (1.0 - v) * (1.0 + v)
            s[e] = coefficients[terms - 1]
        for k in range(terms - 2, -1, -1):
            c = coefficients[k]
            for e in range(m):
                s[e] = s[e] * x[e] + c
        for e in range(m):
            v = a[e]
            if v != v:
                out[start + e] = np.nan
                continue
            if odd:
                p = 1.0 - (2.0 / np.pi) * (np.arcsin(v) + v * np.sqrt(x[e]) * s[e])
            else:
                p = 1.0 - v * s[e]
            out[start + e] = p if p > min_p else np.nan


@lru_cache(maxsize=64)
def _t_series_coefficients(df: int) -> np.ndarray:
    # even df: c_0 = 1, c_k = c_{k-1} (2k-1)/(2k), k < df/2; odd df: d_0 = 1, d_k = d_{k-1} 2k/(2k+1), k < (df-1)/2
    terms = df // 2 if df % 2 == 0 else (df - 1) // 2
    out = np.ones(max(terms, 1))
    for k in range(1, terms):
        out[k] = out[k - 1] * ((2 * k - 1) / (2 * k) if df % 2 == 0 else (2 * k) / (2 * k + 1))
    return out if terms > 0 else np.zeros(1)     # df = 1: p = 1 - (2/pi) asin|r|


def _t_series(r: np.ndarray, n_rows: np.ndarray) -> np.ndarray:
    """The series p-values of ``r`` (rows ``n_rows``), NaN where it does not apply."""
    out = np.full(r.shape, np.nan)
    if r.size == 0:
        return out
    low, high = int(n_rows.min()), int(n_rows.max())
    # one row count (complete columns) is the common case: no grouping pass over the pairs
    for n in ([low] if low == high else np.unique(n_rows).tolist()):
        df = int(n) - 2
        if not 1 <= df <= T_SERIES_MAX_DF:
            continue
        if low == high:
            _t_series_pvalues(np.ascontiguousarray(r), df, _t_series_coefficients(df), T_SERIES_MIN_P, out)
            continue
        sel = n_rows == n
        part = np.empty(int(sel.sum()))
        _t_series_pvalues(np.ascontiguousarray(r[sel]), df, _t_series_coefficients(df), T_SERIES_MIN_P, part)
        out[sel] = part
    return out


def correlation_t_pvalue(r, n, method: str = "betainc"):
    """Two-sided p-value of the t-test of zero correlation, n-2 degrees of freedom.

    Parameters
    ----------
    r : float or array_like
        Correlation estimates.
    n : int or array_like
        Rows used (broadcast against ``r``); NaN is returned where ``n < 3``.
    method : {"betainc", "series", "auto"}
        ``"betainc"`` (the reference): the regularised incomplete beta function
        for every value. ``"series"``: the finite series below where it keeps
        full precision (``n - 2 <= T_SERIES_MAX_DF`` and p above
        ``T_SERIES_MIN_P``), the incomplete beta function for the rest; 4 to 5
        times faster on two million values at 100 rows. ``"auto"``: ``"series"``
        for arrays of more than a thousand values, else ``"betainc"``.

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

    The series (Abramowitz & Stegun 26.7.3-26.7.4, with
    :math:`\\sin\\theta = |r|` and :math:`\\cos^2\\theta = x = 1 - r^2`): for even
    :math:`\\nu = n - 2`, :math:`p = 1 - |r| \\sum_{k<\\nu/2} c_k x^k` with
    :math:`c_0 = 1`, :math:`c_k = c_{k-1}(2k-1)/(2k)`; for odd :math:`\\nu`,
    :math:`p = 1 - \\tfrac{2}{\\pi}(\\arcsin|r| + |r|\\sqrt{x}\\sum_{k<(\\nu-1)/2} d_k x^k)`
    with :math:`d_0 = 1`, :math:`d_k = d_{k-1}\\,2k/(2k+1)`. Near :math:`r = 0`
    it is the more accurate of the two: there :math:`1 - r^2` rounds to 1 and
    the incomplete beta function loses the :math:`O(|r|)` term (relative error
    about :math:`2 \\times 10^{-7}` at :math:`|r| \\approx 10^{-8}` and 500 rows); elsewhere
    the two agree to about :math:`10^{-10}` relative.

    References
    ----------
    M. Abramowitz and I. A. Stegun (1964), *Handbook of Mathematical Functions*,
    National Bureau of Standards, formulas 26.7.3 and 26.7.4.

    Examples
    --------
    >>> round(float(correlation_t_pvalue(0.3, 50)), 6)
    0.034286
    >>> r = np.random.default_rng(7).uniform(-0.5, 0.5, 5000)
    >>> fast, exact = correlation_t_pvalue(r, 100, "series"), correlation_t_pvalue(r, 100)
    >>> bool(np.allclose(fast, exact, rtol=1e-9, atol=0))
    True
    """
    if isinstance(r, float) and isinstance(n, int):
        # one pair: the same operations on scalars, without the array machinery
        if not n >= MIN_ROWS or r != r:
            return math.nan
        r = min(1.0, max(-1.0, r))
        return float(special.betainc((n - 2.0) / 2.0, 0.5, (1.0 - r) * (1.0 + r)))
    if method not in ("betainc", "series", "auto"):
        raise ValueError(f"method must be betainc, series or auto, not {method!r}")
    r_arr = np.clip(np.asarray(r, dtype=float), -1.0, 1.0)
    n_arr = np.asarray(n, dtype=float)
    usable = (n_arr >= MIN_ROWS) & ~np.isnan(r_arr)
    if method == "auto":
        method = "series" if r_arr.size > 1000 else "betainc"
    if method == "series" and r_arr.ndim:
        r_flat = r_arr.ravel()
        n_flat = np.broadcast_to(n_arr, r_arr.shape).ravel()
        # rows below MIN_ROWS: df outside the series' range, so _t_series leaves them NaN
        n_rows = np.full(r_flat.size, int(n_arr)) if n_arr.ndim == 0 else n_flat.astype(np.int64)
        p = _t_series(r_flat, n_rows)
        rest = np.flatnonzero(np.isnan(p) & usable.ravel())
        if rest.size:
            p[rest] = correlation_t_pvalue(r_flat[rest], n_flat[rest], "betainc")
        return np.where(usable, p.reshape(r_arr.shape), np.nan)
    df = n_arr - 2.0
    one_minus_r2 = (1.0 - r_arr) * (1.0 + r_arr)
    with np.errstate(invalid="ignore"):
        p = special.betainc(np.where(df > 0, df, 1.0) / 2.0, 0.5, one_minus_r2)
    p = np.where(usable, p, np.nan)
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


# -- the permutation law of r from its exact moments ---------------------------

_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(48)
# Beyond this value of the Pearson-family shape parameter the curve is the type III
# (gamma) line of the Pearson chart to many digits; its closed form avoids overflow.
_TYPE_III_LIMIT = 1e4


def permutation_moments(a2, a3, a4, b2, b3, b4, n):
    """E[S^2], E[S^3], E[S^4] of S = sum x_i y_pi(i) over all n! relabellings pi.

    Parameters
    ----------
    a2, a3, a4, b2, b3, b4 : float or numpy.ndarray
        Central power sums :math:`A_k = \\sum (x_i - \\bar x)^k`, :math:`B_k` likewise for y.
    n : int or float
        Rows (at least 4).

    Returns
    -------
    tuple of float or numpy.ndarray
        The three raw moments (E[S] = 0 for centred data).

    Notes
    -----
    Expanding :math:`S^k` and grouping the index tuples by their pattern of
    equal indices (the set partitions of k places), each pattern contributes
    the product of the "distinct-index" sums of x and y divided by the falling
    factorial :math:`n^{(b)}` of its number of blocks b. With centred data these
    sums reduce to power sums (e.g. :math:`\\sum_{i \\ne j} x_i^3 x_j = -A_4`,
    :math:`\\sum_{i \\ne j \\ne k} x_i^2 x_j x_k = 2A_4 - A_2^2`,
    :math:`\\sum_{\\text{distinct}} x_i x_j x_k x_l = 3A_2^2 - 6A_4`), giving

    .. math::

        E S^2 = \\frac{A_2 B_2}{n-1},\\quad E S^3 = \\frac{n A_3 B_3}{(n-1)(n-2)},

        E S^4 = \\frac{A_4 B_4 (n+3)}{n(n-1)} + \\frac{3 (A_2^2 - A_4)(B_2^2 - B_4)}{n(n-1)}
        + \\frac{6 (2A_4 - A_2^2)(2B_4 - B_2^2)}{n(n-1)(n-2)}
        + \\frac{(3A_2^2 - 6A_4)(3B_2^2 - 6B_4)}{n(n-1)(n-2)(n-3)}

    (Pitman 1937; tests/core/test_pearson_moments.py checks all three against full
    enumeration of the relabellings).

    References
    ----------
    Pitman, E.J.G. (1937). Significance tests which may be applied to samples
    from any populations. II. The correlation coefficient test. Suppl. J. R.
    Stat. Soc. 4:225-232. doi:10.2307/2983647

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=20); x -= x.mean()
    >>> y = rng.exponential(size=20); y -= y.mean()
    >>> e2, e3, e4 = permutation_moments(*(np.sum(x**k) for k in (2, 3, 4)),
    ...                                  *(np.sum(y**k) for k in (2, 3, 4)), 20)
    >>> round(float(e2 / (np.sum(x**2) * np.sum(y**2))), 6)  # Var r = 1/(n-1)
    0.052632
    """
    n = float(n) if np.ndim(n) == 0 else np.asarray(n, dtype=float)
    e2 = a2 * b2 / (n - 1)
    e3 = n * a3 * b3 / ((n - 1) * (n - 2))
    e4 = (a4 * b4 * (n + 3) / (n * (n - 1))
          + 3 * (a2 * a2 - a4) * (b2 * b2 - b4) / (n * (n - 1))
          + 6 * (2 * a4 - a2 * a2) * (2 * b4 - b2 * b2) / (n * (n - 1) * (n - 2))
          + (3 * a2 * a2 - 6 * a4) * (3 * b2 * b2 - 6 * b4) / (n * (n - 1) * (n - 2) * (n - 3)))
    return e2, e3, e4


_FPMIN = 1e-300
_EPS = 1e-15


@kernel(cache=True, nogil=True)
def _beta_cf(a, b, x):
    # continued fraction of the incomplete beta function (modified Lentz; Press et al. 2007, 6.4)
    qab, qap, qam = a + b, a + 1.0, a - 1.0
    c = 1.0
    d = 1.0 - qab * x / qap
    if abs(d) < _FPMIN:
        d = _FPMIN
    d = 1.0 / d
    h = d
    for m in range(1, 20000):
        m2 = 2 * m
        aa = m * (b - m) * x / ((qam + m2) * (a + m2))
        d = 1.0 + aa * d
        if abs(d) < _FPMIN:
            d = _FPMIN
        c = 1.0 + aa / c
        if abs(c) < _FPMIN:
            c = _FPMIN
        d = 1.0 / d
        h *= d * c
        aa = -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2))
        d = 1.0 + aa * d
        if abs(d) < _FPMIN:
            d = _FPMIN
        c = 1.0 + aa / c
        if abs(c) < _FPMIN:
            c = _FPMIN
        d = 1.0 / d
        step = d * c
        h *= step
        if abs(step - 1.0) < _EPS:
            break
    return h


@kernel(cache=True, nogil=True)
def _beta_sf(a, b, x):
    """1 - I_x(a, b), the smaller side computed directly so that tiny tails keep their digits."""
    if x <= 0.0:
        return 1.0
    if x >= 1.0:
        return 0.0
    front = math.exp(math.lgamma(a + b) - math.lgamma(a) - math.lgamma(b)
                     + a * math.log(x) + b * math.log1p(-x))
    if x < (a + 1.0) / (a + b + 2.0):
        return 1.0 - front * _beta_cf(a, b, x) / a
    return front * _beta_cf(b, a, 1.0 - x) / b


@kernel(cache=True, nogil=True)
def _gamma_p(a, x):
    """Regularised lower incomplete gamma P(a, x) (series below a + 1, continued fraction above)."""
    if x <= 0.0:
        return 0.0
    log_front = -x + a * math.log(x) - math.lgamma(a)
    if x < a + 1.0:
        term = 1.0 / a
        total = term
        ap = a
        for _ in range(100000):
            ap += 1.0
            term *= x / ap
            total += term
            if abs(term) < abs(total) * _EPS:
                break
        return total * math.exp(log_front)
    b = x + 1.0 - a
    c = 1.0 / _FPMIN
    d = 1.0 / b
    h = d
    for i in range(1, 100000):
        an = -i * (i - a)
        b += 2.0
        d = an * d + b
        if abs(d) < _FPMIN:
            d = _FPMIN
        c = b + an / c
        if abs(c) < _FPMIN:
            c = _FPMIN
        d = 1.0 / d
        step = d * c
        h *= step
        if abs(step - 1.0) < _EPS:
            break
    return 1.0 - math.exp(log_front) * h


@kernel(cache=True, nogil=True)
def _normal_sf(z):
    return 0.5 * math.erfc(z / math.sqrt(2.0))


@kernel(cache=True, nogil=True)
def _type_iii_sf(z, g):
    """Standardised gamma (Pearson type III) with skewness g: G ~ Gamma(4/g^2), Z = sign(g)(G - a)/sqrt(a)."""
    if abs(g) < 1e-8:
        return _normal_sf(z)
    a = 4.0 / (g * g)
    x = a + (z if g > 0 else -z) * math.sqrt(a)
    if a > 1e6:
        # Wilson-Hilferty: the cube root of a gamma variate is nearly normal (Johnson et al. 1994, 17.5)
        w = ((max(x, 0.0) / a) ** (1.0 / 3.0) - (1.0 - 1.0 / (9.0 * a))) / math.sqrt(1.0 / (9.0 * a))
        return _normal_sf(w) if g > 0 else 1.0 - _normal_sf(w)
    lower = _gamma_p(a, max(x, 0.0))
    return 1.0 - lower if g > 0 else lower


@kernel(cache=True, nogil=True)
def _log_abs_gamma(x, y):
    """Re log Gamma(x + iy) for x > 0: shifted up, then Stirling's series."""
    z = complex(x, y)
    shift = 0.0
    while z.real < 15.0:
        shift += math.log(abs(z))
        z += 1.0
    inv = 1.0 / z
    inv2 = inv * inv
    series = (z - 0.5) * cmath.log(z) - z + 0.5 * math.log(2.0 * math.pi) \
        + inv * (1.0 / 12.0 - inv2 * (1.0 / 360.0 - inv2 * (1.0 / 1260.0 - inv2 / 1680.0)))
    return series.real - shift


@kernel(cache=True, nogil=True)
def _type_iv_sf(z, r, nu, a, lam, nodes, weights):
    """P(Z >= z), density ~ (1 + u^2)^-m exp(-nu atan u), u = (z - lam)/a, m = 1 + r/2; after
    theta = atan u the tail is one smooth integral, by Gauss-Legendre over its live range."""
    m = 1.0 + r / 2.0
    theta0 = math.atan((z - lam) / a)
    # int_{-pi/2}^{pi/2} cos^{2m-2}(t) e^{-nu t} dt = pi 2^{2-2m} Gamma(2m-1) / |Gamma(m + i nu/2)|^2
    log_total = (math.log(math.pi) + (2.0 - 2.0 * m) * math.log(2.0) + math.lgamma(2.0 * m - 1.0)
                 - 2.0 * _log_abs_gamma(m, 0.5 * nu))
    # log f(theta) = (2m-2) log cos(theta) - nu theta is concave: beyond 14 of its local widths
    # from the mode, or 30 decay lengths past theta0, the integrand has fallen below e^-90.
    mode = math.atan(-nu / (2.0 * m - 2.0))
    width = math.cos(mode) / math.sqrt(2.0 * m - 2.0)
    slope = abs((2.0 * m - 2.0) * math.tan(theta0) + nu) + 1e-300
    if theta0 >= mode:
        lo, hi = theta0, min(math.pi / 2.0, max(mode + 14.0 * width, theta0 + 30.0 / slope))
    else:
        lo, hi = max(-math.pi / 2.0, min(mode - 14.0 * width, theta0 - 30.0 / slope)), theta0
    half = (hi - lo) / 2.0
    total = 0.0
    for k in range(nodes.shape[0]):
        t = lo + half * (nodes[k] + 1.0)
        c = math.cos(t)
        if c > 0.0:
            total += weights[k] * math.exp((2.0 * m - 2.0) * math.log(c) - nu * t - log_total)
    tail = min(1.0, max(0.0, total * half))
    return tail if theta0 >= mode else 1.0 - tail


@kernel(cache=True, nogil=True)
def _curve_sf(z, g, k, nodes, weights):
    b1 = g * g
    k = max(k, b1 + 1.0 + 1e-9)   # no law lies below beta2 = beta1 + 1
    den = 2.0 * k - 3.0 * b1 - 6.0
    if den < 0.0:
        nu = 3.0 * (k - b1 - 1.0) / (-den / 2.0)
        if nu < _TYPE_III_LIMIT:
            s = 0.0
            if b1 > 1e-300:   # else symmetric to all digits (b1 may underflow while g does not)
                s = g / math.sqrt(b1 + 16.0 * (nu + 1.0) / (nu + 2.0) ** 2)
            alpha = max(nu / 2.0 * (1.0 - s), 1e-300)   # right skew: alpha < beta
            beta = max(nu / 2.0 * (1.0 + s), 1e-300)
            length = math.sqrt((2.0 + nu) ** 2 * b1 + 16.0 * (1.0 + nu)) / 2.0
            start = -length * alpha / nu
            return _beta_sf(alpha, beta, (z - start) / length)
    elif den > 0.0:
        r = 6.0 * (k - b1 - 1.0) / den
        d = 16.0 * (r - 1.0) - b1 * (r - 2.0) ** 2
        if r < _TYPE_III_LIMIT and d > 0.0:
            nu = -r * (r - 2.0) * g / math.sqrt(d)
            a = math.sqrt(d) / 4.0
            return _type_iv_sf(z, r, nu, a, a * nu / r, nodes, weights)
    return _type_iii_sf(z, g)


@kernel(cache=True, nogil=True)
def _curve_sf_many(z, g, k, nodes, weights):
    out = np.empty(z.shape[0])
    for i in range(z.shape[0]):
        out[i] = _curve_sf(z[i], g[i], k[i], nodes, weights)
    return out


def pearson_curve_sf(z, skew, kurtosis):
    """Upper tail P(Z >= z) of the Pearson-family law with mean 0, variance 1 and the given shape.

    Parameters
    ----------
    z : float or array_like
        Standardised points.
    skew, kurtosis : float or array_like
        :math:`\\gamma = \\mu_3/\\sigma^3` and :math:`\\beta_2 = \\mu_4/\\sigma^4` (3 for a normal).

    Returns
    -------
    numpy.ndarray
        Tail probabilities, broadcast over the inputs.

    Notes
    -----
    With :math:`\\beta_1 = \\gamma^2`, the sign of :math:`2\\beta_2 - 3\\beta_1 - 6`
    chooses the curve (Pearson 1895; Elderton & Johnson 1969):

    - below 0, type I: a beta law on a finite range whose two shapes, length and
      start are matched to the four moments,
      :math:`\\nu = \\alpha + \\beta = 3(\\beta_2 - \\beta_1 - 1)/(1.5\\beta_1 - \\beta_2 + 3)`,
      :math:`\\alpha, \\beta = \\tfrac{\\nu}{2}(1 \\mp \\operatorname{sign}\\gamma /
      \\sqrt{1 + 16(\\nu+1)/((\\nu+2)^2\\beta_1)})`, length
      :math:`\\tfrac12\\sqrt{(\\nu+2)^2\\beta_1 + 16(\\nu+1)}`;
    - above 0, type IV (Heinrich 2004): :math:`r = 6(\\beta_2 - \\beta_1 - 1)/
      (2\\beta_2 - 3\\beta_1 - 6)`, :math:`m = 1 + r/2`,
      :math:`\\nu = -r(r-2)\\gamma/\\sqrt{16(r-1) - \\beta_1(r-2)^2}`,
      :math:`a = \\sqrt{16(r-1) - \\beta_1(r-2)^2}/4`, location :math:`a\\nu/r`; its tail
      is one 48-point Gauss-Legendre integral after :math:`\\theta = \\arctan u`;
    - the narrow type VI band (where :math:`16(r-1) < \\beta_1(r-2)^2`) and the
      neighbourhood of the type III line take the type III (gamma) curve matched
      to the skewness, whose kurtosis differs there by little.

    Compiled scalar kernels (incomplete beta and gamma by their continued
    fractions, Press et al. 2007 section 6.4; checked against scipy.special in
    tests/core/test_pearson_moments.py).

    References
    ----------
    Pearson, K. (1895). Contributions to the mathematical theory of evolution. II.
    Skew variation in homogeneous material. Phil. Trans. R. Soc. A 186:343-414.
    doi:10.1098/rsta.1895.0010

    Heinrich, J. (2004). A guide to the Pearson type IV distribution. CDF/MEMO/
    STATISTICS/PUBLIC/6820.

    Examples
    --------
    >>> round(float(pearson_curve_sf(1.96, 0.0, 3.0)), 4)  # the normal line
    0.025
    """
    z, g, k = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (z, skew, kurtosis)))
    flat = _curve_sf_many(np.ascontiguousarray(z.ravel()), np.ascontiguousarray(g.ravel()),
                          np.ascontiguousarray(k.ravel()), _GL_NODES, _GL_WEIGHTS)
    return flat.reshape(z.shape)


def _sf_of_centred(t, e2, e3, e4, tol=0.0):
    """P(T >= t) for a centred T with raw moments e2, e3, e4; a point mass at 0 when e2 is 0
    (counted for t up to ``tol``, the rounding of t)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        spread = e2 > 1e-13 * (t * t + 1e-300)
        safe = np.where(spread, e2, 1.0)
        sf = pearson_curve_sf(np.where(spread, t / np.sqrt(safe), 0.0),
                              np.where(spread, e3 / safe ** 1.5, 0.0),
                              np.where(spread, e4 / safe ** 2, 3.0))
    return np.where(spread, sf, (t <= tol).astype(float))


def _two_tails(s, e2, e3, e4, shift=0.0):
    """P(shift + T >= s) + P(shift + T <= -s), both tails in one call of the curve."""
    s, e2, e3, e4, shift = np.broadcast_arrays(s, e2, e3, e4, shift)
    # an observed S equal to a point of the law counts as reached, as in the exact enumeration
    tol = 1e-12 * (np.abs(s) + np.abs(shift))
    both = _sf_of_centred(np.stack([s - shift, s + shift]), np.stack([e2, e2]), np.stack([e3, -e3]),
                          np.stack([e4, e4]), np.stack([tol, tol]))
    return both[0] + both[1]


def _central_sums(p1, p2, p3, p4, m):
    """Central power sums C2..C4 (and the mean) of m values from their raw power sums."""
    mu = p1 / m
    c2 = p2 - m * mu * mu
    c3 = p3 - 3.0 * mu * p2 + 2.0 * m * mu ** 3
    c4 = p4 - 4.0 * mu * p3 + 6.0 * mu * mu * p2 - 3.0 * m * mu ** 4
    return mu, c2, c3, c4


@lru_cache(maxsize=8)
def _all_relabellings(n: int) -> np.ndarray:
    return np.array(list(itertools.permutations(range(n))), dtype=np.intp)


def _exact_pvalue(xc: np.ndarray, yc: np.ndarray) -> np.ndarray:
    """P(|S| >= |s|) over all n! relabellings, for small n; leading axes are pairs."""
    perms = _all_relabellings(xc.shape[-1])
    s = np.abs((xc * yc).sum(axis=-1))
    sb = np.abs(np.einsum("...i,...pi->...p", xc, yc[..., perms]))
    # relative slack: relabellings equal to the observed sum up to rounding count as ties
    return np.mean(sb >= (s * (1.0 - 1e-12))[..., None], axis=-1)


def _power_sums(v, keepdims: bool = False) -> tuple:
    """Sums of v, v^2, v^3, v^4 over the last axis, by products (``v ** 3`` calls pow: 7x slower)."""
    v2 = v * v
    return tuple(t.sum(axis=-1, keepdims=keepdims) for t in (v, v2, v2 * v, v2 * v2))


def _whole_law_pvalue(xc, yc, s):
    n = xc.shape[-1]
    e2, e3, e4 = permutation_moments(*_power_sums(xc)[1:], *_power_sums(yc)[1:], n)
    return _two_tails(s, e2, e3, e4)


def _partner_groups(v, grouped=True, groups=PEARSON_SPLIT_GROUPS):
    """Values standing for the possible partners of a split point, and how many partners each stands for.

    ``v`` (..., m): the partners' values. Up to ``2 * PEARSON_SPLIT_GROUPS`` of them (or
    ``grouped=False``) each is its own part. Above, the range of the values is cut into
    ``PEARSON_SPLIT_GROUPS`` bins of equal width, and each bin is two nodes at its mean -/+ its SD
    carrying half its count: exact for a part's tail that is quadratic in the partner's value
    over the bin. A part's shift moves with the partner's value, so equal widths (not equal
    counts) keep the tail's change across a bin small, in the heavy ends too. O(m); an empty
    bin gets weight 0.
    """
    m = v.shape[-1]
    if not grouped or m <= 2 * groups:
        return v, np.ones(v.shape)
    lead = v.shape[:-1]
    flat = v.reshape(-1, m)
    rows = flat.shape[0]
    low = flat.min(axis=-1, keepdims=True)
    width = np.maximum(flat.max(axis=-1, keepdims=True) - low, 1e-300)
    which = np.minimum(((flat - low) / width * groups).astype(np.intp), groups - 1)
    which += groups * np.arange(rows)[:, None]
    size = rows * groups
    counts = np.bincount(which.ravel(), minlength=size).reshape(rows, groups).astype(float)
    sums = np.bincount(which.ravel(), weights=flat.ravel(), minlength=size).reshape(rows, groups)
    squares = np.bincount(which.ravel(), weights=(flat * flat).ravel(), minlength=size).reshape(rows, groups)
    safe = np.maximum(counts, 1.0)
    mean = sums / safe
    spread = np.sqrt(np.maximum(squares / safe - mean * mean, 0.0))
    nodes = np.concatenate([mean - spread, mean + spread], axis=-1).reshape(*lead, 2 * groups)
    weight = np.concatenate([counts / 2, counts / 2], axis=-1).reshape(*lead, 2 * groups)
    return nodes, weight


def _rest_tails(s, shift, px, py, m):
    """Both tails of shift + T, T the permutation sum of the m pairs left, from their raw power sums."""
    rest_x = _central_sums(*px, m)
    rest_y = _central_sums(*py, m)
    e2, e3, e4 = permutation_moments(rest_x[1], rest_x[2], rest_x[3], rest_y[1], rest_y[2], rest_y[3], m)
    # A side left constant (a two-valued column whose rare value was taken out) makes T exactly 0, but
    # its central sums come from raw power sums and keep rounding residue (C2 ~ 1e-17 for C2 = 0) that
    # gives moments no law has; within rounding of the raw sums, such a side is constant.
    constant = (rest_x[1] <= 1e-12 * np.abs(px[1])) | (rest_y[1] <= 1e-12 * np.abs(py[1]))
    if np.any(constant):
        e2, e3, e4 = (np.where(constant, 0.0, e) for e in (e2, e3, e4))
    return _two_tails(s, e2, e3, e4, shift + m * rest_x[0] * rest_y[0])


def _oriented(xc, yc):
    """x, y swapped pair by pair so that x is the side with the larger kurtosis."""
    kx = (xc ** 4).sum(-1) / (xc ** 2).sum(-1) ** 2
    ky = (yc ** 4).sum(-1) / (yc ** 2).sum(-1) ** 2
    swap = (ky > kx)[..., None]
    return np.where(swap, yc, xc), np.where(swap, xc, yc)


def _split_law_pvalue(xc, yc, s, grouped=True):
    """The law as the mean of its n parts given the partner j of the most extreme x value
    (x, y swapped first so that x is the side with the larger kurtosis); the parts taken in
    groups (:func:`_partner_groups`) for large n."""
    n = xc.shape[-1]
    xc, yc = _oriented(xc, yc)
    top = np.argmax(np.abs(xc), axis=-1)[..., None]
    x_top = np.take_along_axis(xc, top, axis=-1)                    # (..., 1)
    vals, weight = _partner_groups(yc, grouped)
    # S = x_top y_j + (n-1) mean(x rest) mean(y rest) + T_j, T_j a centred permutation sum of n-1 pairs
    px = [total - x_top ** k for k, total in zip((1, 2, 3, 4), _power_sums(xc, keepdims=True))]
    py = [total - vals ** k for k, total in zip((1, 2, 3, 4), _power_sums(yc, keepdims=True))]
    tails = _rest_tails(s[..., None], x_top * vals, px, py, n - 1.0)
    return (tails * weight).sum(axis=-1) / n


def _without(v, idx):
    """Each row of v (k, n) without its element idx[row]."""
    keep = np.ones(v.shape, bool)
    keep[np.arange(v.shape[0]), idx] = False
    return v[keep].reshape(v.shape[0], v.shape[1] - 1)


def _two_point_pvalue(xc, yc, s, q_in_x, q):
    """The law split on the partners of two dominant points: the most extreme x (x the side of
    larger kurtosis, as oriented by the caller) and point q, the second most extreme x when
    ``q_in_x`` else the most extreme y. Arrays (k, n); O(n + P^2) a pair, P at most
    2 * PEARSON_SPLIT2_GROUPS nodes of :func:`_partner_groups` per partner.

    Same side (x points a, b): every ordered pair of distinct partners (j1, j2),
    :math:`S = a y_{j1} + b y_{j2} + (n-2)\bar x'\bar y' + T`, each of the n(n-1) equally likely.
    Across (x point a, y point b): a paired with b (probability 1/n, then n-1 pairs left), or a
    with some y_j (j != b) and b with some x_i (i != a), each of the (n-1)^2 with probability
    1/(n(n-1)), :math:`S = a y_j + x_i b + (n-2)\bar x'\bar y' + T`.
    """
    k, n = xc.shape
    p_idx = np.argmax(np.abs(xc), axis=-1)
    a = xc[np.arange(k), p_idx]
    px_all = [(xc ** e).sum(-1) for e in (1, 2, 3, 4)]
    py_all = [(yc ** e).sum(-1) for e in (1, 2, 3, 4)]
    m = n - 2.0
    out = np.empty(k)
    same = np.flatnonzero(q_in_x)
    if same.size:
        b = xc[same, q[same]]
        vals, w = _partner_groups(yc[same], groups=PEARSON_SPLIT2_GROUPS)
        u, v = vals[:, :, None], vals[:, None, :]
        weight = w[:, :, None] * w[:, None, :]
        diag = np.arange(w.shape[1])
        weight[:, diag, diag] -= w
        px = [(px_all[e - 1][same] - a[same] ** e - b ** e)[:, None, None] for e in (1, 2, 3, 4)]
        py = [py_all[e - 1][same][:, None, None] - u ** e - v ** e for e in (1, 2, 3, 4)]
        tails = _rest_tails(s[same, None, None], a[same, None, None] * u + b[:, None, None] * v, px, py, m)
        out[same] = (tails * weight).sum(axis=(-2, -1)) / (n * (n - 1.0))
    cross = np.flatnonzero(~q_in_x)
    if cross.size:
        a_c = a[cross]
        b = yc[cross, q[cross]]
        # a with b: the other n-1 pairs are a plain permutation sum
        both = _rest_tails(s[cross], a_c * b,
                           [px_all[e - 1][cross] - a_c ** e for e in (1, 2, 3, 4)],
                           [py_all[e - 1][cross] - b ** e for e in (1, 2, 3, 4)], n - 1.0)
        yv, wy = _partner_groups(_without(yc[cross], q[cross]), groups=PEARSON_SPLIT2_GROUPS)
        xv, wx = _partner_groups(_without(xc[cross], p_idx[cross]), groups=PEARSON_SPLIT2_GROUPS)
        yv, xv = yv[:, :, None], xv[:, None, :]
        px = [(px_all[e - 1][cross] - a_c ** e)[:, None, None] - xv ** e for e in (1, 2, 3, 4)]
        py = [(py_all[e - 1][cross] - b ** e)[:, None, None] - yv ** e for e in (1, 2, 3, 4)]
        tails = _rest_tails(s[cross, None, None], a_c[:, None, None] * yv + xv * b[:, None, None], px, py, m)
        out[cross] = ((n - 1.0) * both + (tails * (wy[:, :, None] * wx[:, None, :])).sum(axis=(-2, -1))) / (n * (n - 1.0))
    return out


def _dominant_second(xc, yc):
    """For oriented pairs (..., n): the larger of the second-largest x share and the largest y share
    of the sums of squares, whether it is on the x side, and its index."""
    sx = xc * xc / (xc * xc).sum(-1, keepdims=True)
    sy = yc * yc / (yc * yc).sum(-1, keepdims=True)
    order = np.argsort(-sx, axis=-1)[..., :2]
    x2 = order[..., 1]
    share_x2 = np.take_along_axis(sx, x2[..., None], axis=-1)[..., 0]
    y1 = np.argmax(sy, axis=-1)
    share_y1 = np.take_along_axis(sy, y1[..., None], axis=-1)[..., 0]
    in_x = share_x2 >= share_y1
    return np.where(in_x, share_x2, share_y1), in_x, np.where(in_x, x2, y1)


def _lumpy_split_pvalue(xc, yc, s):
    """Split law of large samples with a dominant value (n > PEARSON_SPLIT_MAX_N): on two points
    where a second one dominates too (share above PEARSON_SPLIT2_SHARE), else on one. (k, n) arrays."""
    xo, yo = _oriented(xc, yc)
    share, in_x, q = _dominant_second(xo, yo)
    two = share > PEARSON_SPLIT2_SHARE
    p = np.empty(s.shape)
    if (~two).any():
        p[~two] = _split_law_pvalue(xc[~two], yc[~two], s[~two])
    for chunk in np.array_split(np.flatnonzero(two), max(1, -(-int(two.sum()) // 256))):
        if chunk.size:
            p[chunk] = _two_point_pvalue(xo[chunk], yo[chunk], s[chunk], in_x[chunk], q[chunk])
    return p


def moment_pvalue(x, y) -> np.ndarray:
    """Two-sided p-value P(|r_pi| >= |r|) of Pearson's r under relabelling, without resamples.

    Parameters
    ----------
    x, y : array_like
        Arrays of shape (..., n) with no missing values and spread on both sides;
        leading axes are independent pairs (vectorised).

    Returns
    -------
    numpy.ndarray or float
        The p-value of each pair.

    Notes
    -----
    Under independence every relabelling :math:`\\pi` of y is equally likely, so
    :math:`r_\\pi = S_\\pi / \\sqrt{A_2 B_2}` with :math:`S_\\pi = \\sum x_i y_{\\pi(i)}`
    (centred data) has a permutation law whose first four moments are known
    exactly (:func:`permutation_moments`, O(n)). The p-value is
    :math:`P(S \\ge |s|) + P(S \\le -|s|)` under a Pearson-family curve with
    those moments (:func:`pearson_curve_sf`): both tails, so the skewness of the
    law moves weight between them. Normal-theory moments give a symmetric beta
    curve equal to the t-test's law of r.

    - ``n <= PEARSON_EXACT_MAX_N``: all n! relabellings are enumerated (exact).
    - ``n <= PEARSON_SPLIT_MAX_N``, or one point holding more than
      ``PEARSON_SPLIT_SHARE`` of a side's sum of squares: small samples of skewed
      data, and samples with one dominant value, have a lumpy law that four
      moments cannot follow, driven by where the most extreme value lands. The law is split into its n equally likely parts by the partner
      :math:`j` of the most extreme x (x being the side of larger kurtosis):
      :math:`S = x_{(1)} y_j + (n-1)\\bar x' \\bar y'_j + T_j`, where
      :math:`T_j` is the permutation sum of the remaining n-1 centred pairs,
      whose moments again come from :func:`permutation_moments`; each part's
      tail comes from its own curve and the p-value is their mean. Above
      ``2 * PEARSON_SPLIT_GROUPS`` rows the partners are taken in equal-width bins of
      their values, two nodes a bin (:func:`_partner_groups`; O(n) a pair). Above
      ``PEARSON_SPLIT_MAX_N`` rows, when a second point (the next x or the most
      extreme y) holds more than ``PEARSON_SPLIT2_SHARE`` of its side's sum of
      squares, the law is split on the partners of both points
      (:func:`_two_point_pvalue`).
    - above: one curve for the whole law.

    The thresholds were chosen by the level table (tests/core/test_levels_pearson.py):
    15 pairs of margins, n = 10, 30, 200.

    References
    ----------
    Pitman, E.J.G. (1937). Suppl. J. R. Stat. Soc. 4:225-232. doi:10.2307/2983647

    Examples
    --------
    >>> rng = np.random.default_rng(4)
    >>> x, y = rng.lognormal(size=30), rng.lognormal(size=30)
    >>> 0.0 <= float(moment_pvalue(x, y)) <= 1.0
    True
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.shape[-1]
    xc = x - x.mean(axis=-1, keepdims=True)
    yc = y - y.mean(axis=-1, keepdims=True)
    # scale both sides so that fourth powers can neither overflow nor underflow
    xc = xc / np.abs(xc).max(axis=-1, keepdims=True)
    yc = yc / np.abs(yc).max(axis=-1, keepdims=True)
    if n <= PEARSON_EXACT_MAX_N:
        p = _exact_pvalue(xc, yc)
    else:
        s = np.abs((xc * yc).sum(axis=-1))
        # the largest single share of the sum of squares, on either side (data scaled to max |v| = 1)
        share = np.maximum(1.0 / (xc * xc).sum(axis=-1), 1.0 / (yc * yc).sum(axis=-1))
        split = (n <= PEARSON_SPLIT_MAX_N) | (share > PEARSON_SPLIT_SHARE)
        split_law = _split_law_pvalue if n <= PEARSON_SPLIT_MAX_N else _lumpy_split_pvalue
        if np.ndim(split) == 0:
            if split:
                p = split_law(xc[None], yc[None], s[None])[0]
            else:
                p = _whole_law_pvalue(xc, yc, s)
        else:
            lead = s.shape
            xc, yc, s, split = (xc.reshape(-1, n), yc.reshape(-1, n), s.reshape(-1), split.reshape(-1))
            p = np.empty(s.shape)
            if split.any():
                p[split] = split_law(xc[split], yc[split], s[split])
            if (~split).any():
                p[~split] = _whole_law_pvalue(xc[~split], yc[~split], s[~split])
            p = p.reshape(lead)
    p = np.clip(p, 0.0, 1.0)
    return float(p) if np.ndim(p) == 0 else p


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


def resolved_test(test: str | None, permutations: int) -> str:
    """The method that runs: ``test`` when given, else permutation when resamples were asked for, else the default."""
    if not test:
        return "permutation" if permutations > 0 else DEFAULT_TEST
    if test not in TESTS:
        raise ValueError(f"unknown test {test!r} for pearson; choose from {', '.join(TESTS)}")
    return test


def pearson(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, permutations: int = 0,
            seed=None, test: str | None = None) -> TestResult:
    """Pearson r of two 1-D arrays, its p-value and Fisher z interval.

    Parameters
    ----------
    x, y : numpy.ndarray
        1-D arrays of equal length. Rows where either value is NaN (or inf)
        are dropped.
    confidence : float
        Level of the interval.
    permutations : int
        Resamples of the permutation test (``test="permutation"``); when
        positive and no ``test`` is given, the permutation test is used.
    seed : numpy.random.SeedSequence or int, optional
        Seed of the relabellings.
    test : {"moments", "t", "permutation"}, optional
        ``"moments"`` (default): the permutation law of r approximated from its
        exact first four moments (:func:`moment_pvalue`), no resamples, holds its
        level on any margins; exact enumeration up to 7 rows. ``"t"``: the
        t-test with n-2 df (equals ``scipy.stats.pearsonr``), exact when one
        margin is normal, liberal when both are skewed or heavy-tailed.
        ``"permutation"``: ``(1 + #{|r_b| >= |r|}) / (B + 1)`` over ``B``
        random relabellings (``permutations``, or
        ``config.DEFAULT_TEST_PERMUTATIONS`` when 0).

    Returns
    -------
    TestResult
        ``estimate`` r; ``p_value`` two-sided with its ``method``;
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

    the t law holding under independence with a normal margin (Fisher 1915).
    The interval is
    :math:`\\tanh(\\operatorname{atanh} r \\mp z_{(1+c)/2}/\\sqrt{n-3})`
    (Fisher 1921).

    References
    ----------
    Pearson, K. (1895). Proc. R. Soc. Lond. 58:240-242. doi:10.1098/rspl.1895.0041

    Fisher, R.A. (1915). Frequency distribution of the values of the
    correlation coefficient in samples from an indefinitely large population.
    Biometrika 10:507-521. doi:10.2307/2331838

    Fisher, R.A. (1921). Metron 1:3-32.

    Pitman, E.J.G. (1937). Suppl. J. R. Stat. Soc. 4:225-232. doi:10.2307/2983647

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> x = rng.normal(size=40)
    >>> y = 0.6 * x + rng.normal(size=40)
    >>> res = pearson(x, y)
    >>> res.method, res.n, bool(res.ci_low < res.estimate < res.ci_high)
    ('permutation law from exact moments (Pearson curve)', 40, True)
    >>> pearson(x, y, test="t").method
    't, n-2 df'
    """
    chosen = resolved_test(test, permutations)
    x, y, degenerate = screen_pair(x, y, _METHOD_LABELS.get(chosen, "permutation"))
    if degenerate is not None:
        return degenerate
    return pearson_screened(x, y, confidence=confidence, permutations=permutations, seed=seed, test=test)


def pearson_screened(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, permutations: int = 0,
                     seed=None, test: str | None = None) -> TestResult:
    """:func:`pearson` of a pair that passed :func:`screen_pair` (complete, >= 3 rows, spread on both sides).

    The engine's presorted path has screened the pair already; both paths end here.
    """
    from ..config import DEFAULT_TEST_PERMUTATIONS

    chosen = resolved_test(test, permutations)
    n = x.size
    method = _METHOD_LABELS.get(chosen, "permutation")
    r = float(_r_kernel(np.ascontiguousarray(x, dtype=np.float64), np.ascontiguousarray(y, dtype=np.float64)))
    if math.isnan(r):
        return undefined(n, "column without spread after centring", method)
    if chosen == "permutation":
        b = int(permutations) if permutations > 0 else DEFAULT_TEST_PERMUTATIONS
        method = f"permutation, B={b}"
        p = _permutation_pvalue(x, y, r, b, seed)
    elif chosen == "t":
        p = correlation_t_pvalue(r, n)
    else:
        if n <= PEARSON_EXACT_MAX_N:
            method = _METHOD_LABELS["exact"]
        p = moment_pvalue(x, y)
    if n > 3:
        low, high = fisher_z_interval(r, 1.0 / math.sqrt(n - 3), confidence)
        note = ""
    else:
        low, high = -1.0, 1.0
        note = "interval is the whole range: Fisher z needs more than 3 rows"
    return TestResult(r, p, method, low, high, n, note)
