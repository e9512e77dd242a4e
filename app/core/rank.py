"""Rank correlations: Spearman's rho (mid-ranks) and Kendall's tau-b."""

from __future__ import annotations

import math
from functools import lru_cache
from typing import NamedTuple

import numpy as np
from scipy import special

from .jit import kernel
from .. import config
from ..config import KENDALL_EXACT_MAX_N
from .linear import correlation_t_pvalue, pearson_matrix, screen_pair
from .results import TestResult
from .testing import fisher_z_interval

__all__ = [
    "midranks",
    "spearman",
    "spearman_estimate",
    "spearman_matrix",
    "kendall",
    "KendallCounts",
    "kendall_counts",
    "knight_counts",
    "kendall_exact_pvalue",
    "spearman_from_sums",
    "spearman_needs_rows",
    "spearman_null_counts",
    "spearman_exact_pvalue",
    "spearman_edgeworth_pvalue",
    "kendall_from_counts",
]

# Fieller, Hartley & Pearson (1957): var(atanh tau) is close to 0.437/(n-4).
_FHP_VARIANCE = 0.437


# --- private compiled kernels ---------------------------------------------------------

@kernel(cache=True, nogil=True, python_max_n=64)
def _tie_runs(sorted_values):
    """Pairs tied, sum t(t-1)(t-2) and sum t(t-1)(2t+5) over runs of a sorted array."""
    n = sorted_values.shape[0]
    pairs = 0
    t3 = 0.0
    t5 = 0.0
    start = 0
    for i in range(1, n + 1):
        if i == n or sorted_values[i] != sorted_values[start]:
            t = i - start
            if t > 1:
                pairs += t * (t - 1) // 2
                tf = float(t)
                t3 += tf * (tf - 1.0) * (tf - 2.0)
                t5 += tf * (tf - 1.0) * (2.0 * tf + 5.0)
            start = i
    return pairs, t3, t5


@kernel(cache=True, nogil=True, python_max_n=64)
def _merge_sort_inversions(values):
    """Sort ``values`` in place (bottom-up merge sort); return the count of strict inversions."""
    n = values.shape[0]
    buffer = np.empty_like(values)
    inversions = 0
    width = 1
    src = values
    dst = buffer
    in_buffer = False
    while width < n:
        for lo in range(0, n, 2 * width):
            mid = min(lo + width, n)
            hi = min(lo + 2 * width, n)
            i = lo
            j = mid
            k = lo
            while i < mid and j < hi:
                if src[j] < src[i]:
                    # Every element still waiting on the left is larger: one swap each.
                    inversions += mid - i
                    dst[k] = src[j]
                    j += 1
                else:
                    dst[k] = src[i]
                    i += 1
                k += 1
            while i < mid:
                dst[k] = src[i]
                i += 1
                k += 1
            while j < hi:
                dst[k] = src[j]
                j += 1
                k += 1
        src, dst = dst, src
        in_buffer = not in_buffer
        width *= 2
    if in_buffer:
        values[:] = src
    return inversions


@kernel(cache=True, nogil=True, python_max_n=6)
def _assignment_counts(a, b, top):
    """counts[t] = #{permutations p : sum_i a[i] * b[p[i]] = t}, for non-negative integers a, b.

    Dynamic programme over the subsets of b already placed: position k is
    filled when k items are used, so a state is a bit mask and a count per
    partial sum. O(2^n n top) time, O(2^n top) memory; ``top`` bounds the sum.
    """
    n = a.shape[0]
    full = 1 << n
    dp = np.zeros((full, top + 1), np.int64)
    reach = np.zeros(full, np.int64)  # largest partial sum reached by each mask
    dp[0, 0] = 1
    for mask in range(full):
        k = 0
        m = mask
        while m:
            k += m & 1
            m >>= 1
        if k == n:
            continue
        hi = reach[mask]
        for j in range(n):
            if mask & (1 << j):
                continue
            step = a[k] * b[j]
            nxt = mask | (1 << j)
            for t in range(hi + 1):
                c = dp[mask, t]
                if c:
                    dp[nxt, t + step] += c
            if hi + step > reach[nxt]:
                reach[nxt] = hi + step
    return dp[full - 1].copy()


@kernel(cache=True, nogil=True, python_max_n=64)
def exact_score_sums(x_scores, y_scores):
    """Exact sums of products of integer rank scores, split in high and low 32-bit parts.

    Each product is below 2^45 for n up to 5e6; the low parts (< 2^32 each)
    and the arithmetic-shifted high parts add up without overflow for any n
    below 2^23, so ``hi * 2^32 + lo`` is the exact integer sum.
    """
    n = x_scores.shape[0]
    hi = np.zeros(3, np.int64)
    lo = np.zeros(3, np.int64)
    for k in range(n):
        a = x_scores[k]
        b = y_scores[k]
        for idx in range(3):
            if idx == 0:
                prod = a * b
            elif idx == 1:
                prod = a * a
            else:
                prod = b * b
            hi[idx] += prod >> 32
            lo[idx] += prod & 0xFFFFFFFF
    return hi, lo


# --- private helpers ----------------------------------------------------------

