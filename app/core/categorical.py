"""Measures for pairs with a categorical side: Cramér's V, the correlation ratio eta, Kruskal-Wallis.

Categorical columns arrive as level codes (whole numbers 0..k-1 stored as floats, NaN for
missing, as :mod:`pairlens.ingest` writes them); only the levels present in a pair's rows
count. Everything here is NumPy in and out.

Distance correlation needs no kernel of its own: :func:`discrete_embedding` places the levels
so that the Euclidean distance between two rows is the discrete metric (0 for the same level,
1 otherwise), and the distance kernels of :mod:`pairlens.core.distance` do the rest.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import config
from .results import TestResult, undefined

__all__ = ["contingency", "discrete_embedding", "bergsma_v", "CorrelationRatio", "correlation_ratio",
           "cramers_v", "eta", "kruskal_eta"]


# private helpers ----------------------------------------------------------

def _codes(values: np.ndarray) -> tuple[np.ndarray, int]:
    """Level codes renumbered 0..k-1 over the levels present; k."""
    levels, inverse = np.unique(np.asarray(values, dtype=float), return_inverse=True)
    return inverse.astype(np.int64).ravel(), int(levels.size)


def _chi2(table: np.ndarray) -> float:
    n = table.sum()
    expected = np.outer(table.sum(axis=1), table.sum(axis=0)) / n
    return float(((table - expected) ** 2 / expected).sum())


def _small_expected(table: np.ndarray) -> bool:
    """Cochran's (1954) rule fails: an expected count below 1 or more than 20 % below 5."""
    n = table.sum()
    expected = np.outer(table.sum(axis=1), table.sum(axis=0)) / n
    return bool(expected.min() < 1.0 or np.mean(expected < config.CHI2_MIN_EXPECTED) > config.CHI2_SMALL_SHARE)


def _permutation_p(observed: float, statistic, resamples: int, seed) -> float:
    """(1 + #{T_b >= T_obs}) / (B + 1) over ``resamples`` relabellings drawn by ``statistic(rng)``."""
    rng = np.random.default_rng(seed)
    tol = 1e-12 * max(1.0, abs(observed))   # equal statistics count as at least as extreme
    hits = sum(statistic(rng) >= observed - tol for _ in range(resamples))
    return (1 + hits) / (resamples + 1)


def _between_total(values: np.ndarray, codes: np.ndarray, k: int) -> tuple[float, float, np.ndarray]:
    counts = np.bincount(codes, minlength=k).astype(float)
    centred = values - values.mean()
    sums = np.bincount(codes, weights=centred, minlength=k)
    between = float((sums ** 2 / counts).sum())
    total = float((centred ** 2).sum())
    return between, total, counts


def _split(x: np.ndarray, y: np.ndarray, kinds: tuple[str, str]) -> tuple[np.ndarray, np.ndarray]:
    """(numeric values, categorical codes) of a numeric x categorical pair in either order."""
    if kinds[0] == "categorical" and kinds[1] != "categorical":
        return np.asarray(y, dtype=float), np.asarray(x, dtype=float)
    return np.asarray(x, dtype=float), np.asarray(y, dtype=float)


def _midranks(v: np.ndarray) -> np.ndarray:
    order = np.argsort(v, kind="stable")
    s = v[order]
    starts = np.flatnonzero(np.r_[True, s[1:] != s[:-1]])
    ends = np.r_[starts[1:], s.size]
    mean_rank = (starts + ends + 1) / 2.0
    out = np.empty(v.size)
    out[order] = np.repeat(mean_rank, ends - starts)
    return out


# public functions -------------------------------------------------------------

