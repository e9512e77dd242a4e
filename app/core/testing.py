"""Shared pieces of inference: multiplicity adjustment, Fisher-z intervals, per-pair seeds."""

from __future__ import annotations

import math
import zlib

import numpy as np
from scipy import special

__all__ = ["adjust_pvalues", "fisher_z_interval", "pair_seed"]


def _as_pvalue_array(p_values) -> np.ndarray:
    p = np.array(p_values, dtype=float, copy=True)
    finite = p[~np.isnan(p)]
    if finite.size and (finite.min() < 0.0 or finite.max() > 1.0):
        raise ValueError("p-values must lie in [0, 1] (NaN allowed for undefined tests)")
    return p


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
    and Kendall see :mod:`app.core.rank`); the limits are
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