def _tie_stats_unique(v: np.ndarray) -> tuple[int, float, float]:
    _, t = np.unique(v, return_counts=True)
    t = t[t > 1].astype(np.int64)
    tf = t.astype(float)
    return (int((t * (t - 1) // 2).sum()), float((tf * (tf - 1) * (tf - 2)).sum()),
            float((tf * (tf - 1) * (2 * tf + 5)).sum()))


def _scores(values: np.ndarray) -> np.ndarray:
    """Integer rank scores 2 * midrank - (n + 1): centred mid-ranks times 2, exact in int64."""
    return np.rint(2.0 * midranks(values) - (values.size + 1)).astype(np.int64)


def _join_sums(hi: np.ndarray, lo: np.ndarray) -> tuple[int, int, int]:
    return tuple(int(h) * 2**32 + int(l) for h, l in zip(hi, lo))


def _two_sided_counts(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, int]:
    """Counts of T = sum a_i b_p(i) over all n! permutations p, as (counts, offset): T = index + offset."""
    a_min, b_min = int(a.min()), int(b.min())
    a0, b0 = (a - a_min).astype(np.int64), (b - b_min).astype(np.int64)
    # rearrangement inequality: the largest sum pairs the sorted scores
    top = int(np.dot(np.sort(a0), np.sort(b0)))
    counts = _assignment_counts(a0, b0, top)
    offset = a_min * int(b0.sum()) + b_min * int(a0.sum()) + a.size * a_min * b_min
    return counts, offset


@lru_cache(maxsize=32)
def _untied_counts(n: int) -> tuple[np.ndarray, int]:
    scores = np.arange(-(n - 1), n, 2, dtype=np.int64)
    return _two_sided_counts(scores, scores)


def _exact_from_counts(counts: np.ndarray, offset: int, t_observed: int) -> float:
    """P(|T| >= |t|) from the exact counts of T, in integers; T is centred (E T = 0)."""
    t_values = np.arange(counts.size, dtype=np.int64) + offset
    hits = int(counts[np.abs(t_values) >= abs(t_observed)].sum())
    total = int(counts.sum())
    return min(1.0, hits / total)


def _edgeworth_upper(n: int, s: float) -> float:
    """P(S >= s) for S = sum d^2 of n untied rows, by the Edgeworth series of Best & Roberts (1975).

    The coefficients and the continuity correction (s - 1) are those of
    algorithm AS 89, as printed in the paper and carried by R's prho.c.
    """
    n3 = n * (n * n - 1) / 3.0
    if s <= 0:
        return 1.0
    if s > n3:
        return 0.0
    c1, c2, c3, c4, c5, c6 = 0.2274, 0.2531, 0.1745, 0.0758, 0.1033, 0.3932
    c7, c8, c9, c10, c11, c12 = 0.0879, 0.0151, 0.0072, 0.0831, 0.0131, 4.6e-4
    b = 1.0 / n
    x = (6.0 * (s - 1.0) * b / (n * n - 1.0) - 1.0) * math.sqrt(n - 1.0)
    y = x * x
    u = x * b * (c1 + b * (c2 + c3 * b) + y * (-c4 + b * (c5 + c6 * b)
                 - y * b * (c7 + c8 * b - y * (c9 - c10 * b + y * b * (c11 - c12 * y)))))
    p = u / math.exp(y / 2.0) + 0.5 * float(special.erfc(x / math.sqrt(2.0)))
    return min(1.0, max(0.0, p))


def _permutation_pvalue(a: np.ndarray, b: np.ndarray, t_observed: int, draws: int, seed) -> float:
    """(1 + #{|T_b| >= |t|}) / (1 + B) over B seeded random permutations of b."""
    rng = np.random.default_rng(seed)
    hits = 0
    chunk = max(1, min(draws, 2_000_000 // max(a.size, 1)))
    done = 0
    while done < draws:
        c = min(chunk, draws - done)
        perms = rng.permuted(np.broadcast_to(b, (c, b.size)), axis=1)
        hits += int(np.count_nonzero(np.abs(perms @ a) >= abs(t_observed)))
        done += c
    return (1.0 + hits) / (1.0 + draws)


def _is_untied(sum_sq_4: int, n: int) -> bool:
    # sum of squared integer scores equals (n^3 - n)/3 exactly when there are no ties
    return sum_sq_4 == (n * n * n - n) // 3


def _naive_counts(x: np.ndarray, y: np.ndarray) -> KendallCounts:
    """O(n^2) oracle: the sign of every pair, one row of pairs at a time."""
    n = x.size
    discordant = tied_x = tied_y = tied_xy = 0
    for i in range(n - 1):
        sx = np.sign(x[i + 1:] - x[i])
        sy = np.sign(y[i + 1:] - y[i])
        discordant += int(np.count_nonzero(sx * sy < 0))
        tx = sx == 0
        ty = sy == 0
        tied_x += int(np.count_nonzero(tx))
        tied_y += int(np.count_nonzero(ty))
        tied_xy += int(np.count_nonzero(tx & ty))
    _, x_t3, x_t5 = _tie_stats_unique(x)
    _, y_t3, y_t5 = _tie_stats_unique(y)
    return KendallCounts(n, discordant, tied_x, tied_y, tied_xy, x_t3, x_t5, y_t3, y_t5)


def _knight(x: np.ndarray, y: np.ndarray) -> KendallCounts:
    order = np.argsort(x, kind="stable")
    counts = knight_counts(np.ascontiguousarray(x[order]), np.ascontiguousarray(y[order]))
    d, tx, ty, txy, x3, x5, y3, y5 = counts
    return KendallCounts(x.size, int(d), int(tx), int(ty), int(txy), float(x3), float(x5),
                         float(y3), float(y5))


@lru_cache(maxsize=64)
def _inversion_cdf(n: int) -> tuple[int, ...]:
    """Number of permutations of n items with at most k inversions, k = 0..n(n-1)/2.

    Mahonian numbers by the recursion of adding one item at a time: the new
    item can create 0..j-1 inversions. Exact integers.
    """
    top = n * (n - 1) // 2
    counts = [1] + [0] * top
    for j in range(2, n + 1):
        prefix = [0] * (top + 2)
        for k in range(top + 1):
            prefix[k + 1] = prefix[k] + counts[k]
        counts = [prefix[k + 1] - prefix[max(0, k - j + 1)] for k in range(top + 1)]
    cdf = []
    running = 0
    for c in counts:
        running += c
        cdf.append(running)
    return tuple(cdf)


def _kendall_normal_pvalue(c: KendallCounts) -> float:
    n = c.n
    m = n * (n - 1.0)
    var = ((m * (2 * n + 5) - c.x_t5 - c.y_t5) / 18.0
           + 2.0 * c.tied_x * c.tied_y / m
           + c.x_t3 * c.y_t3 / (9.0 * m * (n - 2)))
    if not var > 0.0:
        return math.nan
    z = abs(c.score) / math.sqrt(var)
    return float(special.erfc(z / math.sqrt(2.0)))


def _uses_exact(c: KendallCounts) -> bool:
    if c.tied_x or c.tied_y:
        return False
    return c.n <= KENDALL_EXACT_MAX_N or min(c.discordant, c.total - c.discordant) <= 1


def _rank_interval(estimate: float, n: int, variance_numerator: float, min_n: int,
                   confidence: float) -> tuple[float, float, str]:
    if n > min_n:
        low, high = fisher_z_interval(estimate, math.sqrt(variance_numerator / (n - min_n)), confidence)
        return low, high, ""
    return -1.0, 1.0, f"interval is the whole range: Fisher z needs more than {min_n} rows"


# --- public functions ---------------------------------------------------------

class KendallCounts(NamedTuple):
    """Pair counts behind tau-b and its tie-corrected variance.

    ``tied_x`` and ``tied_y`` include the pairs tied on both (``tied_xy``).
    The ``*_t3`` and ``*_t5`` fields are :math:`\\sum t(t-1)(t-2)` and
    :math:`\\sum t(t-1)(2t+5)` over the tie groups of sizes :math:`t`.
    """

    n: int
    discordant: int
    tied_x: int
    tied_y: int
    tied_xy: int
    x_t3: float
    x_t5: float
    y_t3: float
    y_t5: float

    @property
    def total(self) -> int:
        return self.n * (self.n - 1) // 2

    @property
    def concordant(self) -> int:
        return self.total - self.tied_x - self.tied_y + self.tied_xy - self.discordant

    @property
    def score(self) -> int:
        """Concordant minus discordant pairs, :math:`S`."""
        return self.concordant - self.discordant


@kernel(cache=True, nogil=True, python_max_n=64)
def knight_counts(x_sorted, y_by_x):
    """Knight's O(n log n) pair counts from rows already sorted by x.

    Parameters
    ----------
    x_sorted : numpy.ndarray
        x values in ascending order (float64, no NaN).
    y_by_x : numpy.ndarray
        y values of the same rows in the same order; within a run of tied x
        they need not be sorted (the kernel sorts them). Not modified.

    Returns
    -------
    tuple
        ``(discordant, tied_x, tied_y, tied_xy, x_t3, x_t5, y_t3, y_t5)`` as in
        :class:`KendallCounts`. Meant for an engine that sorts each column
        once and reuses the order for many pairs.
    """
    n = x_sorted.shape[0]
    work = y_by_x.copy()
    tied_xy = 0
    start = 0
    for i in range(1, n + 1):
        if i == n or x_sorted[i] != x_sorted[start]:
            if i - start > 1:
                # Within a run of tied x, y ascending: these pairs then add no inversions.
                work[start:i] = np.sort(work[start:i])
                run_pairs, _, _ = _tie_runs(work[start:i])
                tied_xy += run_pairs
            start = i
    tied_x, x_t3, x_t5 = _tie_runs(x_sorted)
    discordant = _merge_sort_inversions(work)
    tied_y, y_t3, y_t5 = _tie_runs(work)
    return discordant, tied_x, tied_y, tied_xy, x_t3, x_t5, y_t3, y_t5



def midranks(x: np.ndarray) -> np.ndarray:
    """Ranks 1..n with ties given the mean of the ranks they span.

    Parameters
    ----------
    x : numpy.ndarray
        1-D array. NaN entries get a NaN rank and the others are ranked among
        themselves.

    Returns
    -------
    numpy.ndarray
        float64 ranks, same length as ``x``.

    Notes
    -----
    One stable argsort; a tie group occupying sorted positions
    :math:`s+1, \\dots, e` gets :math:`(s + 1 + e)/2`. Equal to
    ``scipy.stats.rankdata(x, method="average")`` on NaN-free input.

    References
    ----------
    Kendall, M.G. (1945). The treatment of ties in ranking problems.
    Biometrika 33:239-251. doi:10.1093/biomet/33.3.239

    Examples
    --------
    >>> midranks(np.array([3.0, 1.0, 3.0, 2.0])).tolist()
    [3.5, 1.0, 3.5, 2.0]
    """
    x = np.asarray(x, dtype=float).reshape(-1)
    out = np.full(x.shape, np.nan)
    present = ~np.isnan(x)
    values = x[present]
    n = values.size
    if n == 0:
        return out
    order = np.argsort(values, kind="stable")
    ordered = values[order]
    new_run = np.empty(n, dtype=bool)
    new_run[0] = True
    np.not_equal(ordered[1:], ordered[:-1], out=new_run[1:])
    starts = np.flatnonzero(new_run)
    ends = np.append(starts[1:], n)
    run_rank = (starts + 1 + ends) / 2.0
    ranks = np.empty(n)
    ranks[order] = run_rank[np.cumsum(new_run) - 1]
    out[present] = ranks
    return out


def spearman_matrix(data: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """All-pairs Spearman rho of complete data: rank each column once, one BLAS product.

    Parameters
    ----------
    data : numpy.ndarray
        (n, p) float array without missing values (pairwise-missing data need
        per-pair ranks; use :func:`spearman` on each pair).

    Returns
    -------
    rho : numpy.ndarray
        (p, p); NaN for constant columns or fewer than 3 rows.
    n_used : numpy.ndarray
        (p, p) int64 rows used (all n).

    Notes
    -----
    :math:`\\rho_s(i, j) = r(R_i, R_j)` with :math:`R` the mid-ranks of each
    column; the Pearson step is :func:`pairlens.core.linear.pearson_matrix`.

    References
    ----------
    Spearman, C. (1904). The proof and measurement of association between two
    things. Am. J. Psychol. 15:72-101. doi:10.2307/1412159

    Examples
    --------
    >>> rng = np.random.default_rng(5)
    >>> data = rng.normal(size=(50, 3))
    >>> data[:, 2] = np.exp(data[:, 0])
    >>> rho, n_used = spearman_matrix(data)
    >>> round(float(rho[0, 2]), 12), int(n_used[0, 1])
    (1.0, 50)
    """
    data = np.asarray(data, dtype=float)
    if data.ndim != 2:
        raise ValueError("data must be a 2-D (rows, columns) array")
    if np.isnan(data).any():
        raise ValueError("spearman_matrix needs complete data; rank each pair's complete rows instead")
    ranks = np.empty_like(data)
    for j in range(data.shape[1]):
        ranks[:, j] = midranks(data[:, j])
    return pearson_matrix(ranks, missing="complete")


def spearman_null_counts(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Exact null law of :math:`S = \\sum d_i^2` for n untied rows: values and permutation counts.

    Parameters
    ----------
    n : int
        Rows, 2 to about 16 (the recursion takes 2^n n^3 steps and memory).

    Returns
    -------
    s_values, counts : numpy.ndarray
        The even values S takes and how many of the n! permutations give each.

    Notes
    -----
    With integer scores :math:`a_i = 2i - (n+1)` the statistic
    :math:`T = \\sum_i a_i a_{p(i)}` equals :math:`4\\sum r_x r_y` for centred
    ranks, and :math:`S = (n^3 - n)/6 - T/2`. Its counts come from a recursion
    over the subsets of values already placed (position k is filled once k
    values are used), exact in integers.

    References
    ----------
    Kendall, M.G., Kendall, S.F.H. & Babington Smith, B. (1939). The
    distribution of Spearman's coefficient of rank correlation in a universe
    in which all rankings occur an equal number of times. Biometrika
    30:251-273. doi:10.1093/biomet/30.3-4.251

    Examples
    --------
    >>> s, c = spearman_null_counts(3)
    >>> s.tolist(), c.tolist()
    ([0, 2, 6, 8], [1, 2, 2, 1])
    """
    counts, offset = _untied_counts(int(n))
    t = np.arange(counts.size, dtype=np.int64) + offset
    keep = counts > 0
    s_values = (n * n * n - n) // 6 - t[keep] // 2
    order = np.argsort(s_values)
    return s_values[order], counts[keep][order]


def spearman_exact_pvalue(n: int, s: int) -> float:
    """Two-sided exact p-value of Spearman's rho for n untied rows with :math:`\\sum d^2 = s`.

    Parameters
    ----------
    n : int
        Rows (3 to about 16).
    s : int
        Observed :math:`S = \\sum (r_{x,i} - r_{y,i})^2`.

    Returns
    -------
    float
        :math:`P(|S' - m| \\ge |s - m|)`, :math:`m = (n^3 - n)/6`, over the n!
        equally likely permutations; the law is symmetric about m, so this is
        twice the smaller tail, capped at 1.

    Notes
    -----
    Counts from :func:`spearman_null_counts`; the smallest value is
    :math:`2/n!` (rho = 1 or -1).

    References
    ----------
    Kendall, Kendall & Babington Smith (1939). Biometrika 30:251-273.
    doi:10.1093/biomet/30.3-4.251

    Examples
    --------
    >>> spearman_exact_pvalue(3, 0)
    0.3333333333333333
    """
    counts, offset = _untied_counts(int(n))
    t_observed = 2 * ((n * n * n - n) // 6 - int(s))
    return _exact_from_counts(counts, offset, t_observed)


def spearman_edgeworth_pvalue(n: int, s: int) -> float:
    """Two-sided p-value of Spearman's rho for n untied rows by the Edgeworth series (AS 89).

    Parameters
    ----------
    n : int
        Rows (meant for n above :data:`pairlens.config.SPEARMAN_EXACT_MAX_N`).
    s : int
        Observed :math:`S = \\sum d^2` (an even integer).

    Returns
    -------
    float
        :math:`\\min(1, 2 P)`, P the tail on the observed side:
        :math:`P(S' \\ge s)` when s is above the mean :math:`(n^3 - n)/6`, else
        :math:`P(S' \\le s)`, each from the series.

    Notes
    -----
    Best & Roberts (1975) write :math:`P(S \\ge s)` as
    :math:`1 - \\Phi(x) + u(x) e^{-x^2/2}` with
    :math:`x = (6(s-1)/(n^3-n) - 1)\\sqrt{n-1}` and u a polynomial in x and
    1/n (twelve published coefficients); the lower tail is
    :math:`P(S \\le s) = 1 - P(S \\ge s + 2)`, S being even. R's
    ``cor.test(method = "spearman")`` uses the same series for
    9 < n < 1290 without ties and the same two-sided rule (from memory).

    References
    ----------
    Best, D.J. & Roberts, D.E. (1975). Algorithm AS 89: The upper tail
    probabilities of Spearman's rho. Applied Statistics 24:377-379.
    doi:10.2307/2347111

    Examples
    --------
    >>> round(spearman_edgeworth_pvalue(20, 1330), 6)
    1.0
    """
    s = int(s)
    # S is even: P(S >= s) = P(S >= s - 1) and P(S <= s) = 1 - P(S >= s + 2); the series is
    # evaluated at those arguments, as AS 89 is called by R's cor.test (from memory).
    if 6 * s > n * n * n - n:
        tail = _edgeworth_upper(n, s - 1)
    else:
        tail = 1.0 - _edgeworth_upper(n, s + 2)
    return min(1.0, 2.0 * tail)


def spearman_needs_rows(sum_xx: float, sum_yy: float, n: int) -> bool:
    """True when the default p-value of these sums needs the rows (tied and small: a permutation test).

    Examples
    --------
    >>> spearman_needs_rows(10.0, 10.0, 5), spearman_needs_rows(9.5, 10.0, 5)
    (False, True)
    """
    if n >= config.SPEARMAN_T_MIN_N:
        return False
    tied = not (_is_untied(round(4 * sum_xx), n) and _is_untied(round(4 * sum_yy), n))
    return tied and n <= config.SPEARMAN_TIED_PERMUTATION_MAX_N


def spearman(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, seed=None) -> TestResult:
    """Spearman rho, its permutation p-value (exact or approximated), Fisher z interval (Bonett & Wright SE).

    Parameters
    ----------
    x, y : numpy.ndarray
        1-D arrays of equal length; rows with NaN on either side are dropped.
    confidence : float
        Level of the interval.
    seed : int or numpy.random.SeedSequence, optional
        Drives the random permutations of small tied samples only (default:
        :data:`pairlens.config.DEFAULT_SEED`, so a call is reproducible).

    Returns
    -------
    TestResult
        ``method`` names the p-value's law (see Notes). Undefined when fewer
        than 3 rows remain or a column is constant; with 3 rows the interval
        is the whole range (-1, 1), with a note.

    Notes
    -----
    :math:`\\rho_s` is the Pearson correlation of the mid-ranks (ties share
    the mean rank). Under independence every pairing of the y ranks with the
    x ranks is equally likely; the p-value refers :math:`\\rho_s` to that law:

    * no ties, :math:`n \\le 12`: exact (:func:`spearman_exact_pvalue`);
    * no ties, :math:`12 < n < 150`: Edgeworth series of Best & Roberts
      (1975) (:func:`spearman_edgeworth_pvalue`);
    * ties, :math:`n \\le 10`: exact, all n! pairings of the mid-rank scores
      counted; ties, :math:`10 < n < 150`: 9,999 seeded random permutations,
      :math:`(1 + \\#\\{|\\rho^*| \\ge |\\rho_s|\\})/(1 + B)`;
    * :math:`n \\ge 150`: :math:`t = \\rho_s\\sqrt{(n-2)/(1-\\rho_s^2)}`
      referred to :math:`t_{n-2}` (``scipy.stats.spearmanr``'s p-value), whose
      level holds there (``benchmarks/spearman_level.py``).

    The limits are in :mod:`pairlens.config`. Interval:
    :math:`\\tanh(\\operatorname{atanh}\\rho_s \\mp z_{(1+c)/2}\\,
    \\sqrt{(1 + \\rho_s^2/2)/(n-3)})` (Bonett & Wright 2000).

    References
    ----------
    Spearman, C. (1904). Am. J. Psychol. 15:72-101. doi:10.2307/1412159

    Best, D.J. & Roberts, D.E. (1975). Algorithm AS 89. Applied Statistics
    24:377-379. doi:10.2307/2347111

    Bonett, D.G. & Wright, T.A. (2000). Sample size requirements for
    estimating Pearson, Kendall and Spearman correlations. Psychometrika
    65:23-28. doi:10.1007/BF02294183

    Examples
    --------
    >>> rng = np.random.default_rng(2)
    >>> x = rng.normal(size=160)
    >>> res = spearman(x, np.exp(x) + 0.5 * rng.normal(size=160))
    >>> res.method, res.n, bool(-1 <= res.ci_low < res.estimate < res.ci_high <= 1)
    ('t approximation, n-2 df', 160, True)
    >>> spearman(np.arange(3.0), np.arange(3.0) ** 2).p_value
    0.3333333333333333
    """
    x, y, degenerate = screen_pair(x, y, "t approximation, n-2 df")
    if degenerate is not None:
        return degenerate
    n = x.size
    ax, ay = _scores(x), _scores(y)
    txy, txx, tyy = _join_sums(*exact_score_sums(ax, ay))
    return spearman_from_sums(txy / 4, txx / 4, tyy / 4, n, confidence=confidence,
                              x_scores=ax, y_scores=ay, seed=seed)


def spearman_estimate(x: np.ndarray, y: np.ndarray) -> float:
    """Spearman rho alone, the same bits as ``spearman(x, y).estimate``, without its test.

    For callers that read only the estimate (the verdict): the test of a small
    tied sample draws thousands of permutations.

    Parameters
    ----------
    x, y : numpy.ndarray
        1-D arrays of equal length; rows with NaN on either side are dropped.

    Returns
    -------
    float
        NaN where :func:`spearman` is undefined (fewer than 3 rows, a constant column).

    Examples
    --------
    >>> x = np.array([1.0, 2.0, 2.0, 3.0, 5.0]); y = np.array([2.0, 1.0, 4.0, 4.0, 9.0])
    >>> spearman_estimate(x, y) == spearman(x, y).estimate
    True
    """
    x, y, degenerate = screen_pair(x, y, "")
    if degenerate is not None:
        return float(degenerate.estimate)
    txy, txx, tyy = _join_sums(*exact_score_sums(_scores(x), _scores(y)))
    rho = float((txy / 4) / math.sqrt((txx / 4) * (tyy / 4)))
    return min(1.0, max(-1.0, rho))


def spearman_from_sums(sum_xy: float, sum_xx: float, sum_yy: float, n: int, *,
                       confidence: float = 0.95, x_scores: np.ndarray | None = None,
                       y_scores: np.ndarray | None = None, seed=None) -> TestResult:
    """:func:`spearman` of a non-degenerate pair from its centred mid-rank sums.

    Parameters
    ----------
    sum_xy, sum_xx, sum_yy : float
        :math:`\\sum r_x r_y`, :math:`\\sum r_x^2`, :math:`\\sum r_y^2` over the
        rows, :math:`r` the mid-ranks minus :math:`(n+1)/2`: multiples of 1/4,
        best computed exactly (:func:`exact_score_sums`) and rounded once, so
        any order of summation gives the same bits.
    n : int
        Rows (at least 3; neither column constant).
    confidence : float
        Level of the interval.
    x_scores, y_scores : numpy.ndarray, optional
        The integer scores :math:`2 r`; needed only when
        :func:`spearman_needs_rows` (tied and fewer than
        :data:`pairlens.config.SPEARMAN_T_MIN_N` rows).
    seed : optional
        Seed of the permutations of a tied small sample.

    Returns
    -------
    TestResult
        The same result as :func:`spearman` on the rows.

    Notes
    -----
    :math:`\\rho_s = \\sum r_x r_y / \\sqrt{\\sum r_x^2 \\sum r_y^2}`; p-value and
    interval as in :func:`spearman`; untied samples are recognised by
    :math:`\\sum r^2 = (n^3 - n)/12`, and their S is
    :math:`(n^3 - n)/6 - 2\\sum r_x r_y`.

    References
    ----------
    Spearman, C. (1904). Am. J. Psychol. 15:72-101. doi:10.2307/1412159

    Examples
    --------
    >>> res = spearman_from_sums(8.0, 10.0, 10.0, 5)
    >>> round(res.estimate, 3), res.method, round(res.p_value, 4)
    (0.8, 'exact', 0.1333)
    """
    rho = float(sum_xy / math.sqrt(sum_xx * sum_yy))
    rho = min(1.0, max(-1.0, rho))
    tied = not (_is_untied(round(4 * sum_xx), n) and _is_untied(round(4 * sum_yy), n))
    if n >= config.SPEARMAN_T_MIN_N or (tied and n > config.SPEARMAN_TIED_PERMUTATION_MAX_N):
        p, method = correlation_t_pvalue(rho, n), "t approximation, n-2 df"
    elif not tied:
        s = (n * n * n - n) // 6 - round(2 * sum_xy)
        if n <= config.SPEARMAN_EXACT_MAX_N:
            p, method = spearman_exact_pvalue(n, s), "exact"
        else:
            p, method = spearman_edgeworth_pvalue(n, s), "Edgeworth series (AS 89)"
    else:
        if x_scores is None or y_scores is None:
            raise ValueError("a tied sample below SPEARMAN_T_MIN_N rows needs its scores for the permutation test")
        t_observed = round(4 * sum_xy)
        if n <= config.SPEARMAN_TIED_EXACT_MAX_N:
            counts, offset = _two_sided_counts(np.asarray(x_scores, np.int64), np.asarray(y_scores, np.int64))
            p, method = _exact_from_counts(counts, offset, t_observed), "exact permutation (ties)"
        else:
            b = config.SPEARMAN_SMALL_N_PERMUTATIONS
            a_s, b_s = np.asarray(x_scores, np.int64), np.asarray(y_scores, np.int64)
            # the same side is shuffled whichever column comes first, so rho(x, y) and rho(y, x)
            # get the same p-value; without a seed the analysis default keeps it reproducible
            if a_s.tobytes() > b_s.tobytes():
                a_s, b_s = b_s, a_s
            p = _permutation_pvalue(a_s, b_s, t_observed, b, config.DEFAULT_SEED if seed is None else seed)
            method = f"permutation, B={b} (ties, n < {config.SPEARMAN_T_MIN_N})"
    low, high, note = _rank_interval(rho, n, 1.0 + rho * rho / 2.0, 3, confidence)
    return TestResult(rho, p, method, low, high, n, note)


def kendall_counts(x: np.ndarray, y: np.ndarray, *, method: str = "auto") -> KendallCounts:
    """Concordance and tie counts of complete 1-D arrays.

    Parameters
    ----------
    x, y : numpy.ndarray
        1-D float arrays of equal length without NaN.
    method : {"auto", "knight", "naive"}
        ``"auto"`` = ``"knight"``: sort once, count ties, count discordant
        pairs as merge-sort swaps (O(n log n), compiled). ``"naive"``: the
        sign of every pair (O(n^2)), kept as the test oracle.

    Returns
    -------
    KendallCounts
        Identical integers from both methods.

    Notes
    -----
    A pair (i, j) is discordant when
    :math:`(x_i - x_j)(y_i - y_j) < 0`; after sorting rows by x and, within
    tied x, by y, these are exactly the inversions of the y sequence.

    References
    ----------
    Knight, W.R. (1966). JASA 61:436-439. doi:10.1080/01621459.1966.10480879

    Examples
    --------
    >>> c = kendall_counts(np.array([1.0, 2.0, 2.0, 3.0]), np.array([1.0, 3.0, 2.0, 2.0]))
    >>> c.discordant, c.tied_x, c.tied_y, c.concordant
    (1, 1, 1, 3)
    """
    if method not in ("auto", "knight", "naive"):
        raise ValueError(f"unknown Kendall method {method!r}; choose auto, knight or naive")
    x = np.ascontiguousarray(x, dtype=float)
    y = np.ascontiguousarray(y, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError("x and y must be 1-D arrays of the same length")
    if method == "naive":
        return _naive_counts(x, y)
    return _knight(x, y)


def kendall_exact_pvalue(n: int, discordant: int) -> float:
    """Two-sided exact p-value of Kendall's S for n untied rows.

    Parameters
    ----------
    n : int
        Rows (no ties in x or y).
    discordant : int
        Discordant pairs :math:`D`.

    Returns
    -------
    float
        :math:`\\min(1, 2 P(D' \\le \\min(D, n_0 - D)))` under independence.

    Notes
    -----
    Under independence the y ranks in x order are a uniformly random
    permutation, and :math:`D` is its number of inversions; the counts of
    permutations with k inversions (Mahonian numbers) follow from adding one
    item at a time, the j-th creating 0..j-1 new inversions. Computed in exact
    integers, the same rule and values as ``scipy.stats.kendalltau``'s exact
    branch.

    References
    ----------
    Kendall, M.G. (1938). Biometrika 30:81-93. doi:10.1093/biomet/30.1-2.81

    Examples
    --------
    >>> round(kendall_exact_pvalue(10, 9), 6)
    0.016666
    """
    total = n * (n - 1) // 2
    k = min(discordant, total - discordant)
    if n <= 1:
        return 1.0
    if k == 0:
        at_most = 1
    elif k == 1:
        at_most = n  # the identity and the n-1 adjacent swaps
    else:
        at_most = _inversion_cdf(n)[k]
    return min(1.0, 2 * at_most / math.factorial(n))


def kendall(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, method: str = "auto") -> TestResult:
    """Kendall tau-b with its p-value and a Fisher z interval.

    Parameters
    ----------
    x, y : numpy.ndarray
        1-D arrays of equal length; rows with NaN on either side are dropped.
    confidence : float
        Level of the interval.
    method : {"auto", "knight", "naive"}
        How the pairs are counted: ``"auto"`` = ``"knight"``, Knight's
        O(n log n) merge-sort algorithm; ``"naive"`` the O(n^2) oracle.

    Returns
    -------
    TestResult
        ``method`` is ``"exact"`` or ``"normal, tie-corrected variance"``.
        Undefined when fewer than 3 rows remain or a column is constant; with
        at most 4 rows the interval is the whole range (-1, 1), with a note.

    Notes
    -----
    With :math:`n_0 = n(n-1)/2`, :math:`n_1, n_2` the pairs tied in x, y,
    :math:`n_3` tied in both, :math:`D` the discordant pairs and
    :math:`C = n_0 - n_1 - n_2 + n_3 - D`:

    .. math:: \\tau_b = \\frac{C - D}{\\sqrt{(n_0 - n_1)(n_0 - n_2)}}

    Knight (1966): sort by x then y, count ties in x and in both, then a merge
    sort of y counts the swaps, which are the discordant pairs, and leaves y
    sorted for its tie count.

    p-value, the same rule as ``scipy.stats.kendalltau(method="auto")``:
    exact when there are no ties and :math:`n \\le 33` (or at most one
    discordant or concordant pair), from the law of the number of inversions
    of a random permutation; otherwise :math:`S = C - D` is referred to a
    normal with Kendall's (1945) tie-corrected variance

    .. math::

        \\operatorname{var} S = \\frac{v_0 - v_x - v_y}{18}
        + \\frac{2 n_1 n_2}{n(n-1)} + \\frac{u_x u_y}{9 n(n-1)(n-2)},

    :math:`v_0 = n(n-1)(2n+5)`, :math:`v = \\sum t(t-1)(2t+5)`,
    :math:`u = \\sum t(t-1)(t-2)` over tie groups.

    Interval: :math:`\\tanh(\\operatorname{atanh}\\tau_b \\mp
    z_{(1+c)/2}\\sqrt{0.437/(n-4)})` (Fieller, Hartley & Pearson 1957; derived
    for untied data, used here as an approximation under ties).

    References
    ----------
    Kendall, M.G. (1938). A new measure of rank correlation. Biometrika
    30:81-93. doi:10.1093/biomet/30.1-2.81

    Kendall, M.G. (1945). The treatment of ties in ranking problems.
    Biometrika 33:239-251. doi:10.1093/biomet/33.3.239

    Knight, W.R. (1966). A computer method for calculating Kendall's tau with
    ungrouped data. JASA 61:436-439. doi:10.1080/01621459.1966.10480879

    Fieller, E.C., Hartley, H.O. & Pearson, E.S. (1957). Tests for rank
    correlation coefficients. I. Biometrika 44:470-481.
    doi:10.1093/biomet/44.3-4.470

    Examples
    --------
    >>> rng = np.random.default_rng(4)
    >>> x = rng.integers(0, 5, size=80).astype(float)
    >>> y = x + rng.integers(0, 3, size=80)
    >>> res = kendall(x, y)
    >>> res.method, res.n, res.estimate == kendall(x, y, method="naive").estimate
    ('normal, tie-corrected variance', 80, True)
    """
    x, y, degenerate = screen_pair(x, y)
    if degenerate is not None:
        return degenerate
    c = kendall_counts(x, y, method=method)
    return kendall_from_counts(c, confidence=confidence)


def kendall_from_counts(c: KendallCounts, *, confidence: float = 0.95) -> TestResult:
    """:func:`kendall` of a non-degenerate pair from its Knight counts.

    Parameters
    ----------
    c : KendallCounts
        Pair counts (from :func:`kendall_counts` or :func:`knight_counts`);
        at least 3 rows, neither column constant.
    confidence : float
        Level of the interval.

    Returns
    -------
    TestResult
        The same result as :func:`kendall` on the rows.

    Notes
    -----
    :math:`\\tau_b = (C - D)/\\sqrt{(n_0 - n_1)(n_0 - n_2)}`; p-value (exact or
    normal with Kendall's tie-corrected variance) and interval as in
    :func:`kendall`.

    References
    ----------
    Kendall, M.G. (1945). Biometrika 33:239-251. doi:10.1093/biomet/33.3.239

    Examples
    --------
    >>> c = kendall_counts(np.array([1.0, 2.0, 3.0, 4.0]), np.array([1.0, 3.0, 2.0, 4.0]))
    >>> round(kendall_from_counts(c).estimate, 4)
    0.6667
    """
    n = c.n
    # One square root of the exact integer product: tau_b is exactly 1 for a monotone relation.
    denom = math.sqrt((c.total - c.tied_x) * (c.total - c.tied_y))
    tau = min(1.0, max(-1.0, c.score / denom))
    if _uses_exact(c):
        p_value, test = kendall_exact_pvalue(n, c.discordant), "exact"
    else:
        p_value, test = _kendall_normal_pvalue(c), "normal, tie-corrected variance"
    low, high, note = _rank_interval(tau, n, _FHP_VARIANCE, 4, confidence)
    if math.isnan(p_value):
        note = "; ".join(filter(None, [note, "variance of S is zero: no p-value"]))
    return TestResult(tau, p_value, test, low, high, n, note)