def contingency(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Counts of the level combinations present (rows: levels of x, columns: levels of y).

    Examples
    --------
    >>> contingency(np.array([0., 0., 1., 2.]), np.array([1., 0., 1., 1.])).tolist()
    [[1, 1], [0, 1], [0, 1]]
    """
    xc, r = _codes(x)
    yc, k = _codes(y)
    return np.bincount(xc * k + yc, minlength=r * k).reshape(r, k)


def discrete_embedding(codes: np.ndarray) -> np.ndarray:
    """Rows of a categorical column as points whose Euclidean distances are the discrete metric.

    Each level is the unit vector of its own axis divided by sqrt(2), so two rows
    of the same level are at distance 0 and two of different levels at distance
    sqrt(1/2 + 1/2) = 1, whatever the number of levels: no order or spacing of the
    levels is invented.

    Examples
    --------
    >>> e = discrete_embedding(np.array([0., 2., 2.]))
    >>> float(np.linalg.norm(e[0] - e[1])), float(np.linalg.norm(e[1] - e[2]))
    (1.0, 0.0)
    """
    c, k = _codes(codes)
    out = np.zeros((c.size, k))
    out[np.arange(c.size), c] = 1.0 / math.sqrt(2.0)
    return out


def bergsma_v(table: np.ndarray) -> tuple[float, float]:
    """Cramér's V and its bias-corrected form of Bergsma (2013) for an r x k table.

    Notes
    -----
    phi^2 = chi^2 / n and V = sqrt(phi^2 / min(r - 1, k - 1)) (Cramér 1946).
    Bergsma's correction:
    phi~^2 = max(0, phi^2 - (r - 1)(k - 1)/(n - 1)),
    r~ = r - (r - 1)^2/(n - 1), k~ = k - (k - 1)^2/(n - 1),
    V~ = sqrt(phi~^2 / min(r~ - 1, k~ - 1)).

    References
    ----------
    Cramér, H. (1946) Mathematical Methods of Statistics, Princeton, p. 282.
    Bergsma, W. (2013) A bias-correction for Cramér's V and Tschuprow's T.
    J. Korean Stat. Soc. 42:323-328, doi:10.1016/j.jkss.2012.10.002

    Examples
    --------
    >>> v, vc = bergsma_v(np.array([[10, 0], [0, 10]]))
    >>> round(v, 3), round(vc, 3)
    (1.0, 1.0)
    """
    table = np.asarray(table, dtype=float)
    n = table.sum()
    r, k = table.shape
    phi2 = _chi2(table) / n
    v = math.sqrt(phi2 / min(r - 1, k - 1))
    phi2c = max(0.0, phi2 - (r - 1) * (k - 1) / (n - 1))
    rc = r - (r - 1) ** 2 / (n - 1)
    kc = k - (k - 1) ** 2 / (n - 1)
    denominator = min(rc - 1, kc - 1)
    vc = math.sqrt(phi2c / denominator) if denominator > 0 else math.nan
    return v, vc


@dataclass(frozen=True)
class CorrelationRatio:
    """The one-way decomposition of a numeric column by the levels of a categorical one."""

    n: int
    k: int
    eta: float           # sqrt(SS_between / SS_total)
    omega2: float        # bias-corrected effect size (Hays 1963)
    f: float             # one-way ANOVA F statistic
    df_between: int
    df_within: int
    p_value: float       # F(k - 1, n - k) upper tail


def correlation_ratio(values: np.ndarray, codes: np.ndarray) -> CorrelationRatio:
    """Eta, omega-squared and the one-way ANOVA F test of ``values`` by the levels in ``codes``.

    Parameters
    ----------
    values : numpy.ndarray
        The numeric column (complete rows only).
    codes : numpy.ndarray
        The categorical column's level codes, same rows.

    Returns
    -------
    CorrelationRatio
        NaN fields when fewer than 2 levels are present, every row is its own
        level, or ``values`` is constant.

    Notes
    -----
    eta^2 = SS_between / SS_total (Pearson 1903), SS_between = sum_g n_g (mean_g - mean)^2;
    F = (SS_between / (k - 1)) / (SS_within / (n - k)) on (k - 1, n - k) degrees of freedom;
    omega^2 = (SS_between - (k - 1) MS_within) / (SS_total + MS_within) (Hays 1963), which
    removes most of eta^2's upward bias under no effect (where E[eta^2] = (k - 1)/(n - 1)).

    References
    ----------
    Pearson, K. (1903) Proc. R. Soc. Lond. 71:288-313, doi:10.1098/rspl.1902.0099;
    Fisher, R.A. (1925) Statistical Methods for Research Workers;
    Hays, W.L. (1963) Statistics for Psychologists; Okada, K. (2013) Behaviormetrika
    40:129-147, doi:10.2333/bhmk.40.129 (bias of eta^2, epsilon^2 and omega^2).

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> g = np.repeat([0.0, 1.0, 2.0], 20)
    >>> cr = correlation_ratio(g + rng.normal(size=60), g)
    >>> cr.k, cr.df_within, cr.eta > 0.5
    (3, 57, True)
    """
    from scipy import special

    values = np.asarray(values, dtype=float)
    c, k = _codes(codes)
    n = values.size
    nan = math.nan
    if k < 2 or n <= k:
        return CorrelationRatio(n, k, nan, nan, nan, k - 1, n - k, nan)
    between, total, _ = _between_total(values, c, k)
    if not total > 0:
        return CorrelationRatio(n, k, nan, nan, nan, k - 1, n - k, nan)
    between = min(between, total)
    within = max(total - between, 0.0)
    ms_within = within / (n - k)
    eta2 = between / total
    omega2 = (between - (k - 1) * ms_within) / (total + ms_within)
    if within <= 1e-14 * total:
        f, p = math.inf, 0.0
    else:
        f = (between / (k - 1)) / ms_within
        p = float(special.fdtrc(k - 1, n - k, f))
    return CorrelationRatio(n, k, math.sqrt(eta2), omega2, f, k - 1, n - k, p)


def cramers_v(x: np.ndarray, y: np.ndarray, *, permutations: int = 0, seed=None, test: str = "") -> TestResult:
    """Bias-corrected Cramér's V of two categorical columns with the chi-square test of independence.

    Parameters
    ----------
    x, y : numpy.ndarray
        Level codes of the two columns, complete rows only.
    permutations : int
        Relabellings of the permutation test when it is used (0: config.CATEGORICAL_PERMUTATIONS).
    seed : int or numpy.random.SeedSequence, optional
        Seed of the relabellings.
    test : {"", "auto", "chi2", "permutation"}
        "" or "auto": the chi-square law when Cochran's rule holds, else permutations.

    Returns
    -------
    TestResult
        estimate: Bergsma's V~ (the uncorrected V is in ``method``); p-value of the
        Pearson chi-square statistic; no interval.

    Notes
    -----
    chi^2 = sum (O - E)^2 / E, E = row total x column total / n, on (r - 1)(k - 1)
    degrees of freedom. Cochran's (1954) rule: the chi-square law is used unless an
    expected count is below 1 or more than 20 % are below 5; then the p-value is
    (1 + #{chi^2_b >= chi^2}) / (B + 1) over B relabellings of y, which holds its
    level at any size. V~ as in :func:`bergsma_v`.

    References
    ----------
    Pearson, K. (1900) Phil. Mag. 50:157-175, doi:10.1080/14786440009463897;
    Cochran, W.G. (1954) Biometrics 10:417-451, doi:10.2307/3001616;
    Bergsma, W. (2013) J. Korean Stat. Soc. 42:323-328, doi:10.1016/j.jkss.2012.10.002

    Examples
    --------
    >>> rng = np.random.default_rng(2)
    >>> a = rng.integers(0, 3, 200).astype(float)
    >>> b = np.where(rng.random(200) < 0.7, a, rng.integers(0, 3, 200)).astype(float)
    >>> res = cramers_v(a, b)
    >>> res.estimate > 0.5, res.p_value < 1e-10
    (True, True)
    """
    from scipy import special

    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    n = x.size
    xc, r = _codes(x)
    yc, k = _codes(y)
    if r < 2 or k < 2:
        return undefined(n, "only one level present in " + ("x" if r < 2 else "y") + "; Cramér's V needs two")
    table = np.bincount(xc * k + yc, minlength=r * k).reshape(r, k).astype(float)
    v, vc = bergsma_v(table)
    stat = _chi2(table)
    df = (r - 1) * (k - 1)
    use_permutation = test == "permutation" or (test in ("", "auto") and _small_expected(table))
    if use_permutation:
        b = permutations or config.CATEGORICAL_PERMUTATIONS

        def relabelled(rng):
            return _chi2(np.bincount(xc * k + rng.permutation(yc), minlength=r * k).reshape(r, k).astype(float))

        p = _permutation_p(stat, relabelled, b, seed)
        method = f"chi-square statistic, permutation B={b} (small expected counts), V = {v:.4g} before correction"
    else:
        p = float(special.chdtrc(df, stat))
        method = f"chi-square test, {df} df, V = {v:.4g} before correction"
    if vc != vc:
        return TestResult(math.nan, p, method, n=n, note="too few rows for the bias-corrected V")
    return TestResult(vc, p, method, n=n)


def eta(x: np.ndarray, y: np.ndarray, kinds: tuple[str, str] = ("numeric", "categorical")) -> TestResult:
    """Correlation ratio eta of the numeric side by the categorical side, one-way ANOVA F test.

    Parameters
    ----------
    x, y : numpy.ndarray
        The pair's complete rows; ``kinds`` says which side holds level codes.
    kinds : tuple of str
        ("numeric", "categorical") or ("categorical", "numeric").

    Returns
    -------
    TestResult
        estimate eta in [0, 1]; p-value of F on (k - 1, n - k) df; omega^2 in ``method``.

    Notes
    -----
    See :func:`correlation_ratio` for the formulas. Eta is symmetric as a pair
    measure: it always describes the numeric column explained by the levels.

    References
    ----------
    Pearson, K. (1903) Proc. R. Soc. Lond. 71:288-313, doi:10.1098/rspl.1902.0099;
    Hays, W.L. (1963) Statistics for Psychologists.

    Examples
    --------
    >>> rng = np.random.default_rng(3)
    >>> g = rng.integers(0, 4, 100).astype(float)
    >>> res = eta(g * 0.5 + rng.normal(size=100), g)
    >>> 0 < res.estimate < 1, res.p_value < 0.01
    (True, True)
    """
    values, codes = _split(x, y, kinds)
    cr = correlation_ratio(values, codes)
    if cr.k < 2:
        return undefined(cr.n, "only one level present; eta needs two groups")
    if cr.n <= cr.k:
        return undefined(cr.n, f"{cr.n} rows for {cr.k} levels; eta needs more rows than levels")
    if cr.eta != cr.eta:
        return undefined(cr.n, "the numeric column is constant on these rows")
    method = f"one-way ANOVA F({cr.df_between}, {cr.df_within}) = {cr.f:.4g}; omega² = {cr.omega2:.3g}"
    return TestResult(cr.eta, cr.p_value, method, n=cr.n)


def kruskal_eta(x: np.ndarray, y: np.ndarray, kinds: tuple[str, str] = ("numeric", "categorical"), *,
                permutations: int = 0, seed=None) -> TestResult:
    """Kruskal-Wallis test of the numeric side across the levels, with the eta of the mid-ranks.

    Parameters
    ----------
    x, y : numpy.ndarray
        The pair's complete rows; ``kinds`` says which side holds level codes.
    kinds : tuple of str
        ("numeric", "categorical") or ("categorical", "numeric").
    permutations : int
        Relabellings of the permutation test used when a level has fewer than 5 rows
        (0: config.CATEGORICAL_PERMUTATIONS).
    seed : int or numpy.random.SeedSequence, optional

    Returns
    -------
    TestResult
        estimate eta_R = sqrt(H / (n - 1)), the correlation ratio of the mid-ranks;
        its square is the epsilon^2_R effect size of Kruskal-Wallis (Tomczak & Tomczak 2014).

    Notes
    -----
    With mid-ranks R and tie correction, H = (n - 1) SS_between(R) / SS_total(R)
    (equal to the textbook 12/(n(n+1)) sum R_g^2/n_g - 3(n+1) divided by the tie factor).
    p-value from chi-square with k - 1 df; when a level has fewer than 5 rows the
    chi-square law is poor and the p-value is (1 + #{H_b >= H}) / (B + 1) over B
    relabellings.

    References
    ----------
    Kruskal, W.H. & Wallis, W.A. (1952) JASA 47:583-621, doi:10.1080/01621459.1952.10483441;
    Tomczak, M. & Tomczak, E. (2014) Trends Sport Sci. 21:19-25.

    Examples
    --------
    >>> rng = np.random.default_rng(4)
    >>> g = rng.integers(0, 3, 90).astype(float)
    >>> res = kruskal_eta(np.exp(g + rng.normal(size=90)), g)
    >>> res.p_value < 1e-5
    True
    """
    from scipy import special

    values, codes = _split(x, y, kinds)
    n = values.size
    c, k = _codes(codes)
    if k < 2:
        return undefined(n, "only one level present; Kruskal-Wallis needs two groups")
    if n <= k:
        return undefined(n, f"{n} rows for {k} levels; Kruskal-Wallis needs more rows than levels")
    ranks = _midranks(values)
    between, total, counts = _between_total(ranks, c, k)
    if not total > 0:
        return undefined(n, "the numeric column is constant on these rows")
    h = (n - 1) * min(between / total, 1.0)
    if counts.min() < 5:
        b = permutations or config.CATEGORICAL_PERMUTATIONS

        def relabelled(rng):
            return (n - 1) * _between_total(ranks, rng.permutation(c), k)[0] / total

        p = _permutation_p(h, relabelled, b, seed)
        method = f"Kruskal-Wallis H = {h:.4g}, permutation B={b} (a level has fewer than 5 rows)"
    else:
        p = float(special.chdtrc(k - 1, h))
        method = f"Kruskal-Wallis H = {h:.4g}, chi-square {k - 1} df"
    return TestResult(math.sqrt(h / (n - 1)), p, method, n=n)
