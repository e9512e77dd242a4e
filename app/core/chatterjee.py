"""Chatterjee's rank correlation xi_n(x -> y).

xi_n measures how well y is a function of x (not the other way round): it is
0 in the limit exactly when x and y are independent and 1 exactly when y is a
measurable function of x, monotone or not.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr

from .. import config
from .results import TestResult, undefined

__all__ = ["xi", "xi_null_variance", "xi_tie_keys", "xi_from_order"]

_METHODS = ("auto", "asymptotic", "permutation")


def _complete_rows(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(x, dtype=np.float64).ravel()
    y = np.asarray(y, dtype=np.float64).ravel()
    if x.shape != y.shape:
        raise ValueError(f"x and y differ in length ({x.size} and {y.size})")
    keep = np.isfinite(x) & np.isfinite(y)
    if not keep.all():
        x, y = x[keep], y[keep]
    return x, y


def _streams(seed) -> tuple[np.random.Generator, np.random.Generator]:
    """Independent generators for tie-breaking and for permutations, so that
    asking for permutations does not change how ties were broken."""
    tie_rng, perm_rng = np.random.default_rng(seed).spawn(2)
    return tie_rng, perm_rng


def _order_by_x(x: np.ndarray, seed) -> np.ndarray:
    """Row order with x increasing; ties in x broken uniformly at random.

    The random keys are drawn only when x has ties, so untied data give the
    same order whatever the seed (and the same value as scipy).
    """
    order = np.argsort(x, kind="stable")
    xs = x[order]
    if xs.size > 1 and np.any(xs[1:] == xs[:-1]):
        order = np.lexsort((xi_tie_keys(seed, x.size), x))
    return order


def _ranks_up_down(y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """r_i = #{j: y_j <= y_i} and l_i = #{j: y_j >= y_i}, by one sort."""
    ys = np.sort(y)
    r = np.searchsorted(ys, y, side="right").astype(np.int64)
    l = (y.size - np.searchsorted(ys, y, side="left")).astype(np.int64)
    return r, l


def _tau2_tie_corrected(r: np.ndarray, l: np.ndarray) -> float:
    """n Var(xi_n) in the limit under independence, Chatterjee (2021) Theorem 2.2.

    With u the r_i sorted increasingly and v_i = u_1 + ... + u_i:
    a_n = sum (2n - 2i + 1) u_i^2 / n^4, b_n = sum (v_i + (n - i) u_i)^2 / n^5,
    c_n = sum (2n - 2i + 1) u_i / n^3, d_n = sum l_i (n - l_i) / n^3,
    tau^2 = (a_n - 2 b_n + c_n^2) / d_n^2.  Without ties it tends to 2/5.
    """
    n = r.size
    nf = float(n)
    i = np.arange(1, n + 1, dtype=np.float64)
    u = np.sort(r).astype(np.float64)
    v = np.cumsum(u)
    weight = 2.0 * nf - 2.0 * i + 1.0
    an = np.sum(weight * u**2) / nf**4
    bn = np.sum((v + (nf - i) * u) ** 2) / nf**5
    cn = np.sum(weight * u) / nf**3
    lf = l.astype(np.float64)
    dn = np.sum(lf * (nf - lf)) / nf**3
    return float((an - 2.0 * bn + cn**2) / dn**2)


