"""Association given other columns: partial Pearson, partial Spearman and partial distance correlation.

Every function takes the pair's complete rows ``x``, ``y`` and the conditioning
columns ``z`` (n, q) on the same rows. ``indicator`` marks the columns of ``z``
that are class codes: each is replaced by indicator (one-hot) columns of its
levels, the first level left out, before anything is regressed on it. Partial
Pearson and Spearman take residuals of x and y on [1, Z] by least squares
(Spearman: on mid-ranks of x, y and the numeric Z columns) and correlate them;
partial distance correlation projects the U-centred distance matrices of x and
y on the orthogonal complement of that of Z (Szekely & Rizzo 2014).
"""

from __future__ import annotations

import math

import numpy as np

from .rank import midranks
from .results import TestResult, undefined
from .testing import fisher_z_interval

__all__ = ["design_matrix", "residuals", "partial_pearson", "partial_spearman", "partial_dcor"]

# Below this share of its own spread left after regression on Z, a column counts as explained by Z
# exactly (rounding leaves ~1e-16 relative; anything a real column keeps is far above)
_EXPLAINED_SHARE = 1e-10


def _as_z(z, n: int) -> np.ndarray:
    if z is None:
        return np.empty((n, 0))
    z = np.asarray(z, dtype=float)
    return z.reshape(n, -1)


def _indicators(column: np.ndarray) -> np.ndarray:
    levels = np.unique(column)
    return (column[:, None] == levels[None, 1:]).astype(float)


def design_matrix(z, indicator=None, *, ranks: bool = False) -> np.ndarray:
    """The regressors of Z without the intercept: numeric columns as they are, class codes as indicators.

    Parameters
    ----------
    z : array_like, shape (n, q)
        The conditioning columns on the pair's rows (no NaN).
    indicator : sequence of bool, optional
        Per column of ``z``: True for class codes (one indicator per level but
        the first). Default: all numeric.
    ranks : bool
        Replace numeric columns by their mid-ranks (partial Spearman).

    Returns
    -------
    numpy.ndarray, shape (n, k)

    Examples
    --------
    >>> design_matrix(np.array([[1.0, 5.0], [2.0, 7.0], [1.0, 9.0]]), [True, False])
    array([[0., 5.],
           [1., 7.],
           [0., 9.]])
    """
    z = np.asarray(z, dtype=float)
    if z.ndim == 1:
        z = z[:, None]
    flags = [False] * z.shape[1] if indicator is None else list(indicator)
    parts = []
    for c, is_code in zip(z.T, flags):
        if is_code:
            parts.append(_indicators(c))
        else:
            parts.append((midranks(c) if ranks else c)[:, None])
    return np.hstack(parts) if parts else np.empty((z.shape[0], 0))


def residuals(v: np.ndarray, design: np.ndarray) -> tuple[np.ndarray, int]:
    """Least-squares residuals of ``v`` on [1, design] and the rank of ``design`` beyond the intercept.

    Examples
    --------
    >>> e, k = residuals(np.array([1.0, 2.0, 4.0, 8.0]), np.array([[0.0], [1.0], [2.0], [3.0]]))
    >>> k, bool(abs(e.sum()) < 1e-12)
    (1, True)
    """
    n = v.shape[0]
    a = np.column_stack([np.ones(n), design])
    # scale the columns so the rank decision does not depend on their units
    scale = np.abs(a).max(axis=0)
    scale[scale == 0] = 1.0
    coef, _, rank, _ = np.linalg.lstsq(a / scale, v, rcond=None)
    return v - (a / scale) @ coef, int(rank) - 1


def _prepare(x, y, z, indicator, ranks: bool):
    """Residuals of x and y, the rank k of Z, and a note when the partial correlation is undefined."""
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    n = x.shape[0]
    z = _as_z(z, n)
    design = design_matrix(z, indicator, ranks=ranks)
    if ranks:
        x, y = midranks(x), midranks(y)
    ex, k = residuals(x, design)
    ey, _ = residuals(y, design)
    if n < k + 4:
        return None, None, k, f"too few rows for {k} conditioning column(s): {n} rows, at least {k + 4} needed"
    for name, v, e in (("x", x, ex), ("y", y, ey)):
        spread = float(((v - v.mean()) ** 2).sum())
        if spread == 0.0:
            return None, None, k, f"{name} is constant"
        if float((e ** 2).sum()) <= _EXPLAINED_SHARE * spread:
            return None, None, k, f"the given columns explain {name} exactly: nothing is left to correlate"
    return ex, ey, k, ""


