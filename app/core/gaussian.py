"""The bivariate Gaussian fit of a pair and what it implies.

The fit is the yardstick of the pair view: where the data look like the
fitted Gaussian, Pearson's r says everything; where they do not, the gap
between observed measures and the values this Gaussian would imply shows how
the Gaussian picture misleads.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import special
from scipy.special import ndtr

from .. import config
from .chatterjee import gaussian_xi  # noqa: F401 - kept importable from here
from .distance import gaussian_dcor  # noqa: F401
from .registry import MEASURES
from .results import TestResult, undefined

__all__ = ["GaussianFit", "SliceConditional", "implied_measures", "henze_zirkler", "fit_gaussian",
           "slice_conditional", "observed_slice", "gaussian_xi"]

_NAN = math.nan
_NAN_COV = ((_NAN, _NAN), (_NAN, _NAN))
_HZ_METHOD = "henze-zirkler, lognormal approximation"


@dataclass(frozen=True)
class GaussianFit:
    """A bivariate normal fitted to a pair by its sample moments.

    ``cov`` uses ddof=1; ``slope``/``intercept`` give E[y | x] and
    ``residual_sd`` the sd of y given x of the fitted Gaussian,
    sqrt(var_y (1 - rho^2)) with the ddof=1 var_y. ``ellipses`` maps a
    probability mass to a closed (k, 2) boundary in data coordinates.
    """

    mean: tuple[float, float]
    cov: tuple[tuple[float, float], tuple[float, float]]  # ddof=1
    rho: float
    slope: float              # E[y | x] = intercept + slope * x
    intercept: float
    residual_sd: float        # sd of y given x
    implied: dict[str, float]                      # measure name -> value a Gaussian with rho implies
    normality: TestResult                          # Henze-Zirkler joint normality
    marginal_normality: dict[str, TestResult] = field(default_factory=dict)  # "x", "y"
    ellipses: dict[float, np.ndarray] = field(default_factory=dict)          # mass -> (k, 2) boundary
    n: int = 0
    note: str = ""


@dataclass(frozen=True)
class SliceConditional:
    """What the fitted Gaussian says about y in the vertical slice |x - x0| <= width/2.

    ``mean_at_x0``/``sd_at_x0`` are the conditional law of y given x = x0;
    ``mean``/``sd`` are those of y given x in the slice (x drawn from its
    fitted normal, truncated to the slice), which is what a histogram of the
    points in the slice should match; ``mass`` = P(x in slice).
    """

    x0: float
    width: float
    mean_at_x0: float
    sd_at_x0: float
    mean: float
    sd: float
    mass: float


# -- private helpers --------------------------------------------------------

# From this many rows Henze-Zirkler (O(n^2)) runs on a thread beside the marginal tests; below, a
# thread's set-up costs more than it overlaps.
_HZ_THREAD_MIN_ROWS = 500


def _complete(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(x, dtype=np.float64).ravel()
    y = np.asarray(y, dtype=np.float64).ravel()
    if x.shape != y.shape:
        raise ValueError(f"x and y differ in length ({x.size} and {y.size})")
    keep = np.isfinite(x) & np.isfinite(y)
    return x[keep], y[keep]


def _hz_kernel_sums(z: np.ndarray, b2: float) -> tuple[float, float]:
    """sum_{j,k} exp(-b^2/2 |z_j - z_k|^2) and sum_j exp(-b^2/(2(1+b^2)) |z_j|^2).

    Rows are whitened, so |z_j - z_k|^2 is the squared Mahalanobis distance.
    Blocks of rows keep memory at a few MB instead of an n x n matrix.
    """
    n = z.shape[0]
    sq = np.einsum("ij,ij->i", z, z)
    block = max(1, 2_000_000 // max(n, 1))
    pair_sum = 0.0
    # d = sq_j + sq_k - 2 z_j.z_k, then exp(-b^2/2 d), in two buffers reused by every block: the
    # same operations on the same numbers as the plain expression, without a fresh 16 MB
    # temporary (and its page faults) per step
    zt = z.T
    prod_buf = np.empty((min(block, n), n))
    d_buf = np.empty((min(block, n), n))
    scale = -0.5 * b2
    for start in range(0, n, block):
        stop = min(n, start + block)
        prod, d = prod_buf[:stop - start], d_buf[:stop - start]
        np.matmul(z[start:stop], zt, out=prod)
        np.multiply(prod, 2.0, out=prod)
        np.add(sq[start:stop, None], sq[None, :], out=d)
        np.subtract(d, prod, out=d)
        np.maximum(d, 0.0, out=d)
        np.multiply(d, scale, out=d)
        np.exp(d, out=d)
        pair_sum += float(d.sum())
    centre_sum = float(np.exp(-b2 / (2.0 * (1.0 + b2)) * sq).sum())
    return pair_sum, centre_sum


def _central_moment(z: np.ndarray, order: int) -> float:
    # the products in the order of scipy.stats' moment (squares, then the odd factor)
    if order == 2:
        return float(np.mean(z ** 2))
    if order == 3:
        return float(np.mean((z ** 2) * z))
    return float(np.mean((z ** 2) ** 2))


def _dagostino_pearson(v: np.ndarray) -> tuple[float, float]:
    r"""D'Agostino-Pearson omnibus test of normality: (K^2, p), for n >= 8.

    Notes
    -----
    With :math:`\sqrt{b_1}` and :math:`b_2` the sample skewness and kurtosis,
    :math:`K^2 = Z(\sqrt{b_1})^2 + Z(b_2)^2`, the two normalised by D'Agostino's
    (1970) and Anscombe & Glynn's (1983) transformations; under normality
    :math:`K^2` is chi-square with 2 df, so :math:`p = e^{-K^2/2}`. The steps are
    those of ``scipy.stats.normaltest``, whose import alone costs about a second
    of every command that fits a Gaussian (tests/core/test_gaussian.py compares them).

    References
    ----------
    D'Agostino, R. & Pearson, E.S. (1973). Tests for departure from normality.
    Biometrika 60:613-622. doi:10.1093/biomet/60.3.613
    """
    n = float(v.size)
    mean = np.mean(v, keepdims=True)
    z = v - mean
    m2, m3, m4 = (_central_moment(z, k) for k in (2, 3, 4))
    if m2 <= (np.finfo(float).eps * float(mean[0])) ** 2:
        return math.nan, math.nan
    b1 = m3 / m2 ** 1.5
    y = b1 * math.sqrt(((n + 1) * (n + 3)) / (6.0 * (n - 2)))
    beta2 = (3.0 * (n ** 2 + 27 * n - 70) * (n + 1) * (n + 3) / ((n - 2.0) * (n + 5) * (n + 7) * (n + 9)))
    w2 = -1 + math.sqrt(2 * (beta2 - 1))
    delta = 1 / math.sqrt(0.5 * math.log(w2))
    alpha = math.sqrt(2.0 / (w2 - 1))
    y = 1.0 if y == 0 else y
    z_skew = delta * math.log(y / alpha + math.sqrt((y / alpha) ** 2 + 1))
    b2 = m4 / m2 ** 2.0
    e = 3.0 * (n - 1) / (n + 1)
    var_b2 = 24.0 * n * (n - 2) * (n - 3) / ((n + 1) * (n + 1.) * (n + 3) * (n + 5))
    x = (b2 - e) / var_b2 ** 0.5
    sqrt_beta1 = 6.0 * (n * n - 5 * n + 2) / ((n + 7) * (n + 9)) * ((6.0 * (n + 3) * (n + 5))
                                                                     / (n * (n - 2) * (n - 3))) ** 0.5
    a = 6.0 + 8.0 / sqrt_beta1 * (2.0 / sqrt_beta1 + (1 + 4.0 / (sqrt_beta1 ** 2)) ** 0.5)
    term1 = 1 - 2 / (9.0 * a)
    denom = 1 + x * (2 / (a - 4.0)) ** 0.5
    if denom == 0.0:
        return math.nan, math.nan
    term2 = math.copysign(((1 - 2.0 / a) / abs(denom)) ** (1 / 3), denom)
    z_kurt = (term1 - term2) / (2 / (9.0 * a)) ** 0.5
    statistic = z_skew * z_skew + z_kurt * z_kurt
    return statistic, float(special.chdtrc(2.0, statistic))


def _marginal_normality(v: np.ndarray) -> TestResult:
    n = v.size
    if n < 3:
        return undefined(n, "fewer than 3 rows")
    if np.all(v == v[0]):
        return undefined(n, "constant column")
    if n <= config.SHAPIRO_MAX_ROWS:
        from scipy import stats  # about a second to import: only Shapiro-Wilk's rows need it

        res = stats.shapiro(v)
        return TestResult(float(res.statistic), float(res.pvalue), "shapiro-wilk", n=n)
    statistic, p = _dagostino_pearson(np.asarray(v, dtype=float))
    return TestResult(statistic, p, "dagostino-pearson", n=n)


def _ellipse(mean: np.ndarray, cov: np.ndarray, mass: float, points: int) -> np.ndarray:
    # the chi-square quantile with 2 df in closed form: -2 ln(1 - m)
    radius = math.sqrt(-2.0 * math.log1p(-mass))
    vals, vecs = np.linalg.eigh(cov)
    scale = vecs * np.sqrt(np.clip(vals, 0.0, None))
    t = np.linspace(0.0, 2.0 * math.pi, points)
    circle = np.stack([np.cos(t), np.sin(t)])
    return (mean[:, None] + radius * (scale @ circle)).T


# -- public functions -------------------------------------------------------

def implied_measures(rho: float) -> dict[str, float]:
    """Values of each measure under a bivariate normal with correlation rho.

    Parameters
    ----------
    rho : float
        Correlation of the bivariate normal, in [-1, 1]; NaN gives NaN values.

    Returns
    -------
    dict
        ``pearson`` = rho, ``spearman`` = 6/pi asin(rho/2),
        ``kendall`` = 2/pi asin(rho), ``dcor`` = R(rho) of Szekely, Rizzo &
        Bakirov (2007) Theorem 7, ``dcor_bc`` = R(rho)^2 (the bias-corrected
        statistic estimates the squared distance correlation), ``xi`` =
        3/pi asin((1 + rho^2)/2) - 1/2 (see :func:`gaussian_xi`) and ``mi`` =
        -1/2 ln(1 - rho^2) (mutual information in nats).

    Notes
    -----
    R(rho)^2 = (rho asin rho + sqrt(1 - rho^2) - rho asin(rho/2)
    - sqrt(4 - rho^2) + 1) / (1 + pi/3 - sqrt 3).

    References
    ----------
    Kendall, M.G. (1948) Rank Correlation Methods (tau and rho_s of the normal);
    Szekely, G.J., Rizzo, M.L. & Bakirov, N.K. (2007) Ann. Statist.
    35:2769-2794, doi:10.1214/009053607000000505;
    Cover, T.M. & Thomas, J.A. (2006) Elements of Information Theory, 8.5.

    Examples
    --------
    >>> m = implied_measures(0.5)
    >>> round(m["kendall"], 4), round(m["spearman"], 4)
    (0.3333, 0.4826)
    """
    rho = float(rho)
    # each registry entry carries its own Gaussian-implied value as a function of rho
    implied = [(name, m.implied) for name, m in MEASURES.items() if m.implied is not None]
    if not math.isfinite(rho) or abs(rho) > 1.0 + 1e-12:
        return {**{name: _NAN for name, _ in implied}, "mi": _NAN}
    rho = max(-1.0, min(1.0, rho))
    mi = math.inf if abs(rho) == 1.0 else -0.5 * math.log1p(-rho * rho)
    return {**{name: float(f(rho)) for name, f in implied}, "mi": mi}


def henze_zirkler(data: np.ndarray, *, max_rows: int | None = None,
                  seed: np.random.SeedSequence | int | None = None) -> TestResult:
    """Henze-Zirkler test of multivariate normality on (n, d) data.

    Parameters
    ----------
    data : array_like, shape (n, d)
        Rows with a NaN or infinite value are dropped.
    max_rows : int, optional
        Above this many rows the test runs on a random subsample of this size
        (``config.HZ_MAX_ROWS`` by default), drawn with ``seed``; the note
        says so. The statistic needs all pairwise distances, O(n^2) time.
    seed : SeedSequence, int or None
        Seed of the subsample (``config.DEFAULT_SEED`` when None, so repeated
        calls agree).

    Returns
    -------
    TestResult
        ``estimate`` = HZ statistic, ``p_value`` from the lognormal
        approximation; undefined for n < 3 or a singular covariance.

    Notes
    -----
    With S the covariance (ddof=0), D_jk the squared Mahalanobis distance
    between rows j and k, D_j that of row j to the mean, and smoothing
    b = 2^(-1/2) ((2d + 1)/4)^(1/(d+4)) n^(1/(d+4)),

        HZ = n [ n^-2 sum_jk exp(-b^2 D_jk / 2)
                 - 2 (1 + b^2)^(-d/2) n^-1 sum_j exp(-b^2 D_j / (2(1 + b^2)))
                 + (1 + 2 b^2)^(-d/2) ].

    Under normality HZ is approximately lognormal with the mean and variance
    given by Henze & Zirkler; the p-value is its upper tail.

    References
    ----------
    Henze, N. & Zirkler, B. (1990). A class of invariant consistent tests for
    multivariate normality. Communications in Statistics - Theory and Methods
    19(10):3595-3617, doi:10.1080/03610929008830400.

    Examples
    --------
    >>> rng = np.random.default_rng(3)
    >>> res = henze_zirkler(rng.normal(size=(200, 2)))
    >>> bool(res.p_value > 0.01)
    True
    """
    x = np.asarray(data, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2:
        raise ValueError("data must be (n, d)")
    x = x[np.all(np.isfinite(x), axis=1)]
    n, d = x.shape
    if n < config.MIN_ROWS:
        return undefined(n, f"fewer than {config.MIN_ROWS} complete rows", _HZ_METHOD)
    limit = config.HZ_MAX_ROWS if max_rows is None else int(max_rows)
    note = ""
    n_all = n
    if n > limit:
        rng = np.random.default_rng(config.DEFAULT_SEED if seed is None else seed)
        x = x[np.sort(rng.choice(n, size=limit, replace=False))]
        n = limit
        note = f"computed on a random subsample of {limit} of {n_all} rows"
    centred = x - x.mean(axis=0)
    cov = centred.T @ centred / n
    try:
        chol = np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        return undefined(n_all, "covariance is singular (a column is constant or the points lie on a line)",
                         _HZ_METHOD)
    if np.linalg.cond(cov) > 1e12:
        return undefined(n_all, "covariance is singular (a column is constant or the points lie on a line)",
                         _HZ_METHOD)
    z = np.linalg.solve(chol, centred.T).T

    b2 = 0.5 * ((2 * d + 1) / 4.0) ** (2.0 / (d + 4)) * n ** (2.0 / (d + 4))
    pair_sum, centre_sum = _hz_kernel_sums(z, b2)
    hz = n * (pair_sum / n**2 - 2.0 * (1.0 + b2) ** (-d / 2) * centre_sum / n + (1.0 + 2.0 * b2) ** (-d / 2))

    a = 1.0 + 2.0 * b2
    wb = (1.0 + b2) * (1.0 + 3.0 * b2)
    b4 = b2 * b2
    mu = 1.0 - a ** (-d / 2) * (1.0 + d * b2 / a + d * (d + 2) * b4 / (2.0 * a**2))
    si2 = (2.0 * (1.0 + 4.0 * b2) ** (-d / 2)
           + 2.0 * a ** (-d) * (1.0 + 2.0 * d * b4 / a**2 + 3.0 * d * (d + 2) * b4**2 / (4.0 * a**4))
           - 4.0 * wb ** (-d / 2) * (1.0 + 3.0 * d * b4 / (2.0 * wb) + d * (d + 2) * b4**2 / (2.0 * wb**2)))
    log_mean = math.log(math.sqrt(mu**4 / (si2 + mu**2)))
    log_sd = math.sqrt(math.log1p(si2 / mu**2))
    p_value = 1.0 if hz <= 0.0 else float(ndtr(-(math.log(hz) - log_mean) / log_sd))
    return TestResult(float(hz), p_value, _HZ_METHOD, n=n_all, note=note)


def fit_gaussian(x: np.ndarray, y: np.ndarray, *, masses: tuple[float, ...] = (0.5, 0.9, 0.99),
                 points: int = 121, seed: np.random.SeedSequence | int | None = None,
                 tests: bool = True) -> GaussianFit:
    """Fit a bivariate normal to complete rows of (x, y).

    Parameters
    ----------
    x, y : array_like, 1-D
        Paired observations; rows with NaN or infinite values are dropped.
    masses : tuple of float
        Probability masses of the ellipses to draw, each in (0, 1).
    points : int
        Boundary points per ellipse (first and last coincide).
    seed : SeedSequence, int or None
        Only for the Henze-Zirkler subsample on large n.
    tests : bool
        False skips the normality tests (Henze-Zirkler is O(n^2) up to
        ``config.HZ_MAX_ROWS`` rows): the moments, line and ellipses only, with
        the tests' results undefined ("not computed"). The pair view's quick
        first answer uses this.

    Returns
    -------
    GaussianFit
        Degenerate data (fewer than 3 rows, a constant column) give NaN where
        a value is undefined and a note, never an exception.

    Notes
    -----
    mean and cov are the sample mean and the ddof=1 covariance;
    rho = s_xy / (s_x s_y); E[y | x] = m_y + (s_xy / s_x^2)(x - m_x) and
    residual_sd = sqrt(s_y^2 (1 - rho^2)), the conditional sd of the fitted
    Gaussian (ddof=1 throughout; the OLS residual standard error would use
    n - 2 and be larger by sqrt((n - 1)/(n - 2))). The ellipse of mass m is
    {v : (v - mean)' cov^-1 (v - mean) = chi2_2^-1(m)}. Joint normality by
    Henze-Zirkler; each marginal by Shapiro-Wilk for n <= 5000 and
    D'Agostino-Pearson above (where scipy's Shapiro-Wilk p-value is no longer
    accurate).

    References
    ----------
    Henze & Zirkler (1990) doi:10.1080/03610929008830400; Shapiro & Wilk
    (1965) Biometrika 52:591-611, doi:10.1093/biomet/52.3-4.591; D'Agostino &
    Pearson (1973) Biometrika 60:613-622, doi:10.1093/biomet/60.3.613.

    Examples
    --------
    >>> rng = np.random.default_rng(11)
    >>> x = rng.normal(size=500)
    >>> fit = fit_gaussian(x, 2 * x + rng.normal(size=500))
    >>> round(fit.slope, 1), fit.ellipses[0.9].shape
    (2.0, (121, 2))
    """
    for m in masses:
        if not 0.0 < m < 1.0:
            raise ValueError(f"ellipse mass must be in (0, 1), got {m}")
    x, y = _complete(x, y)
    n = int(x.size)
    if n < config.MIN_ROWS:
        note = f"fewer than {config.MIN_ROWS} complete rows"
        mean = (float(x.mean()), float(y.mean())) if n else (_NAN, _NAN)
        return GaussianFit(mean, _NAN_COV, _NAN, _NAN, _NAN, _NAN, implied_measures(_NAN),
                           undefined(n, note, _HZ_METHOD),
                           {"x": undefined(n, note), "y": undefined(n, note)}, {}, n, note)

    mx, my = float(x.mean()), float(y.mean())
    dx, dy = x - mx, y - my
    sxx = float(dx @ dx) / (n - 1)
    syy = float(dy @ dy) / (n - 1)
    sxy = float(dx @ dy) / (n - 1)
    cov = ((sxx, sxy), (sxy, syy))
    constant = [name for name, s in (("x", sxx), ("y", syy)) if s == 0.0]
    joint = None
    if tests and not constant and n >= _HZ_THREAD_MIN_ROWS:
        # Henze-Zirkler spends its time in BLAS and exp, which release the GIL: on a second core it
        # overlaps the marginal tests (and the first import of scipy.stats); the same call either way
        from concurrent.futures import ThreadPoolExecutor

        pool = ThreadPoolExecutor(max_workers=1)
        joint = pool.submit(henze_zirkler, np.column_stack([x, y]), seed=seed)
        pool.shutdown(wait=False)
    marginal = {"x": _marginal_normality(x), "y": _marginal_normality(y)} if tests else {}
    if constant:
        note = " and ".join(constant) + (" is" if len(constant) == 1 else " are") + " constant"
        slope = _NAN if sxx == 0.0 else 0.0
        intercept = _NAN if sxx == 0.0 else my
        resid = _NAN if sxx == 0.0 else 0.0
        return GaussianFit((mx, my), cov, _NAN, slope, intercept, resid, implied_measures(_NAN),
                           undefined(n, note, _HZ_METHOD), marginal, {}, n, note)

    rho = max(-1.0, min(1.0, sxy / math.sqrt(sxx * syy)))
    slope = sxy / sxx
    intercept = my - slope * mx
    residual_sd = math.sqrt(max(syy * (1.0 - rho * rho), 0.0))
    mean_vec = np.array([mx, my])
    cov_mat = np.array(cov)
    ellipses = {float(m): _ellipse(mean_vec, cov_mat, float(m), points) for m in masses}
    if joint is not None:
        normality = joint.result()
    else:
        normality = (henze_zirkler(np.column_stack([x, y]), seed=seed) if tests
                     else undefined(n, "not computed", _HZ_METHOD))
    note = "the points lie on a line: the Gaussian is degenerate" if abs(rho) == 1.0 else ""
    return GaussianFit((mx, my), cov, rho, slope, intercept, residual_sd, implied_measures(rho),
                       normality, marginal, ellipses, n, note)


def slice_conditional(fit: GaussianFit, x0: float, width: float = 0.0) -> SliceConditional:
    """The fitted Gaussian's law of y at x = x0 and within the slice |x - x0| <= width/2.

    Parameters
    ----------
    fit : GaussianFit
    x0 : float
        Centre of the slice.
    width : float
        Full width of the slice; 0 gives the conditional law at x0 itself.

    Returns
    -------
    SliceConditional

    Notes
    -----
    At a point: E[y | x0] = intercept + slope x0, sd = residual_sd. In a slice,
    with x truncated normal on [x0 - w/2, x0 + w/2] (moments m_w, v_w):
    E[y | slice] = intercept + slope m_w and
    Var(y | slice) = residual_sd^2 + slope^2 v_w (law of total variance).

    References
    ----------
    Johnson, Kotz & Balakrishnan (1994) Continuous Univariate Distributions 1,
    ch. 13 (truncated normal moments).

    Examples
    --------
    >>> rng = np.random.default_rng(2)
    >>> x = rng.normal(size=400)
    >>> s = slice_conditional(fit_gaussian(x, x + rng.normal(size=400)), 1.0, 0.5)
    >>> bool(s.sd > s.sd_at_x0)
    True
    """
    x0 = float(x0)
    width = float(width)
    if width < 0:
        raise ValueError("width must be >= 0")
    mean_at = fit.intercept + fit.slope * x0
    sd_at = fit.residual_sd
    sxx = fit.cov[0][0]
    if not (math.isfinite(mean_at) and math.isfinite(sd_at) and sxx > 0):
        return SliceConditional(x0, width, _NAN, _NAN, _NAN, _NAN, _NAN)
    mx, sx = fit.mean[0], math.sqrt(sxx)
    if width == 0.0:
        return SliceConditional(x0, width, mean_at, sd_at, mean_at, sd_at, 0.0)
    lo, hi = (x0 - width / 2 - mx) / sx, (x0 + width / 2 - mx) / sx
    mass = float(ndtr(hi) - ndtr(lo))
    from scipy import stats

    m_w, v_w = stats.truncnorm.stats(lo, hi, loc=mx, scale=sx, moments="mv")
    m_w, v_w = float(m_w), float(v_w)
    if not (math.isfinite(m_w) and math.isfinite(v_w)):
        # Far out in the tail the slice is essentially the point x0.
        m_w, v_w = x0, width**2 / 12.0
    mean = fit.intercept + fit.slope * m_w
    sd = math.sqrt(sd_at**2 + fit.slope**2 * max(v_w, 0.0))
    return SliceConditional(x0, width, mean_at, sd_at, mean, sd, mass)


def observed_slice(x: np.ndarray, y: np.ndarray, x0: float, width: float) -> tuple[int, float, float]:
    """Count, mean and sd (ddof=1) of the y values with |x - x0| <= width/2.

    The empirical counterpart of :func:`slice_conditional`; NaN where fewer
    than 1 (mean) or 2 (sd) points fall in the slice.

    Examples
    --------
    >>> observed_slice(np.array([0., 1., 2.]), np.array([5., 6., 9.]), 1.0, 2.0)
    (3, 6.666666666666667, 2.0816659994661326)
    """
    x, y = _complete(x, y)
    inside = y[np.abs(x - float(x0)) <= float(width) / 2.0]
    k = int(inside.size)
    mean = float(inside.mean()) if k >= 1 else _NAN
    sd = float(inside.std(ddof=1)) if k >= 2 else _NAN
    return k, mean, sd
