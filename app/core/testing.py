"""Shared pieces of inference: multiplicity adjustment, Fisher-z intervals, per-pair seeds."""

from __future__ import annotations

import math
import zlib
from dataclasses import replace
from functools import lru_cache

import numpy as np
from scipy import special

from ..config import PVALUE_FLOOR_ENUMERATE_MAX_N, PVALUE_FLOOR_MAX_N
from .results import TestResult

__all__ = ["adjust_pvalues", "fisher_z_interval", "pair_seed", "permutation_floor", "attainable_minimum",
           "all_pairings", "floor_pvalue"]


def _as_pvalue_array(p_values) -> np.ndarray:
    p = np.array(p_values, dtype=float, copy=True)
    finite = p[~np.isnan(p)]
    if finite.size and (finite.min() < 0.0 or finite.max() > 1.0):
        raise ValueError("p-values must lie in [0, 1] (NaN allowed for undefined tests)")
    return p


def _group_ids(v: np.ndarray) -> np.ndarray:
    """Equal rows (or values) share an id."""
    if v.ndim == 1:
        return np.unique(v, return_inverse=True)[1].reshape(-1)
    return np.unique(v, axis=0, return_inverse=True)[1].reshape(-1)


def _log_multiplicities(ids: np.ndarray) -> float:
    counts = np.bincount(ids)
    return float(special.gammaln(counts[counts > 1] + 1.0).sum())


@lru_cache(maxsize=8)
def _pairings(n: int) -> np.ndarray:
    import itertools

    out = np.array(list(itertools.permutations(range(n))), dtype=np.int64)
    out.setflags(write=False)
    return out