def _correlate(ex: np.ndarray, ey: np.ndarray, n: int, k: int, confidence: float, method: str) -> TestResult:
    r = float(ex @ ey / math.sqrt((ex @ ex) * (ey @ ey)))
    r = min(1.0, max(-1.0, r))
    df = n - 2 - k
    if abs(r) >= 1.0:
        p = 0.0
    else:
        from scipy import stats  # about half a second to import: only a run with --given pays it

        t = r * math.sqrt(df / (1.0 - r * r))
        p = float(2.0 * stats.t.sf(abs(t), df))
    lo, hi = fisher_z_interval(r, 1.0 / math.sqrt(n - 3 - k), confidence)
    return TestResult(r, p, f"{method}, t with n-2-k = {df} df", lo, hi, n)


def partial_pearson(x, y, z=None, indicator=None, *, confidence: float = 0.95) -> TestResult:
    """Partial Pearson correlation of x and y given the columns Z, with its t test and Fisher-z interval.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        The pair's complete rows.
    z : array_like, shape (n, q), optional
        The conditioning columns on the same rows; None or q = 0 gives Pearson's r with its t test.
    indicator : sequence of bool, optional
        Columns of ``z`` that are class codes (indicator regression).
    confidence : float
        Level of the interval.

    Returns
    -------
    TestResult
        ``estimate`` the partial correlation, ``p_value`` two-sided, ``n`` the rows;
        NaN with a note when Z explains x or y exactly or there are fewer than k + 4 rows.

    Notes
    -----
    With e_x, e_y the residuals of x and y after least squares on [1, Z] and k
    the rank of Z (indicator columns counted),

        r_xy.Z = sum(e_x e_y) / sqrt(sum(e_x^2) sum(e_y^2)),
        t = r sqrt((n - 2 - k) / (1 - r^2))  on n - 2 - k degrees of freedom,

    and the interval tanh(atanh(r) +/- z_(1-a/2) / sqrt(n - 3 - k)).

    References
    ----------
    Fisher, R.A. (1924). The distribution of the partial correlation coefficient.
    Metron 3:329-332.
    Baba, K., Shibata, R. & Sibuya, M. (2004). Partial correlation and conditional
    correlation as measures of conditional independence. Aust. N. Z. J. Stat.
    46:657-664, doi:10.1111/j.1467-842X.2004.00360.x

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> z = rng.normal(size=400)
    >>> x, y = z + rng.normal(size=400), z + rng.normal(size=400)
    >>> res = partial_pearson(x, y, z)
    >>> bool(abs(res.estimate) < 0.15), res.n
    (True, 400)
    """
    n = int(np.shape(x)[0])
    ex, ey, k, note = _prepare(x, y, z, indicator, ranks=False)
    if note:
        return undefined(n, note)
    return _correlate(ex, ey, n, k, confidence, "partial r")


def partial_spearman(x, y, z=None, indicator=None, *, confidence: float = 0.95) -> TestResult:
    """Partial Spearman correlation: the partial Pearson correlation of mid-ranks.

    Parameters
    ----------
    x, y : array_like, shape (n,)
    z : array_like, shape (n, q), optional
        Numeric columns are ranked; class-code columns (``indicator``) enter as indicators.
    indicator : sequence of bool, optional
    confidence : float

    Returns
    -------
    TestResult

    Notes
    -----
    r_s.Z = partial Pearson correlation of rank(x), rank(y) given rank(Z), t test on
    n - 2 - k degrees of freedom and Fisher-z interval with SE 1/sqrt(n - 3 - k), as
    for ranks treated as scores (the rule of ``pingouin.partial_corr(method="spearman")``).

    References
    ----------
    Conover, W.J. (1999). Practical Nonparametric Statistics, 3rd ed., Wiley, section 5.4.
    Kendall, M.G. (1942). Partial rank correlation. Biometrika 32:277-283,
    doi:10.1093/biomet/32.3-4.277

    Examples
    --------
    >>> rng = np.random.default_rng(2)
    >>> z = rng.normal(size=300)
    >>> x, y = np.exp(z + rng.normal(size=300)), z + rng.normal(size=300)
    >>> bool(abs(partial_spearman(x, y, z).estimate) < 0.2)
    True
    """
    n = int(np.shape(x)[0])
    ex, ey, k, note = _prepare(x, y, z, indicator, ranks=True)
    if note:
        return undefined(n, note)
    return _correlate(ex, ey, n, k, confidence, "partial rank r")


def _u_centred_distances(v: np.ndarray) -> np.ndarray:
    v = v.reshape(v.shape[0], -1)
    d = np.sqrt(((v[:, None, :] - v[None, :, :]) ** 2).sum(axis=2))
    n = d.shape[0]
    col = d.sum(axis=0)
    out = d - col[None, :] / (n - 2) - col[:, None] / (n - 2) + d.sum() / ((n - 1) * (n - 2))
    np.fill_diagonal(out, 0.0)
    return out


def _u_product(a: np.ndarray, b: np.ndarray) -> float:
    n = a.shape[0]
    return float(np.einsum("ij,ij->", a, b)) / (n * (n - 3))