def _permutation_count(r_in_x_order: np.ndarray, observed_num: int, permutations: int,
                       rng: np.random.Generator) -> int:
    """#{b: T_b >= T}: permuting y against x permutes the r sequence.

    The denominator of xi_n does not change under permutation, so T_b >= T is
    exactly sum|diff(r_b)| <= sum|diff(r)|, an integer comparison.
    """
    n = r_in_x_order.size
    chunk = max(1, min(permutations, 2_000_000 // max(n, 1)))
    hits = 0
    done = 0
    while done < permutations:
        c = min(chunk, permutations - done)
        block = np.tile(r_in_x_order, (c, 1))
        rng.permuted(block, axis=1, out=block)
        nums = np.abs(np.diff(block, axis=1)).sum(axis=1)
        hits += int(np.count_nonzero(nums <= observed_num))
        done += c
    return hits


def xi_null_variance(n: int) -> float:
    """Exact variance of xi_n under independence for continuous (untied) y.

    Notes
    -----
    Var(xi_n) = (n - 2)(4n - 7) / (10 (n + 1)(n - 1)^2), which tends to 2/(5n).
    The formula is from memory; tests/core/test_chatterjee.py checks it against
    full enumeration of all permutations for small n.
    """
    if n < 3:
        return math.nan
    return (n - 2) * (4 * n - 7) / (10.0 * (n + 1) * (n - 1) ** 2)


def xi_tie_keys(seed, n: int) -> np.ndarray:
    """The n uniform keys with which :func:`xi` breaks ties in x for this seed.

    Parameters
    ----------
    seed : SeedSequence, int or None
        The seed given to :func:`xi`.
    n : int
        Complete rows of the pair.

    Returns
    -------
    numpy.ndarray
        float64 keys; rows tied in x are ordered by increasing key (by row
        among equal keys), as ``np.lexsort((keys, x))`` orders them.

    Notes
    -----
    The first of two independent streams spawned from ``seed`` (the second
    draws permutations), so asking for permutations never changes how ties
    were broken.

    Examples
    --------
    >>> bool(np.all(xi_tie_keys(5, 4) == xi_tie_keys(5, 4)))
    True
    """
    return _streams(seed)[0].random(n)


def xi_from_order(order: np.ndarray, r: np.ndarray, l: np.ndarray, *, permutations: int = 0,
                  seed: np.random.SeedSequence | int | None = None, method: str = "auto") -> TestResult:
    """:func:`xi` of a non-degenerate pair from its x order and y rank counts.

    Parameters
    ----------
    order : ndarray
        Rows in increasing x, ties broken by :func:`xi_tie_keys` (what
        :func:`xi` uses).
    r, l : ndarray
        int64, by row: r_i = #{j: y_j <= y_i}, l_i = #{j: y_j >= y_i}.
    permutations, seed, method
        As for :func:`xi`.

    Returns
    -------
    TestResult
        The same result as :func:`xi` on the rows (at least 3, x and y not
        constant).

    Notes
    -----
    xi_n = 1 - n sum_{i<n} |r_{i+1} - r_i| / (2 sum_i l_i (n - l_i)) over the
    rows in ``order``; see :func:`xi` for the tests. For an engine that sorts
    each column once and filters the orders per pair.

    References
    ----------
    Chatterjee, S. (2021). JASA 116(536):2009-2022, doi:10.1080/01621459.2020.1758115.

    Examples
    --------
    >>> x = np.array([0.3, 0.1, 0.2, 0.5, 0.4])
    >>> y = np.array([1.0, 3.0, 2.0, 5.0, 4.0])
    >>> r = np.array([1, 3, 2, 5, 4]); l = 6 - r
    >>> xi_from_order(np.argsort(x), r, l, method="asymptotic") == xi(x, y, method="asymptotic")
    True
    """
    n = int(order.size)
    r_sorted = r[order]
    num = int(np.abs(np.diff(r_sorted)).sum())
    den = 2.0 * float(np.sum(l.astype(np.float64) * (n - l)))
    statistic = 1.0 - n * num / den
    note = ""

    if permutations > 0:
        use = "permutation"
        b = int(permutations)
    elif method == "permutation" or (method == "auto" and n < config.XI_PERMUTATION_BELOW_N):
        use = "permutation"
        b = int(config.XI_SMALL_N_PERMUTATIONS)
    else:
        use = "asymptotic"
        b = 0

    if use == "permutation":
        hits = _permutation_count(r_sorted, num, b, _streams(seed)[1])
        p_value = (1.0 + hits) / (b + 1.0)
        label = f"permutation, B={b}"
        if permutations == 0 and method == "auto":
            label += f" (n < {config.XI_PERMUTATION_BELOW_N})"
        return TestResult(float(statistic), float(p_value), label, n=n, note=note)

    tau2 = _tau2_tie_corrected(r, l)
    if not (tau2 > 0.0 and math.isfinite(tau2)):
        return TestResult(float(statistic), math.nan, "asymptotic normal, tie-corrected", n=n,
                          note="null variance is zero: too few distinct y values for the normal law")
    z = statistic / math.sqrt(tau2 / n)
    p_value = float(ndtr(-z))
    return TestResult(float(statistic), p_value, "asymptotic normal, tie-corrected", n=n, note=note)


def xi(x: np.ndarray, y: np.ndarray, *, permutations: int = 0,
       seed: np.random.SeedSequence | int | None = None, method: str = "auto") -> TestResult:
    """Chatterjee's xi_n(x -> y) with a one-sided test of independence.

    Parameters
    ----------
    x, y : array_like, 1-D
        Paired observations; rows where either is NaN or infinite are dropped.
        ``x`` is the predictor: xi_n(x -> y) is large when y is (close to) a
        function of x. The measure is not symmetric.
    permutations : int
        When positive, the p-value comes from this many random permutations
        of y against x (``method`` is then ignored).
    seed : SeedSequence, int or None
        Seed for ``numpy.random.default_rng``. The engine passes the pair's
        seed sequence, derived from the analysis seed and the pair (see
        :func:`pairlens.core.testing.pair_seed`), so random tie-breaking and
        permutations do not depend on tiling or executor.
    method : {"auto", "asymptotic", "permutation"}
        "asymptotic": normal law with the tie-corrected variance (the same
        numbers as ``scipy.stats.chatterjeexi``). "permutation": random
        permutations (``permutations`` of them, or
        ``config.XI_SMALL_N_PERMUTATIONS`` when that is 0). "auto" uses the
        asymptotic law from ``config.XI_PERMUTATION_BELOW_N`` rows on and
        permutations below, where the normal law is too conservative.

    Returns
    -------
    TestResult
        ``estimate`` = xi_n, ``p_value`` = P(xi_n >= observed) under
        independence, no interval. Undefined (NaN with a note) for fewer than
        3 rows or a constant x or y.

    Notes
    -----
    Rows are sorted by x, ties in x broken uniformly at random with the
    generator from ``seed`` (Chatterjee's recommendation; without ties in x
    the seed plays no part). With r_i = #{j: y_j <= y_i} and
    l_i = #{j: y_j >= y_i} in that order,

        xi_n = 1 - n sum_{i<n} |r_{i+1} - r_i| / (2 sum_i l_i (n - l_i)),

    which reduces to 1 - 3 sum |r_{i+1} - r_i| / (n^2 - 1) without ties in y.
    Under independence sqrt(n) xi_n -> N(0, tau^2) with tau^2 estimated from
    the r_i and l_i (Chatterjee 2021, Theorem 2.2); without ties in y it tends
    to 2/5. The p-value is one-sided (upper), as in scipy, because
    dependence pushes xi_n up. Cost: O(n log n); each permutation O(n).

    References
    ----------
    Chatterjee, S. (2021). A new coefficient of correlation. Journal of the
    American Statistical Association 116(536):2009-2022,
    doi:10.1080/01621459.2020.1758115.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(7)
    >>> x = rng.uniform(-3, 3, 200)
    >>> res = xi(x, np.cos(x) + 0.1 * rng.normal(size=200))
    >>> bool(res.estimate > 0.7), bool(res.p_value < 1e-10)
    (True, True)
    """
    if method not in _METHODS:
        raise ValueError(f"unknown xi method {method!r}; choose from {', '.join(_METHODS)}")
    if permutations < 0:
        raise ValueError("permutations must be >= 0")
    x, y = _complete_rows(x, y)
    n = int(x.size)
    if n < config.MIN_ROWS:
        return undefined(n, f"fewer than {config.MIN_ROWS} complete rows")
    if np.all(y == y[0]):
        return undefined(n, "y is constant")
    if np.all(x == x[0]):
        return undefined(n, "x is constant")
    order = _order_by_x(x, seed)
    r, l = _ranks_up_down(y)
    return xi_from_order(order, r, l, permutations=permutations, seed=seed, method=method)


def gaussian_xi(rho: float) -> float:
    """Population value of Chatterjee's xi for a bivariate normal with correlation rho.

    Notes
    -----
    xi = 6 int Var(P(Y >= t | X)) dF_Y(t). For standard normals, with Y1, Y2
    conditionally independent copies of Y given X (corr rho^2) and Y3 an
    independent copy, int P(Y >= t | X)^2 dF(t) averages to
    P(Y1 >= Y3, Y2 >= Y3), an orthant probability with correlation
    (1 + rho^2)/2, i.e. 1/4 + asin((1 + rho^2)/2)/(2 pi). With
    int P(Y >= t)^2 dF(t) = 1/3 this gives

        xi = 3/pi asin((1 + rho^2)/2) - 1/2,

    0 at rho = 0 and 1 at |rho| = 1. Checked by simulation in the tests.

    References
    ----------
    Chatterjee, S. (2021). JASA 116:2009-2022, doi:10.1080/01621459.2020.1758115
    (definition of the population xi).

    Examples
    --------
    >>> round(gaussian_xi(0.6), 4)
    0.2141
    """
    r2 = min(float(rho) ** 2, 1.0)
    return 3.0 / math.pi * math.asin((1.0 + r2) / 2.0) - 0.5