def _bh(p: np.ndarray) -> np.ndarray:
    m = p.size
    order = np.argsort(p, kind="stable")
    scaled = p[order] * m / np.arange(1, m + 1)
    # Step-up: q_(i) = min over j >= i of p_(j) m / j.
    q_sorted = np.minimum.accumulate(scaled[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(q_sorted, 1.0)
    return out


def _holm(p: np.ndarray) -> np.ndarray:
    m = p.size
    order = np.argsort(p, kind="stable")
    scaled = p[order] * (m - np.arange(m))
    # Step-down: an adjusted p-value can never be smaller than the one before it.
    q_sorted = np.maximum.accumulate(np.minimum(scaled, 1.0))
    out = np.empty(m)
    out[order] = q_sorted
    return out


def adjust_pvalues(p_values, method: str = "bh") -> np.ndarray:
    """Adjust p-values for multiple testing; NaN entries stay NaN and do not count.

    Parameters
    ----------
    p_values : array_like
        p-values of any shape, each in [0, 1]; NaN marks a test that could not
        be computed.
    method : {"bh", "holm", "none"}
        ``"bh"``: Benjamini-Hochberg step-up (controls the false discovery rate
        under independence or positive dependence). ``"holm"``: Holm step-down
        (controls the family-wise error rate under any dependence).
        ``"none"``: the p-values unchanged.

    Returns
    -------
    numpy.ndarray
        Adjusted p-values (q-values for ``"bh"``), same shape as the input,
        NaN where the input was NaN.

    Notes
    -----
    With the :math:`m` non-missing p-values sorted,
    :math:`p_{(1)} \\le \\dots \\le p_{(m)}`:

    * BH: :math:`q_{(i)} = \\min_{j \\ge i} \\min(1, m\\,p_{(j)}/j)`.
    * Holm: :math:`q_{(i)} = \\max_{j \\le i} \\min(1, (m - j + 1)\\,p_{(j)})`.

    NaN entries are left out of :math:`m`, so an undefined pair does not make
    the others harder to detect.

    References
    ----------
    Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate:
    a practical and powerful approach to multiple testing. J. R. Stat. Soc. B
    57:289-300. doi:10.1111/j.2517-6161.1995.tb02031.x

    Holm, S. (1979). A simple sequentially rejective multiple test procedure.
    Scand. J. Stat. 6:65-70.

    Examples
    --------
    >>> import numpy as np
    >>> p = np.random.default_rng(7).uniform(size=5) ** 3
    >>> q = adjust_pvalues(np.append(p, np.nan), "bh")
    >>> bool(np.isnan(q[-1])), bool(np.all(q[:-1] >= p))
    (True, True)
    """
    if method not in ("bh", "holm", "none"):
        raise ValueError(f"unknown adjustment {method!r}; choose from bh, holm, none")
    p = _as_pvalue_array(p_values)
    if method == "none":
        return p
    flat = p.reshape(-1)
    present = ~np.isnan(flat)
    if present.any():
        flat[present] = (_bh if method == "bh" else _holm)(flat[present])
    return flat.reshape(p.shape)


def fisher_z_interval(estimate: float, se_z: float, confidence: float) -> tuple[float, float]:
    """Interval ``tanh(atanh(estimate) -/+ z_{(1+c)/2} * se_z)`` for a correlation.

    Parameters
    ----------
    estimate : float
        Correlation estimate; values a rounding error outside [-1, 1] are
        clipped.
    se_z : float
        Standard error on the Fisher z scale. ``inf`` (too few rows) gives the
        whole range (-1, 1).
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    (float, float)
        Lower and upper limits; (NaN, NaN) when the estimate or SE is NaN.

    Notes
    -----
    :math:`z = \\operatorname{atanh}(r)` is close to normal with a standard
    error that depends on the measure (Pearson :math:`1/\\sqrt{n-3}`, Spearman
    and Kendall see :mod:`pairlens.core.rank`); the limits are
    :math:`\\tanh(z \\mp z_{(1+c)/2}\\,\\mathrm{SE})`. At :math:`|r| = 1` the
    transform is infinite and both limits equal :math:`r`, as the limit of
    the formula.

    References
    ----------
    Fisher, R.A. (1921). On the "probable error" of a coefficient of
    correlation deduced from a small sample. Metron 1:3-32.

    Examples
    --------
    >>> lo, hi = fisher_z_interval(0.5, 1 / np.sqrt(47), 0.95)
    >>> round(lo, 4), round(hi, 4)
    (0.2575, 0.6833)
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError("confidence must lie strictly between 0 and 1")
    r = float(estimate)
    se = float(se_z)
    if math.isnan(r) or math.isnan(se) or se < 0.0:
        return math.nan, math.nan
    if math.isinf(se):
        return -1.0, 1.0
    r = min(1.0, max(-1.0, r))
    if abs(r) == 1.0:
        return r, r
    half_width = float(special.ndtri(0.5 + confidence / 2.0)) * se
    z = math.atanh(r)
    return math.tanh(z - half_width), math.tanh(z + half_width)


def pair_seed(seed: int, x_name: str, y_name: str, measure: str) -> np.random.SeedSequence:
    """Seed sequence for one pair and measure, independent of tiling and executor."""
    key = f"{x_name}\x1f{y_name}\x1f{measure}".encode("utf-8")
    return np.random.SeedSequence([int(seed) & 0xFFFFFFFF, zlib.crc32(key), len(key)])


def permutation_floor(x: np.ndarray, y: np.ndarray) -> float:
    """The smallest p-value any permutation test of independence can give on these rows.

    Parameters
    ----------
    x, y : numpy.ndarray
        The pair's complete rows (1-D, or 2-D with one row per observation).

    Returns
    -------
    float
        :math:`K / n!`, K the number of the n! pairings of the y rows with the
        x rows that leave the multiset of (x, y) rows unchanged; 0.0 above
        :data:`pairlens.config.PVALUE_FLOOR_MAX_N` rows.

    Notes
    -----
    A permutation p-value counts the pairings whose statistic is at least the
    observed one; the K pairings that reproduce the data all do, for any
    statistic of the rows as a set, so :math:`p \\ge K/n!`. With x-tie groups
    G, y values v, :math:`m_{Gv}` the rows of G with value v and :math:`c_v`
    the rows with value v,

    .. math:: K = \\prod_G \\frac{|G|!}{\\prod_v m_{Gv}!} \\prod_v c_v!

    (1 without ties). Beyond the cap, :math:`K/n!` is far below any p-value
    that float64 represents apart from 0 unless nearly every row is tied.

    References
    ----------
    Good, P. (2005). Permutation, Parametric and Bootstrap Tests of
    Hypotheses, 3rd ed. Springer. doi:10.1007/b138696

    Examples
    --------
    >>> round(permutation_floor(np.array([1.0, 2.0, 3.0]), np.array([3.0, 1.0, 2.0])), 12)  # 1/3!
    0.166666666667
    >>> round(permutation_floor(np.array([1.0, 1.0, 2.0]), np.array([3.0, 1.0, 2.0])), 12)  # 2/3!
    0.333333333333
    """
    n = int(np.shape(x)[0])
    if n == 0 or n > PVALUE_FLOOR_MAX_N:
        return 0.0
    gx, gy = _group_ids(np.asarray(x)), _group_ids(np.asarray(y))
    joint = gx.astype(np.int64) * (int(gy.max()) + 1) + gy
    log_k = (_log_multiplicities(gx) - _log_multiplicities(joint) + _log_multiplicities(gy))
    return float(math.exp(log_k - special.gammaln(n + 1.0)))


def all_pairings(n: int) -> np.ndarray:
    """All n! permutations of range(n) as an (n!, n) read-only array (n up to the enumeration cap)."""
    if n > PVALUE_FLOOR_ENUMERATE_MAX_N:
        raise ValueError(f"enumerating {n}! pairings is beyond the cap of {PVALUE_FLOOR_ENUMERATE_MAX_N} rows")
    return _pairings(int(n))


def attainable_minimum(extremeness: np.ndarray) -> float:
    """Smallest p-value of a permutation law: the share of pairings at its most extreme value.

    Parameters
    ----------
    extremeness : numpy.ndarray
        The test's statistic for every one of the n! pairings, oriented so that
        larger is more extreme (e.g. :math:`|r|` for a two-sided test).

    Returns
    -------
    float
        :math:`\\#\\{\\pi : T_\\pi \\ge \\max T - \\epsilon\\}/n!`, with a relative
        tolerance of 1e-9 for the rounding of equal statistics computed in a
        different order.

    Examples
    --------
    >>> attainable_minimum(np.array([0.5, 1.0, 1.0, 0.2, 0.0, 0.5]))
    0.3333333333333333
    """
    values = np.asarray(extremeness, dtype=float)
    top = float(values.max())
    return float(np.count_nonzero(values >= top - 1e-9 * max(1.0, abs(top))) / values.size)


def floor_pvalue(result: TestResult, floor: float) -> TestResult:
    """``result`` with its p-value raised to ``floor`` where it was below it, said in the note.

    An approximation (t, normal, gamma) can put a tiny sample's p-value below
    anything its permutations allow, e.g. Pearson's t-test gives p = 0.002 on
    3 rows, where no test of independence can go below 1/6.

    Examples
    --------
    >>> res = floor_pvalue(TestResult(0.99, 0.002, "t", -1.0, 1.0, 3, ""), 1 / 6)
    >>> round(res.p_value, 4), res.note
    (0.1667, 'p-value raised to 1/6, the smallest the permutation law of these 3 rows allows')
    """
    p = result.p_value
    if not (p == p) or p >= floor:
        return result
    inverse = 1.0 / floor
    shown = f"1/{round(inverse)}" if abs(inverse - round(inverse)) < 1e-6 * inverse else f"{floor:.3g}"
    note = f"p-value raised to {shown}, the smallest the permutation law of these {result.n} rows allows"
    return replace(result, p_value=floor, note="; ".join(filter(None, [result.note, note])))
