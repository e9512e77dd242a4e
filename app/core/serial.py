"""Rows in time order: serial-dependence diagnostics and tests of independence that allow for it.

When the rows of a table are consecutive observations of a process (one row per
hour, batch or week), each column is usually autocorrelated, and the usual tests
of independence between two columns reject far too often (Yule 1926; Granger &
Newbold 1974). This module holds what pairlens does about it, all on NumPy
arrays in time order:

* diagnostics per column: lag autocorrelations, the Ljung-Box test, the
  augmented Dickey-Fuller test for a unit root (a trending column);
* an effective-sample-size correction for the correlation coefficients
  (Pearson on the values, Spearman and Kendall on the ranks);
* a block permutation test for the other measures, with the block length of
  twice the length of Politis & White (2004);
* the cross-correlation of two series at a few lags, for the pair view.
"""

from __future__ import annotations

import math
from typing import Callable, NamedTuple

import numpy as np
from scipy import special

from .results import TestResult, undefined
from .testing import fisher_z_interval

__all__ = ["AdfResult", "ColumnSerial", "autocorrelation", "ljung_box", "adf", "block_length", "effective_n",
           "cross_correlation", "column_serial", "serial_check", "SerialCheck", "ess_test",
           "block_permutation_test", "ESS_KINDS", "trending_reason"]

# MacKinnon (1994) response surface of the ADF statistic's distribution with a constant
# (one series): the range it covers, the switch point and the polynomial coefficients
# of the normal quantile for small and large statistics.
_TAU_MAX, _TAU_MIN, _TAU_STAR = 2.74, -18.83, -1.61
_TAU_SMALL = np.array([2.1659, 1.4412, 3.8269e-2])
_TAU_LARGE = np.array([1.7339, 0.93202, -0.12745, -0.010368])
# MacKinnon (2010) critical values with a constant: c0 + c1/T + c2/T^2 + c3/T^3 at 1, 5, 10 %.
_TAU_CRIT = np.array([[-3.43035, -6.5393, -16.786, -79.433],
                      [-2.86154, -2.8903, -4.234, -40.040],
                      [-2.56677, -1.5384, -2.809, 0.0]])

# Kinds of the effective-sample-size test: which values enter and which null law.
ESS_KINDS = ("pearson", "spearman", "kendall")


class AdfResult(NamedTuple):
    statistic: float        # t statistic of the lagged level
    p_value: float          # MacKinnon (1994) approximate p-value
    lags: int               # lagged differences in the regression
    nobs: int               # rows of the final regression
    critical_5: float       # MacKinnon (2010) 5 % critical value at nobs
    trending: bool          # unit root not rejected at 5 %


class ColumnSerial(NamedTuple):
    n: int
    lag1: float             # lag-1 autocorrelation
    ljung_box_p: float      # Ljung-Box p-value over the first ``lags`` lags
    lags: int
    adf_statistic: float
    adf_p: float
    trending: bool
    block: int              # Politis-White circular block length


class SerialCheck(NamedTuple):
    names: list[str]
    columns: list[ColumnSerial]
    dependent: list[str]     # Ljung-Box p-value below the level
    trending: list[str]      # unit root not rejected (ADF)
    warn: bool               # enough dependent columns to say so when rows are not declared ordered
    order_note: str = ""

    def message(self, ordered: bool) -> str:
        """One sentence for stderr, pages and the report; "" when there is nothing to say."""
        parts = []
        if not ordered and self.warn:
            parts.append(f"{len(self.dependent)} of {len(self.names)} columns are serially dependent in row order "
                         f"(Ljung-Box), e.g. {', '.join(self.dependent[:3])}: if the rows are in time order, the "
                         "default p-values are too small; declare them ordered (--ordered [COL]; in the dashboard "
                         "'Rows in time order'), and analyse differences of trending columns (--difference)")
        if ordered and self.trending:
            parts.append(f"trending columns (augmented Dickey-Fuller): {', '.join(self.trending[:6])}"
                         f"{' ...' if len(self.trending) > 6 else ''}; their pairs get no p-value on levels, "
                         "analyse differences with --difference")
        if self.order_note:
            parts.append(self.order_note)
        return "; ".join(parts)


# private helpers -------------------------------------------------------------

def _clean(x) -> np.ndarray:
    x = np.asarray(x, dtype=float).reshape(-1)
    return x[~np.isnan(x)]


def _autocovariance(x: np.ndarray, nlags: int) -> np.ndarray:
    """Biased autocovariances (divisor n) at lags 0..nlags by FFT."""
    n = x.size
    d = x - x.mean()
    size = 1 << int(math.ceil(math.log2(max(2 * n - 1, 2))))
    f = np.fft.rfft(d, size)
    acov = np.fft.irfft(f * np.conj(f), size)[: nlags + 1] / n
    return acov