def _project_out(a: np.ndarray, c: np.ndarray, cc: float) -> np.ndarray:
    return a if cc == 0.0 else a - (_u_product(a, c) / cc) * c


def partial_dcor(x, y, z=None, indicator=None, *, permutations: int = 199, seed=None,
                 max_n: int | None = None) -> TestResult:
    """Partial distance correlation R*(x, y; z) and its permutation test (Szekely & Rizzo 2014).

    Parameters
    ----------
    x, y : array_like, shape (n,) or (n, p)
    z : array_like, shape (n, q), optional
        Numeric columns are divided by their standard deviation (so no column's unit
        dominates the distances of Z); class-code columns (``indicator``) enter as 0/1
        indicators. None or q = 0 gives the bias-corrected squared distance correlation.
    indicator : sequence of bool, optional
    permutations : int
        Relabellings of the test; 0 skips it (p-value NaN).
    seed : int, SeedSequence or Generator, optional
        Drives the relabellings: each is ``rng.permutation(n)`` in turn.
    max_n : int, optional
        Above this many rows the n x n matrices are not built: NaN with a note.

    Returns
    -------
    TestResult
        ``estimate`` R*, ``p_value`` = (1 + #{T_b >= T}) / (1 + B).

    Notes
    -----
    With A~, B~, C~ the U-centred distance matrices of x, y and Z, the inner product
    (A~ . B~) = sum_(i != j) A~_ij B~_ij / (n (n - 3)) and the projection on the
    complement of C~, P(A~) = A~ - (A~ . C~)/(C~ . C~) C~,

        R*(x, y; z) = (P(A~) . P(B~)) / sqrt((P(A~) . P(A~)) (P(B~) . P(B~))),

    which equals (R*_xy - R*_xz R*_yz) / sqrt((1 - R*_xz^2)(1 - R*_yz^2)) in the
    bias-corrected distance correlations. The test relabels the rows of P(A~)
    (rows and columns together) against P(B~) and compares n (P(A~) . P(B~)).
    R* = 0 does not by itself mean conditional independence (section 4.2 of the paper).

    References
    ----------
    Szekely, G.J. & Rizzo, M.L. (2014). Partial distance correlation with methods for
    dissimilarities. Ann. Statist. 42:2382-2412, doi:10.1214/14-AOS1255

    Examples
    --------
    >>> rng = np.random.default_rng(3)
    >>> z = rng.normal(size=150)
    >>> x, y = z + 0.5 * rng.normal(size=150), z ** 2 + 0.5 * rng.normal(size=150)
    >>> res = partial_dcor(x, y, z, permutations=99, seed=4)
    >>> bool(abs(res.estimate) < 0.1), res.p_value > 0.01
    (True, True)
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = int(x.shape[0])
    if n < 4:
        return undefined(n, f"partial distance correlation needs at least 4 rows ({n})")
    if max_n is not None and n > max_n:
        return undefined(n, f"partial distance correlation builds n x n distance matrices; {n} rows exceed the "
                            f"limit of {max_n} (config.PARTIAL_DCOR_MAX_N)")
    a, b = _u_centred_distances(x), _u_centred_distances(y)
    design = design_matrix(_as_z(z, n), indicator)
    if design.shape[1]:
        sd = design.std(axis=0)
        sd[sd == 0] = 1.0
        c = _u_centred_distances(design / sd)
    else:
        c = np.zeros_like(a)
    cc = _u_product(c, c)
    pa, pb = _project_out(a, c, cc), _project_out(b, c, cc)
    aa, bb = _u_product(pa, pa), _u_product(pb, pb)
    for name, own, proj in (("x", _u_product(a, a), aa), ("y", _u_product(b, b), bb)):
        if own <= 0.0:
            return undefined(n, f"{name} is constant")
        if proj <= _EXPLAINED_SHARE * own:
            return undefined(n, f"the given columns explain the distances of {name} exactly: nothing is left")
    statistic = float(np.einsum("ij,ij->", pa, pb))
    estimate = statistic / (n * (n - 3)) / math.sqrt(aa * bb)
    estimate = min(1.0, max(-1.0, estimate))
    if permutations <= 0:
        return TestResult(estimate, math.nan, "no test (0 relabellings)", n=n)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    exceed = 0
    # a small tolerance so relabellings that reproduce the statistic up to rounding count as ties
    bar = statistic - 1e-12 * max(1.0, abs(statistic))
    for _ in range(permutations):
        p = rng.permutation(n)
        if np.einsum("ij,ij->", pa.take(p, axis=0).take(p, axis=1), pb) >= bar:
            exceed += 1
    return TestResult(estimate, (exceed + 1) / (permutations + 1), f"permutation, B={permutations}", n=n)