def _acf_rows(rows: np.ndarray, nlags: int) -> np.ndarray:
    """Autocorrelations of each row of a 2-D array (series along axis 1), lags 0..nlags."""
    n = rows.shape[1]
    d = rows - rows.mean(axis=1, keepdims=True)
    size = 1 << int(math.ceil(math.log2(max(2 * n - 1, 2))))
    f = np.fft.rfft(d, size, axis=1)
    acov = np.fft.irfft(f * np.conj(f), size, axis=1)[:, : nlags + 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        return acov / acov[:, :1]


def _flat_top(t: np.ndarray) -> np.ndarray:
    """Politis & Romano's trapezoid lag window: 1 up to |t| = 1/2, down to 0 at |t| = 1."""
    a = np.abs(t)
    return np.where(a <= 0.5, 1.0, np.where(a <= 1.0, 2.0 * (1.0 - a), 0.0))


def _lagged_design(x: np.ndarray, lags: int, rows: int) -> tuple[np.ndarray, np.ndarray]:
    """ADF regression of the last ``rows`` differences on the lagged level, ``lags`` lagged differences and 1."""
    dx = np.diff(x)
    m = dx.size
    cols = [x[m - rows: m]]  # level at t-1 for difference t
    for k in range(1, lags + 1):
        cols.append(dx[m - rows - k: m - k])
    cols.append(np.ones(rows))
    return dx[m - rows:], np.column_stack(cols)


def _ols(y: np.ndarray, design: np.ndarray) -> tuple[np.ndarray, float, float]:
    """Coefficients, residual sum of squares and the standard error of the first coefficient."""
    q, r = np.linalg.qr(design)
    beta = np.linalg.solve(r, q.T @ y)
    resid = y - design @ beta
    ssr = float(resid @ resid)
    dof = y.size - design.shape[1]
    rinv = np.linalg.inv(r)
    se0 = math.sqrt(ssr / dof * float(rinv[0] @ rinv[0])) if dof > 0 else math.nan
    return beta, ssr, se0


def _nested_ssr(x: np.ndarray, max_lag: int, rows: int) -> np.ndarray:
    r"""Residual sums of squares of the ADF regressions with 0..max_lag lags, all on the same rows.

    With the columns ordered level, constant, lag 1, lag 2, ..., the regression with p
    lags uses the first p + 2 columns, so one QR factorisation of the largest design
    gives every one: with :math:`Q^T y = c`, :math:`SSR_p = SSR_{max} + \sum_{i \ge p + 2} c_i^2`.
    One factorisation instead of max_lag + 1 (the lag search dominated the serial check).
    """
    y, design = _lagged_design(x, max_lag, rows)
    nested = design[:, [0, design.shape[1] - 1, *range(1, max_lag + 1)]]
    q, _ = np.linalg.qr(nested)
    c = q.T @ y
    resid = y - q @ c
    ssr_full = float(resid @ resid)
    # tail[k] = sum of c_i^2 for i >= k; the regression with p lags leaves out c_{p+2}, ...
    tail = np.append(np.cumsum((c * c)[::-1])[::-1], 0.0)
    return ssr_full + tail[2: max_lag + 3]


def _mackinnon_p(stat: float) -> float:
    if stat > _TAU_MAX:
        return 1.0
    if stat < _TAU_MIN:
        return 0.0
    coef = _TAU_SMALL if stat <= _TAU_STAR else _TAU_LARGE
    return float(special.ndtr(np.polyval(coef[::-1], stat)))


def _mackinnon_critical(nobs: int) -> np.ndarray:
    t = 1.0 / nobs
    return _TAU_CRIT @ np.array([1.0, t, t * t, t ** 3])


def _midranks(v: np.ndarray) -> np.ndarray:
    order = np.argsort(v, kind="stable")
    sv = v[order]
    ranks = np.empty(v.size)
    # equal values share the mean of their positions
    starts = np.flatnonzero(np.r_[True, sv[1:] != sv[:-1]])
    ends = np.r_[starts[1:], sv.size]
    mean_pos = (starts + ends - 1) / 2.0 + 1.0
    ranks[order] = np.repeat(mean_pos, ends - starts)
    return ranks


def _kendall_null_variance(x: np.ndarray, y: np.ndarray) -> float:
    """Variance of Kendall's tau-b under independence of n independent rows, ties corrected.

    Var(S) of Kendall (1970, ch. 4), divided by the tau-b denominator (n0 - n1)(n0 - n2); equal to
    2(2n+5)/(9n(n-1)) without ties. scipy.stats.kendalltau's asymptotic test uses the same.
    """
    n = float(x.size)
    t = np.unique(x, return_counts=True)[1].astype(float)
    u = np.unique(y, return_counts=True)[1].astype(float)
    var_s = ((n * (n - 1) * (2 * n + 5) - np.sum(t * (t - 1) * (2 * t + 5)) - np.sum(u * (u - 1) * (2 * u + 5))) / 18.0
             + np.sum(t * (t - 1) * (t - 2)) * np.sum(u * (u - 1) * (u - 2)) / (9.0 * n * (n - 1) * (n - 2))
             + np.sum(t * (t - 1)) * np.sum(u * (u - 1)) / (2.0 * n * (n - 1)))
    n0 = n * (n - 1) / 2.0
    denominator = (n0 - np.sum(t * (t - 1)) / 2.0) * (n0 - np.sum(u * (u - 1)) / 2.0)
    return float(var_s / denominator) if denominator > 0 else math.nan


def _ess_from_acfs(ax: np.ndarray, ay: np.ndarray, n: int) -> float:
    lags = np.arange(1, ax.size)
    s = float(np.sum((n - lags) / n * ax[1:] * ay[1:]))
    # a non-positive sum (negative products outweigh) never makes the test bolder than n rows
    return float(n) if s <= 0.0 else n / (1.0 + 2.0 * s)


def _block_orders(n: int, block: int, count: int, rng: np.random.Generator) -> np.ndarray:
    """``count`` relabellings of 0..n-1: the series rotated by a random offset, cut into blocks of
    ``block`` rows (the last one shorter), the blocks put in a random order."""
    blocks = -(-n // block)
    position = np.arange(n)
    block_of, within = position // block, position % block
    rank = np.argsort(rng.random((count, blocks)), axis=1)      # new place of each block
    key = rank[:, block_of] * block + within
    order = np.argsort(key, axis=1, kind="stable")
    shift = rng.integers(0, n, size=(count, 1))
    return (order + shift) % n


# public functions --------------------------------------------------------------

def autocorrelation(x, nlags: int) -> np.ndarray:
    """Sample autocorrelations of a series at lags 0..nlags.

    Parameters
    ----------
    x : array_like
        The series in time order; NaN entries are dropped (the rest are taken as consecutive).
    nlags : int
        Largest lag.

    Returns
    -------
    numpy.ndarray
        :math:`\\hat\\rho(0) = 1, \\dots, \\hat\\rho(\\text{nlags})`; NaN for a constant series.

    Notes
    -----
    :math:`\\hat\\rho(k) = \\sum_{t=1}^{n-k} (x_t - \\bar x)(x_{t+k} - \\bar x) / \\sum_t (x_t - \\bar x)^2`,
    the biased (divisor n) estimate, which keeps the estimated autocovariances
    positive definite.

    References
    ----------
    Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). Time Series
    Analysis: Forecasting and Control, 5th ed. Wiley. ISBN 978-1-118-67502-1.

    Examples
    --------
    >>> x = np.random.default_rng(3).normal(size=200)
    >>> r = autocorrelation(x, 2)
    >>> float(r[0]), bool(abs(r[1]) < 0.2)
    (1.0, True)
    """
    x = _clean(x)
    nlags = int(min(nlags, max(x.size - 1, 0)))
    acov = _autocovariance(x, nlags)
    if not acov[0] > 0:
        return np.full(nlags + 1, np.nan)
    return acov / acov[0]


def ljung_box(x, lags: int) -> tuple[float, float]:
    """Ljung-Box portmanteau test that the first ``lags`` autocorrelations are zero.

    Parameters
    ----------
    x : array_like
        The series in time order.
    lags : int
        Number of autocorrelations tested.

    Returns
    -------
    (float, float)
        The statistic Q and its chi-squared p-value with ``lags`` degrees of freedom.

    Notes
    -----
    :math:`Q = n(n+2) \\sum_{k=1}^{h} \\hat\\rho(k)^2 / (n-k)`, approximately
    :math:`\\chi^2_h` for a white-noise series.

    References
    ----------
    Ljung, G.M. & Box, G.E.P. (1978). On a measure of lack of fit in time
    series models. Biometrika 65:297-303. doi:10.1093/biomet/65.2.297

    Examples
    --------
    >>> e = np.random.default_rng(1).normal(size=300)
    >>> ar = np.zeros(300)
    >>> for t in range(1, 300): ar[t] = 0.7 * ar[t - 1] + e[t]
    >>> ljung_box(ar, 5)[1] < 1e-10
    True
    """
    x = _clean(x)
    n = x.size
    h = int(min(lags, n - 1))
    if h < 1:
        return math.nan, math.nan
    r = autocorrelation(x, h)[1:]
    q = float(n * (n + 2) * np.sum(r * r / (n - np.arange(1, h + 1))))
    return q, float(special.chdtrc(h, q)) if q == q else math.nan


def adf(x, max_lag: int | None = None, autolag: bool = True) -> AdfResult:
    """Augmented Dickey-Fuller test of a unit root, with a constant.

    Parameters
    ----------
    x : array_like
        The series in time order.
    max_lag : int, optional
        Most lagged differences; default :math:`\\lceil 12 (n/100)^{1/4} \\rceil`
        (Schwert 1989), at most n/2 - 2.
    autolag : bool
        Choose the number of lags up to ``max_lag`` by AIC on a common sample
        (as statsmodels' ``adfuller(autolag="AIC")``); False uses ``max_lag``.

    Returns
    -------
    AdfResult
        Statistic, MacKinnon p-value, lags, rows, 5 % critical value and
        ``trending`` (the unit root not rejected at 5 %).

    Notes
    -----
    The regression is
    :math:`\\Delta x_t = \\alpha + \\gamma x_{t-1} + \\sum_{j=1}^{p} \\beta_j \\Delta x_{t-j} + e_t`,
    the statistic the t ratio of :math:`\\hat\\gamma`. Its null law is not
    Student's; p-values come from MacKinnon's (1994) response surface and
    critical values from MacKinnon (2010). A series with a deterministic linear
    trend also fails to reject with a constant only, which is what pairlens
    wants: either kind of trend makes levels of unrelated series correlate.

    References
    ----------
    Dickey, D.A. & Fuller, W.A. (1979). Distribution of the estimators for
    autoregressive time series with a unit root. JASA 74:427-431.
    doi:10.1080/01621459.1979.10482531

    Said, S.E. & Dickey, D.A. (1984). Testing for unit roots in
    autoregressive-moving average models of unknown order. Biometrika
    71:599-607. doi:10.1093/biomet/71.3.599

    MacKinnon, J.G. (1994). Approximate asymptotic distribution functions for
    unit-root and cointegration tests. J. Bus. Econ. Stat. 12:167-176.
    doi:10.1080/07350015.1994.10510005

    Examples
    --------
    >>> walk = np.cumsum(np.random.default_rng(5).normal(size=300))
    >>> adf(walk).trending
    True
    >>> adf(np.random.default_rng(5).normal(size=300)).trending
    False
    """
    x = _clean(x)
    n = x.size
    if n < 10 or not np.ptp(x) > 0:
        return AdfResult(math.nan, math.nan, 0, n, math.nan, False)
    if not np.ptp(np.diff(x)) > 1e-12 * np.ptp(x):
        # a straight line: the regression is singular, and the column trends by construction
        return AdfResult(math.nan, math.nan, 0, n - 1, math.nan, True)
    if max_lag is None:
        max_lag = int(math.ceil(12.0 * (n / 100.0) ** 0.25))
    max_lag = int(max(0, min(max_lag, n // 2 - 3)))
    lags = max_lag
    if autolag and max_lag > 0:
        rows = n - 1 - max_lag
        best = math.inf
        for p, ssr in enumerate(_nested_ssr(x, max_lag, rows)):
            aic = rows * math.log(ssr / rows) + 2 * (p + 2)
            if aic < best - 1e-12:
                best, lags = aic, p
    rows = n - 1 - lags
    y, design = _lagged_design(x, lags, rows)
    beta, _, se0 = _ols(y, design)
    stat = float(beta[0] / se0) if se0 > 0 else math.nan
    crit = float(_mackinnon_critical(rows)[1])
    p = _mackinnon_p(stat) if stat == stat else math.nan
    return AdfResult(stat, p, lags, rows, crit, bool(stat == stat and stat > crit))


def block_length(x) -> int:
    """Block length for resampling a dependent series (Politis & White 2004, circular blocks).

    Parameters
    ----------
    x : array_like
        The series in time order.

    Returns
    -------
    int
        At least 1 and at most :math:`\\min(3\\sqrt n, n/3)`.

    Notes
    -----
    The autocorrelations are cut where :math:`K_n = \\max(5, \\sqrt{\\log_{10} n})`
    consecutive ones stay below :math:`2\\sqrt{\\log_{10} n / n}` (at lag
    :math:`\\hat m`); with :math:`M = 2\\hat m`, the flat-top window
    :math:`\\lambda` and :math:`\\hat R(k)` the autocovariances,

    .. math:: \\hat G = \\sum_{|k| \\le M} \\lambda(k/M) |k| \\hat R(k), \\quad
              \\hat g = \\sum_{|k| \\le M} \\lambda(k/M) \\hat R(k), \\quad
              \\hat b = \\left( \\frac{2 \\hat G^2}{(4/3) \\hat g^2} \\right)^{1/3} n^{1/3}

    with the constant of the circular block bootstrap as corrected by Patton,
    Politis & White (2009).

    References
    ----------
    Politis, D.N. & White, H. (2004). Automatic block-length selection for the
    dependent bootstrap. Econometric Reviews 23:53-70.
    doi:10.1081/ETC-120028836

    Patton, A., Politis, D.N. & White, H. (2009). Correction to "Automatic
    block-length selection for the dependent bootstrap". Econometric Reviews
    28:372-375. doi:10.1080/07474930802459016

    Examples
    --------
    >>> block_length(np.random.default_rng(0).normal(size=500))
    1
    """
    x = _clean(x)
    n = x.size
    if n < 8 or not np.ptp(x) > 0:
        return 1
    kn = max(5, int(math.sqrt(math.log10(n))))
    m_max = int(math.ceil(math.sqrt(n))) + kn
    b_max = int(math.ceil(min(3.0 * math.sqrt(n), n / 3.0)))
    acov = _autocovariance(x, min(m_max + kn, n - 1))
    rho = acov / acov[0]
    small = np.abs(rho[1:]) < 2.0 * math.sqrt(math.log10(n) / n)
    m_hat = m_max
    for m in range(0, min(m_max, small.size - kn) + 1):
        if small[m: m + kn].all():
            m_hat = m
            break
    big_m = min(2 * m_hat, acov.size - 1)
    if big_m == 0:
        return 1
    k = np.arange(1, big_m + 1)
    lam = _flat_top(k / big_m)
    g_big = 2.0 * float(np.sum(lam * k * acov[1: big_m + 1]))
    g_hat = float(acov[0] + 2.0 * np.sum(lam * acov[1: big_m + 1]))
    if not g_hat > 0:
        return 1
    b = (2.0 * g_big ** 2 / (4.0 / 3.0 * g_hat ** 2)) ** (1.0 / 3.0) * n ** (1.0 / 3.0)
    return int(min(max(1, round(b)), b_max))


def effective_n(ax: np.ndarray, ay: np.ndarray, n: int) -> float:
    """Effective number of independent rows for a correlation of two autocorrelated series.

    Parameters
    ----------
    ax, ay : numpy.ndarray
        Autocorrelations of the two series at lags 0..K (see :func:`autocorrelation`),
        K = n/5 in pairlens.
    n : int
        Rows of the pair.

    Returns
    -------
    float
        :math:`n^*`, at most ``n``.

    Notes
    -----
    Under independence of the two series the variance of r is approximately
    :math:`\\frac1n \\sum_k \\rho_x(k)\\rho_y(k)` (Bartlett 1935), so the
    correlation of n autocorrelated rows is as variable as that of

    .. math:: \\frac{1}{n^*} = \\frac1n + \\frac2n \\sum_{k=1}^{K} \\frac{n-k}{n}\\,\\hat\\rho_x(k)\\hat\\rho_y(k)

    independent ones, with the sum cut at K = n/5 (Pyper & Peterman 1998).
    :math:`n^*` is capped at n: negative products never make a test bolder.

    References
    ----------
    Bartlett, M.S. (1935). Some aspects of the time-correlation problem in
    regard to tests of significance. J. R. Stat. Soc. 98:536-543.
    doi:10.2307/2342284

    Pyper, B.J. & Peterman, R.M. (1998). Comparison of methods to account for
    autocorrelation in correlation analyses of fish data. Can. J. Fish. Aquat.
    Sci. 55:2127-2140. doi:10.1139/f98-104

    Examples
    --------
    >>> k = np.arange(21)
    >>> round(effective_n(0.5 ** k, 0.5 ** k, 100), 1)  # two AR(1) series with coefficient 0.5
    60.3
    """
    return float(min(n, _ess_from_acfs(np.asarray(ax, float), np.asarray(ay, float), n)))


def cross_correlation(x, y, lags: int) -> tuple[np.ndarray, np.ndarray]:
    """Cross-correlations :math:`\\hat\\rho_{xy}(k)`, k = -lags..lags, of two series in time order.

    Parameters
    ----------
    x, y : array_like
        Series of equal length, complete rows only.
    lags : int
        Largest lag each way.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        The lags and the correlations; positive k pairs :math:`x_t` with :math:`y_{t+k}`.

    Notes
    -----
    :math:`\\hat\\rho_{xy}(k) = \\sum_t (x_t - \\bar x)(y_{t+k} - \\bar y) / (n s_x s_y)`, divisor n as
    in :func:`autocorrelation`.

    References
    ----------
    Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). Time Series
    Analysis, 5th ed., section 12.1. Wiley. ISBN 978-1-118-67502-1.

    Examples
    --------
    >>> x = np.random.default_rng(2).normal(size=100)
    >>> k, r = cross_correlation(x, np.roll(x, 1), 2)
    >>> int(k[np.argmax(r)])
    1
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = x.size
    lags = int(min(lags, n - 1))
    dx, dy = x - x.mean(), y - y.mean()
    scale = math.sqrt(float(dx @ dx) * float(dy @ dy))
    ks = np.arange(-lags, lags + 1)
    if not scale > 0:
        return ks, np.full(ks.size, np.nan)
    out = np.array([float(dx[: n - k] @ dy[k:]) if k >= 0 else float(dx[-k:] @ dy[: n + k]) for k in ks])
    return ks, out / scale


def column_serial(x, lags: int | None = None) -> ColumnSerial:
    """Serial-dependence summary of one column in time order (lag-1 autocorrelation, Ljung-Box, ADF).

    Parameters
    ----------
    x : array_like
        The column in time order; NaN entries are dropped.
    lags : int, optional
        Lags of the Ljung-Box test; default :math:`\\min(10, n/5)` (common practice).

    Returns
    -------
    ColumnSerial

    Notes
    -----
    See :func:`autocorrelation`, :func:`ljung_box`, :func:`adf`, :func:`block_length`.

    References
    ----------
    Ljung, G.M. & Box, G.E.P. (1978). Biometrika 65:297-303. doi:10.1093/biomet/65.2.297

    Examples
    --------
    >>> column_serial(np.random.default_rng(4).normal(size=200)).trending
    False
    """
    x = _clean(x)
    n = x.size
    if n < 10 or not np.ptp(x) > 0:
        return ColumnSerial(n, math.nan, math.nan, 0, math.nan, math.nan, False, 1)
    h = int(lags if lags is not None else max(1, min(10, n // 5)))
    r1 = float(autocorrelation(x, 1)[1])
    _, p = ljung_box(x, h)
    test = adf(x)
    return ColumnSerial(n, r1, p, h, test.statistic, test.p_value, test.trending, block_length(x))


def serial_check(data: np.ndarray, names: list[str], level: float = 0.01, share: float = 0.25) -> SerialCheck:
    """:func:`column_serial` of every column of ``data`` (rows in their order) and whether to warn.

    Parameters
    ----------
    data : numpy.ndarray
        (n, p) array, NaN for missing values, rows in the order to check.
    names : list of str
        Column names.
    level : float
        Ljung-Box p-value below which a column counts as serially dependent.
    share : float
        Warn when at least this share of the columns (and at least 2) are.

    Returns
    -------
    SerialCheck

    Notes
    -----
    With p columns of independent rows, about ``level`` x p columns pass the
    Ljung-Box threshold by chance; a share of 25 % at level 1 % is far beyond
    that (common practice: a screening rule, not a test).

    References
    ----------
    Ljung, G.M. & Box, G.E.P. (1978). Biometrika 65:297-303. doi:10.1093/biomet/65.2.297

    Examples
    --------
    >>> data = np.cumsum(np.random.default_rng(1).normal(size=(200, 3)), axis=0)
    >>> serial_check(data, ["a", "b", "c"]).warn
    True
    """
    cols = [column_serial(data[:, k]) for k in range(data.shape[1])]
    dependent = [nm for nm, c in zip(names, cols) if c.ljung_box_p == c.ljung_box_p and c.ljung_box_p < level]
    trending = [nm for nm, c in zip(names, cols) if c.trending]
    warn = len(dependent) >= max(2, math.ceil(share * len(names)))
    return SerialCheck(list(names), cols, dependent, trending, warn)


def trending_reason(sides) -> str:
    """Why a pair with trending sides (named in ``sides``) gets no p-value and no verdict on its levels.

    The pair table's note and the verdict's reason say the same sentence.

    Examples
    --------
    >>> trending_reason(["stock"])
    'stock trends (augmented Dickey-Fuller): levels of trending series correlate by chance; analyse differences (--difference)'
    """
    sides = list(sides)
    return (f"{' and '.join(sides)} trend{'s' if len(sides) == 1 else ''} (augmented Dickey-Fuller): levels of "
            "trending series correlate by chance; analyse differences (--difference)")


def ess_test(x: np.ndarray, y: np.ndarray, kind: str, base: TestResult, confidence: float = 0.95,
             max_lag: int | None = None) -> TestResult:
    """A correlation's test and interval with the effective number of rows of two autocorrelated series.

    Parameters
    ----------
    x, y : numpy.ndarray
        The pair's complete rows in time order.
    kind : {"pearson", "spearman", "kendall"}
        Pearson uses the values; Spearman and Kendall the mid-ranks' autocorrelations.
    base : TestResult
        The measure's result for independent rows; its estimate is kept.
    confidence : float
        Level of the widened interval.
    max_lag : int, optional
        Lags in the sum of :func:`effective_n`; default n/5.

    Returns
    -------
    TestResult
        Same estimate; p-value and interval from :math:`n^*` rows; method names :math:`n^*`.

    Notes
    -----
    Pearson and Spearman: :math:`t = r\\sqrt{(n^*-2)/(1-r^2)}` on :math:`n^*-2`
    degrees of freedom (the modified t-test of Dutilleul et al. 1993 in its
    time-series form). Kendall: the asymptotic variance of tau under serial
    dependence is :math:`(4/9n)\\sum_k \\rho_{F(x)}(k)\\rho_{G(y)}(k)` by
    Hoeffding's projection, i.e. the independent-rows variance
    :math:`2(2n+5)/(9n(n-1))` times :math:`n/n^*` with :math:`n^*` from the
    ranks. With ties the independent-rows variance is that of tau-b with
    Kendall's (1970) tie correction (the one scipy.stats.kendalltau's
    asymptotic test uses), again times :math:`n/n^*` with :math:`n^*` from
    the mid-ranks, which estimate the mid-distribution transforms the
    projection uses with ties; the level table measures continuous series
    only, so with heavy ties this product is an approximation. Intervals:
    Fisher z with :math:`n^*` in place of n (Pearson
    :math:`1/\\sqrt{n^*-3}`, Spearman :math:`\\sqrt{(1+\\rho^2/2)/(n^*-3)}`,
    Kendall :math:`\\sqrt{0.437/(n^*-4)}`).

    References
    ----------
    Bartlett, M.S. (1935). J. R. Stat. Soc. 98:536-543. doi:10.2307/2342284

    Dutilleul, P., Clifford, P., Richardson, S. & Hemon, D. (1993). Modifying the
    t test for assessing the correlation between two spatial processes.
    Biometrics 49:305-314. doi:10.2307/2532625

    Pyper, B.J. & Peterman, R.M. (1998). Can. J. Fish. Aquat. Sci.
    55:2127-2140. doi:10.1139/f98-104

    Kendall, M.G. (1970). Rank Correlation Methods, 4th ed., Griffin, London,
    ch. 4 (variance of S with ties).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x, y = np.cumsum(rng.normal(size=(2, 200)), axis=1)
    >>> r = float(np.corrcoef(x, y)[0, 1])
    >>> res = ess_test(x, y, "pearson", TestResult(r, 0.0, "t", n=200))
    >>> res.p_value > 1e-6, res.method.startswith("t, n*")
    (True, True)
    """
    if kind not in ESS_KINDS:
        raise ValueError(f"unknown kind {kind!r}; choose from {', '.join(ESS_KINDS)}")
    n = int(x.shape[0])
    est = float(base.estimate)
    if not est == est:
        return base
    if n < 10:
        return undefined(n, f"fewer than 10 rows in time order ({n}): serial dependence cannot be estimated",
                         "effective rows")
    ux, uy = (x, y) if kind == "pearson" else (_midranks(x), _midranks(y))
    k = int(max_lag if max_lag is not None else max(1, n // 5))
    acfs = _acf_rows(np.vstack([ux, uy]), k)
    if not np.all(np.isfinite(acfs)):
        return base
    n_eff = effective_n(acfs[0], acfs[1], n)
    if n_eff < 4.0:
        return TestResult(est, math.nan, f"effective rows n* = {n_eff:.1f}", math.nan, math.nan, n,
                          f"too few effective rows (n* = {n_eff:.1f} of {n}): the series are too persistent "
                          "to test; try --difference")
    r = min(1.0, max(-1.0, est))
    if kind == "kendall":
        var = _kendall_null_variance(x, y) * n / n_eff
        p = float(special.erfc(abs(r) / math.sqrt(2.0 * var)))
        method = f"normal, variance x n/n* (n* = {n_eff:.1f} of {n})"
        se_z = math.sqrt(0.437 / (n_eff - 4.0)) if n_eff > 4.0 else math.inf
    else:
        df = n_eff - 2.0
        t = r * math.sqrt(df / (1.0 - r * r)) if abs(r) < 1.0 else math.copysign(math.inf, r)
        p = float(2.0 * special.stdtr(df, -abs(t)))
        method = f"t, n*-2 df (n* = {n_eff:.1f} of {n})"
        se_z = (1.0 / math.sqrt(n_eff - 3.0) if kind == "pearson"
                else math.sqrt((1.0 + r * r / 2.0) / (n_eff - 3.0))) if n_eff > 3.0 else math.inf
    lo, hi = fisher_z_interval(r, se_z, confidence)
    return TestResult(est, min(1.0, p), method, lo, hi, n, base.note)


def block_permutation_test(x: np.ndarray, y: np.ndarray,
                           statistic: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray],
                           base: TestResult, permutations: int = 499, seed=None,
                           block: int | None = None, block_factor: float = 2.0) -> TestResult:
    """Block permutation test of independence of two series in time order.

    Parameters
    ----------
    x, y : numpy.ndarray
        The pair's complete rows in time order (1-D, or 2-D with one row per time).
    statistic : callable
        ``statistic(x, y, orders)`` -> the test statistic of x against ``y[order]`` for each row of
        ``orders`` (an (m, n) integer array), larger meaning more dependent; e.g. a registry entry's
        ``pairing_statistics``. Called once, with the identity first and then the B relabellings,
        so it bounds its own memory.
    base : TestResult
        The measure's result on the rows as given; its estimate is kept.
    permutations : int
        Block relabellings B.
    seed : int or numpy.random.SeedSequence, optional
    block : int, optional
        Block length; default ``block_factor`` times the larger :func:`block_length` of the two
        series (of the first column of a group).
    block_factor : float
        Multiple of the Politis-White length used by default. That length minimises the error
        of a variance estimate, not the level error of a test; at n = 100 and AR(1) coefficient
        0.9 it gave 8-11 % rejections at 5 % for dcor and xi, twice it 5-5.5 % (400 pairs each,
        the README's level table).

    Returns
    -------
    TestResult
        Same estimate and interval; p-value :math:`(1 + \\#\\{T_b \\ge T\\})/(B + 1)`.

    Notes
    -----
    y is rotated by a random offset, cut into consecutive blocks of b rows and
    the blocks are put in random order; x stays as it is. Within a block the
    serial dependence of y is kept, so the relabelled statistics follow the law
    of T under independence of the two series much more closely than random
    relabellings of single rows, which assume exchangeable rows. Dependence
    across block boundaries is lost, so b grows with the persistence of the
    series (Politis & White 2004); the test is approximate, its level measured
    in the README's level table.

    References
    ----------
    Kunsch, H.R. (1989). The jackknife and the bootstrap for general stationary
    observations. Ann. Statist. 17:1217-1241. doi:10.1214/aos/1176347265

    Politis, D.N. & White, H. (2004). Econometric Reviews 23:53-70.
    doi:10.1081/ETC-120028836

    Examples
    --------
    >>> rng = np.random.default_rng(8)
    >>> x, y = rng.normal(size=(2, 60))
    >>> stat = lambda a, b, orders: np.abs(b[orders] @ (a - a.mean()))
    >>> res = block_permutation_test(x, y, stat, TestResult(0.1, 0.5, "t", n=60), permutations=99, seed=1)
    >>> 0.0 < res.p_value <= 1.0
    True
    """
    n = int(x.shape[0])
    if not base.estimate == base.estimate:
        return base
    if n < 10:
        return undefined(n, f"fewer than 10 rows in time order ({n}): serial dependence cannot be estimated",
                         "block permutation")
    if block is None:
        first = (lambda v: v if v.ndim == 1 else v[:, 0])
        block = int(round(block_factor * max(block_length(first(x)), block_length(first(y)))))
    block = int(max(1, min(block, n // 2)))
    rng = np.random.default_rng(seed)
    orders = _block_orders(n, block, int(permutations), rng)
    # one call for the rows as given and every relabelling: a statistic builds its per-series
    # matrices once (the distance matrices cost as much as 200 relabellings at n = 500)
    values = np.asarray(statistic(x, y, np.vstack([np.arange(n)[None, :], orders])), dtype=float)
    observed, values = float(values[0]), values[1:]
    tol = 1e-9 * max(1.0, abs(observed))
    count = int(np.count_nonzero(values >= observed - tol))
    p = (1.0 + count) / (permutations + 1.0)
    method = f"block permutation, B={permutations}, block {block} rows"
    return TestResult(base.estimate, p, method, base.ci_low, base.ci_high, n, base.note)
