"""A plain-words verdict on the kind of dependence in a pair.

The verdict combines what the panel of measures already says (adjusted
significance and estimates) with three cheap extra looks at the data: the
Gaussian yardstick (what a bivariate normal with the observed r would imply),
normality of the marginals and of the pair, and the influence of single
points on r. Rules are tried in order; the first that holds gives the label.

Rule table (alpha is the significance level applied to the q-values):

==  =========================  ==============================================================
#   label                      holds when
==  =========================  ==============================================================
1   no evidence of dependence  fewer than 3 complete rows, or a constant column
2   not tested (trending)      rows in time order (--ordered) and a side trends (augmented
                               Dickey-Fuller): levels of trending series correlate by chance,
                               so neither dependence nor independence is claimed on them
3   driven by a few points     Pearson's q < alpha; dropping the k most influential points
                               (k = min(10, max(3, ceil(n/100)), n // 10), chosen greedily,
                               each the one whose removal shrinks |r| most) leaves
                               |r| < |r_full| / 2 and takes off at least 0.10; and no rank
                               correlation backs r (none has q < alpha with a rank-equivalent
                               |r| of at least |r_full| / 2); and dCor of the remaining points
                               is not significant (its own unadjusted p >= alpha: a follow-up
                               question about a pair already found dependent)
4   no evidence of dependence  no measure with a q-value has q < alpha
5   non-monotone               a dependence test (dcor, dcor_bc or xi) has q < alpha, and
                               either no trend test (pearson, spearman, kendall) has, or the
                               observed dCor exceeds the dCor a Gaussian with the stronger of
                               |r| and the rank-equivalent r would have by more than 0.15
6   monotone but curved        a rank correlation has q < alpha and its rank-equivalent r
                               exceeds |r| by more than 0.10 on Fisher's z scale
                               (atanh|r_rank| - atanh|r|), which does not saturate near
                               |r| = 1, and by more than 2.33 standard deviations of that
                               gap under a Gaussian (curvature_noise; perfect rank
                               agreement counts as one swap short of perfect);
                               "non-monotone" on a dependence test alone with
                               q between 0.2 alpha and alpha says "weak evidence"
7   linear                     a trend test has q < alpha (what is left)
==  =========================  ==============================================================

The thresholds (0.5, 0.10, 0.15) are our own choices on the correlation
scale, set well above the sampling noise at a few hundred rows and checked on
the synthetic pairs of tests/core/test_verdict.py; they are not from a paper.

The rank-equivalent r is the correlation a bivariate normal would need to
show the observed rank correlation: 2 sin(pi rho_s / 6) from Spearman, or
sin(pi tau / 2) from Kendall (Kendall 1948). Under a Gaussian it equals r; a
monotone curve raises it above |r|, a few outliers leave it below.

Missing measures. Significance comes only from ``q_values`` (or, when a
measure has a result but no q-value, its unadjusted p-value, and a reason
says so): a measure that was not tested never counts as significant.
Estimates that the rules compare (r, Spearman's rho, dCor) are computed here
with the project's own functions when ``results`` lacks them; they are only
descriptive and the reasons say "computed here, not tested". A label that
could have been different had a measure been tested (for example "no
evidence" with only Pearson) gets a reason naming what is missing.

Normality: both marginals "look normal" when their normality tests (Shapiro-
Wilk, or D'Agostino-Pearson above 5000 rows) give p >= alpha; Henze-Zirkler
"rejects" when its p < alpha. When both marginals look normal, r is near 0
(|r| < 0.3 and either Pearson not significant or dCor above the Gaussian-
implied dCor of r by more than 0.15) and a dependence test is significant, a
reason says that zero correlation does not mean independence here because the
pair is not jointly normal.

Cost: O(n log n) (Spearman, dCor) plus O(k n) for the influence, and the
Henze-Zirkler test of :func:`pairlens.core.gaussian.fit_gaussian` (capped at
``config.HZ_MAX_ROWS`` rows) unless a fit is passed in.
"""

from __future__ import annotations

import copy
import dataclasses
import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .. import config
from .jit import kernel
from .registry import MEASURES
from .results import TestResult
from .numbers import fmt_est, fmt_p

__all__ = ["Pattern", "LABELS", "RULES", "Rule", "classify_pair", "influence_on_r", "rank_rank", "LabelEvidence",
           "label_evidence", "label_from_evidence", "settled_label", "marginals_normal_not_joint"]

LABELS = ("linear", "monotone but curved", "non-monotone", "driven by a few points",
          "no evidence of dependence", "not tested (trending)")

# Read from the registry entries' roles (a rank correlation is a trend test too).
# The rules below judge pairs of two numeric columns: the measures that apply to those
# (categorical pairs have their own rules, core.verdict_categorical).
_NUMERIC = {n: m for n, m in MEASURES.items() if m.applies_to("numeric", "numeric")}
TREND_MEASURES = tuple(n for n, m in _NUMERIC.items() if m.role in ("trend", "rank"))
RANK_MEASURES = tuple(n for n, m in _NUMERIC.items() if m.role == "rank")
DEPENDENCE_MEASURES = tuple(n for n, m in _NUMERIC.items() if m.role == "dependence")

# Thresholds of the rule table (see the module docstring). They are effect
# sizes on the correlation scale, chosen well above the sampling noise of the
# compared quantities at n of a few hundred (SE of r - rank-equivalent r is
# about 0.03 at n = 300 for Gaussian data).
FEW_POINTS_SHRINK = 0.5        # |r| after dropping k points below this fraction of |r|
FEW_POINTS_MIN_DROP = 0.10     # ... and lower by at least this much
CURVED_GAP = 0.10              # rank-equivalent r above |r| by more than this, on Fisher's z scale
# A dependence test alone (no trend) with its smallest q between alpha * WEAK_EVIDENCE_FACTOR and
# alpha is reported as "weak evidence" in the reasons: a margin below alpha, our own choice.
WEAK_EVIDENCE_FACTOR = 0.2


CURVED_Z = 2.326               # the gap must also exceed this many of its Gaussian standard deviations
                               # (the one-sided 1% point of the normal law, common practice)


def curvature_gap(r: float, rank_equiv: float) -> float:
    """atanh|rank-equivalent r| - atanh|r|: the rank-over-value excess on Fisher's z scale.

    On the correlation scale the gap shrinks to nothing as |r| -> 1 (a bend with
    r = 0.987 and Spearman 1.000 differs by 0.013); on the z scale it does not
    saturate (a perfectly monotone curve with |r| < 1 gives an infinite gap).
    Under a Gaussian both sides estimate the same z; the gap's noise grows with
    |rho| and shrinks with n (:func:`curvature_noise`).
    """
    if not (math.isfinite(r) and math.isfinite(rank_equiv)):
        return math.nan
    with np.errstate(divide="ignore"):
        return float(np.arctanh(min(1.0, abs(rank_equiv))) - np.arctanh(min(1.0, abs(r))))


def curvature_noise(r: float, n: int) -> float:
    """Standard deviation of :func:`curvature_gap` for n rows of a bivariate normal with rho = |r|.

    Notes
    -----
    Under the bivariate normal, Kendall's tau has variance (Esscher 1924;
    Kendall 1949 - from memory, checked by simulation in tests/core/test_verdict.py)

    .. math:: \\frac{2}{n(n-1)}\\left[1 - \\left(\\tfrac{2}{\\pi}\\arcsin\\rho\\right)^2\\right]
              + \\frac{4(n-2)}{n(n-1)}\\left[\\tfrac19 - \\tfrac{4}{\\pi^2}\\arcsin^2(\\rho/2)\\right],

    2(2n+5)/(9n(n-1)) at rho = 0 (Kendall 1938). The delta method gives
    Var(atanh sin(pi tau / 2)) = (pi^2 / 4) Var(tau) / (1 - rho^2), and since r is
    efficient for a bivariate normal, the difference of an estimator and r has
    the difference of their variances (Hausman 1978): Var(gap) = Var(z_tau) -
    1/(n - 3). Spearman's rank-equivalent r has nearly the same efficiency, and
    this serves for both (measured within 10% at n = 40 and 200, rho up to 0.99).

    References
    ----------
    Kendall, M.G. (1949) Rank and product-moment correlation. Biometrika 36:177-193,
    doi:10.2307/2332540. Hausman, J.A. (1978) Specification tests in econometrics.
    Econometrica 46:1251-1271, doi:10.2307/1913827.
    """
    if not math.isfinite(r) or n < 4:
        return math.inf
    rho = min(abs(r), 1.0 - 1e-12)
    a, b = math.asin(rho), math.asin(rho / 2.0)
    var_tau = (2.0 / (n * (n - 1)) * (1.0 - (2.0 * a / math.pi) ** 2)
               + 4.0 * (n - 2) / (n * (n - 1)) * (1.0 / 9.0 - 4.0 / math.pi ** 2 * b * b))
    var_z = (math.pi ** 2 / 4.0) * var_tau / (1.0 - rho * rho)
    return math.sqrt(max(var_z - 1.0 / (n - 3), 0.0))


def _unsaturated(rank_equiv: float, source: str, n: int) -> float:
    """The rank-equivalent r with perfect rank agreement taken one step short of perfect (one
    adjacent swap): with few rows a nearly straight line often has perfectly ordered ranks, whose
    rank-equivalent r of 1 would give an infinite gap to any r below 1."""
    if n < 3 or not math.isfinite(rank_equiv):
        return rank_equiv
    if source == "kendall":
        top = math.sin(math.pi / 2.0 * (1.0 - 4.0 / (n * (n - 1))))
    else:
        top = 2.0 * math.sin(math.pi / 6.0 * (1.0 - 12.0 / (n * (n * n - 1))))
    return math.copysign(min(abs(rank_equiv), top), rank_equiv)


def curvature_beyond_noise(r: float, rank_equiv: float, source: str, n: int) -> tuple[float, float]:
    """(gap, threshold): the curvature gap (perfect rank agreement one step short of perfect) and
    the larger of CURVED_GAP and CURVED_Z standard deviations of the gap under a Gaussian."""
    gap = curvature_gap(r, _unsaturated(rank_equiv, source, n))
    return gap, max(CURVED_GAP, CURVED_Z * curvature_noise(r, n))
DCOR_EXCESS = 0.15             # observed dCor above the Gaussian-implied dCor by more than this
CLOSE_DCOR = 0.05              # observed and Gaussian-implied dCor called "close" in the reasons
NEAR_ZERO_R = 0.10             # |r| below this is called "near 0" in the reasons
WEAK_R = 0.30                  # |r| below this can count as "near 0" (see _normality_reasons)
MAX_DROPPED = 10


@dataclass(frozen=True)
class Pattern:
    """The label of a pair, the reasons in plain words and the numbers behind them.

    ``rule`` is the number of the rule in the table that fired; ``evidence``
    holds the quantities the rules used (NaN where not available).
    """

    label: str
    reasons: tuple[str, ...]
    rule: int = 0
    evidence: dict[str, float] = field(default_factory=dict)


@dataclass
class _Evidence:
    n: int = 0
    degenerate: str = ""
    q: dict[str, float | None] = field(default_factory=dict)   # None = not tested
    q_from_p: list[str] = field(default_factory=list)
    est: dict[str, float] = field(default_factory=dict)
    computed_here: list[str] = field(default_factory=list)
    rank_equiv: float = math.nan
    rank_source: str = ""
    dcor_implied: float = math.nan
    dcor_ref_implied: float = math.nan
    k: int = 0
    r_drop: float = math.nan
    dcor_drop: float = math.nan
    dcor_drop_p: float = math.nan
    loo_max_change: float = math.nan
    loo_r_at_max: float = math.nan
    marg_p: tuple[float, float] = (math.nan, math.nan)
    hz_p: float = math.nan
    class_codes: tuple[tuple[str, int], ...] = ()   # ("x", levels) for a side that looks like a code
    trending: tuple[str, ...] = ()   # names of the sides that trend, rows in time order
    alpha: float = 0.05

    def sig(self, m: str) -> bool | None:
        q = self.q.get(m)
        return None if q is None else bool(q < self.alpha)

    def any_sig(self, names) -> bool:
        return any(self.sig(m) for m in names)

    def tested(self, names) -> list[str]:
        return [m for m in names if self.q.get(m) is not None]

    @property
    def r(self) -> float:
        return self.est.get("pearson", math.nan)


@dataclass(frozen=True)
class Rule:
    number: int
    label: str
    when: str
    holds: Callable[[_Evidence], bool]


# -- private helpers --------------------------------------------------------

def _fmt(v: float) -> str:
    # the one number rule of every face (pairlens.core.numbers): the same digits as the tables beside
    return fmt_est(v)


def _fmt_q(q: float | None, name: str = "q") -> str:
    return f"{name} = {fmt_p(q)}"


_PRETTY = {n: m.short_label or m.label for n, m in MEASURES.items()}


def _r_from_sums(dx: np.ndarray, dy: np.ndarray) -> float:
    sxx, syy = float(dx @ dx), float(dy @ dy)
    if sxx <= 0 or syy <= 0:
        return math.nan
    return float(dx @ dy) / math.sqrt(sxx * syy)


def _loo_r(dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
    """r without row i, for every i at once, from the sums of the centred data.

    With d = value - mean over the current m rows and S the centred sums,
    dropping row i gives the cross-product (m-1) S_xy - m dx_i dy_i and the
    sums of squares (m-1) S_xx - m dx_i^2, (m-1) S_yy - m dy_i^2 (each times
    (m-1)), so all m leave-one-out correlations cost O(m).
    """
    m = dx.size
    sxx, syy, sxy = float(dx @ dx), float(dy @ dy), float(dx @ dy)
    num = (m - 1) * sxy - m * dx * dy
    vx = (m - 1) * sxx - m * dx * dx
    vy = (m - 1) * syy - m * dy * dy
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / np.sqrt(vx * vy)
    out[~((vx > 0) & (vy > 0))] = np.nan
    return out


@kernel(cache=True, nogil=True, python_max_n=64)
def _influence_kernel(x, y, k):
    """The greedy path of :func:`influence_on_r` in one pass per step: (dropped, r_path, steps).

    Each step centres the active points, takes their sums and the leave-one-out
    |r| of every active point from them (the formula of ``_loo_r``), and drops
    the first point of smallest |r|; only + - * / and sqrt, so the Python run of
    a small input gives the compiled bits.
    """
    n = x.shape[0]
    active = np.ones(n, np.bool_)
    dropped = np.empty(max(k, 0), np.int64)
    path = np.empty(max(k, 0) + 1, np.float64)
    m = n
    steps = 0
    while True:
        sx = 0.0
        sy = 0.0
        for i in range(n):
            if active[i]:
                sx += x[i]
                sy += y[i]
        mx = sx / m
        my = sy / m
        sxx = 0.0
        syy = 0.0
        sxy = 0.0
        for i in range(n):
            if active[i]:
                dx = x[i] - mx
                dy = y[i] - my
                sxx += dx * dx
                syy += dy * dy
                sxy += dx * dy
        path[steps] = sxy / math.sqrt(sxx * syy) if sxx > 0.0 and syy > 0.0 else math.nan
        if steps >= k:
            break
        best = -1
        best_value = math.inf
        for i in range(n):
            if active[i]:
                dx = x[i] - mx
                dy = y[i] - my
                vx = (m - 1) * sxx - m * dx * dx
                vy = (m - 1) * syy - m * dy * dy
                if vx > 0.0 and vy > 0.0:
                    value = abs(((m - 1) * sxy - m * dx * dy) / math.sqrt(vx * vy))
                    if value < best_value:
                        best_value = value
                        best = i
        if best < 0:
            break
        active[best] = False
        dropped[steps] = best
        m -= 1
        steps += 1
    return dropped, path, steps


def _rank_equivalent(ev: _Evidence) -> tuple[float, str]:
    rho_s = ev.est.get("spearman", math.nan)
    if math.isfinite(rho_s):
        return 2.0 * math.sin(math.pi * rho_s / 6.0), "spearman"
    tau = ev.est.get("kendall", math.nan)
    if math.isfinite(tau):
        return math.sin(math.pi * tau / 2.0), "kendall"
    return math.nan, ""


def marginals_normal_not_joint(marginal_p, joint_p: float | None, alpha: float) -> bool:
    """True when every marginal normality test keeps normality (p >= alpha) and Henze-Zirkler rejects it.

    The one rule for "normal marginals, yet not jointly normal"; the verdict's
    reasons and the pair page's caution both use it. ``None`` p-values count as
    not tested (False).
    """
    marginal_p = [math.nan if p is None else float(p) for p in marginal_p]
    joint = math.nan if joint_p is None else float(joint_p)
    return (bool(marginal_p) and all(math.isfinite(p) and p >= alpha for p in marginal_p)
            and math.isfinite(joint) and joint < alpha)


def _marginals_normal(ev: _Evidence) -> bool:
    return all(math.isfinite(p) and p >= ev.alpha for p in ev.marg_p)


def _may_be_significant(res: TestResult | None, alpha: float) -> bool:
    """Whether a measure could count as significant once adjusted: its p-value is below alpha.

    Benjamini-Hochberg, Holm and Bonferroni q-values are never below their
    p-values, and a missing q falls back to the p-value (:func:`_set_q`); the
    margin covers the rounding of the step-up products (measured: a BH q one
    ulp below its p).
    """
    return res is not None and math.isfinite(res.p_value) and res.p_value < alpha * (1.0 + 1e-9)


def _set_q(ev: _Evidence, results, q_values) -> None:
    for m, res in results.items():
        q = q_values.get(m) if q_values else None
        if q is not None and math.isfinite(float(q)):
            ev.q[m] = float(q)
        elif res is not None and math.isfinite(res.p_value):
            ev.q[m] = float(res.p_value)
            ev.q_from_p.append(m)
    for m, q in (q_values or {}).items():
        if m not in ev.q and q is not None and math.isfinite(float(q)):
            ev.q[m] = float(q)


def _dependence_may_count(results, alpha: float) -> bool:
    """Whether a dependence test (dcor, dcor_bc, xi) of ``results`` could end with q < alpha."""
    return any(_may_be_significant(results.get(m), alpha) for m in DEPENDENCE_MEASURES)


def _surely_backed(ev: _Evidence, results, tests: int | None) -> bool:
    """Whether a rank correlation backs r (rule 3's "backed") whatever the q-values turn out to be.

    Every adjustment pairlens offers (bh, holm, none) gives q <= min(1, p m) for a
    family of m tests, so a rank measure with p times an upper bound on m below
    alpha will have q < alpha.
    """
    if not tests or not (math.isfinite(ev.rank_equiv) and math.isfinite(ev.r)):
        return False
    if abs(ev.rank_equiv) < FEW_POINTS_SHRINK * abs(ev.r):
        return False
    return any(res is not None and res.p_value * tests < ev.alpha
               for m, res in results.items() if m in RANK_MEASURES)


def _gather_data(ev: _Evidence, x, y, results, fit, *, with_fit: bool, q_known: bool,
                 tests: int | None = None) -> _Evidence:
    """Everything the rules compare except significance: estimates, Gaussian gaps, influence (and the fit).

    Without the q-values (``q_known`` False: the engine's tiles, before they exist)
    only what the label's rules read is gathered: the dCor of the points left
    after dropping the k most influential ones is computed whenever |r|
    collapses, significant or not, so the label decided later from the q-values
    is the one :func:`classify_pair` gives; what only the reasons read (class
    codes, the Gaussian dCor of r, single-point influence) is skipped, and so
    are the estimates computed here when no dependence test can be significant
    (rule 5 is then out of reach and rules 3 and 6 read only tested rank
    correlations).
    """
    from . import distance, gaussian, rank

    xa = np.asarray(x, dtype=np.float64).ravel()
    ya = np.asarray(y, dtype=np.float64).ravel()
    keep = np.isfinite(xa) & np.isfinite(ya)
    if not keep.all():
        xa, ya = xa[keep], ya[keep]
    ev.n = n = int(xa.size)
    if n < config.MIN_ROWS:
        ev.degenerate = f"only {n} complete rows: nothing can be said about dependence"
        return ev
    for name, v in (("x", xa), ("y", ya)):
        if v.min() == v.max():
            ev.degenerate = f"{name} is constant: it cannot depend on anything"
            return ev
    if q_known:
        ev.class_codes = tuple((name, k) for name, k in (("x", class_code_levels(xa)),
                                                         ("y", class_code_levels(ya))) if k)
    for m, res in results.items():
        if res is not None and math.isfinite(res.estimate):
            ev.est[m] = float(res.estimate)

    # Estimates the rules compare, computed here when the panel lacks them.
    if "pearson" not in ev.est:
        ev.est["pearson"] = _r_from_sums(xa - xa.mean(), ya - ya.mean())
        ev.computed_here.append("pearson")
    rule5_possible = q_known or _dependence_may_count(results, ev.alpha)
    if rule5_possible and "spearman" not in ev.est and "kendall" not in ev.est:
        ev.est["spearman"] = rank.spearman_estimate(xa, ya)
        ev.computed_here.append("spearman")
    if rule5_possible and "dcor" not in ev.est:
        ev.est["dcor"] = distance.dcor_estimate(xa, ya)
        ev.computed_here.append("dcor")
    ev.rank_equiv, ev.rank_source = _rank_equivalent(ev)
    r = ev.r
    if math.isfinite(r):
        if q_known:  # read by the reasons only
            ev.dcor_implied = float(distance.gaussian_dcor(max(-1.0, min(1.0, r))))
        if rule5_possible:
            ref = max(abs(r), abs(ev.rank_equiv)) if math.isfinite(ev.rank_equiv) else abs(r)
            ev.dcor_ref_implied = float(distance.gaussian_dcor(min(1.0, ref)))

    ev.k = min(MAX_DROPPED, max(3, math.ceil(n / 100)), n // 10)
    if not q_known and not _may_be_significant(results.get("pearson"), ev.alpha):
        # Only the label is wanted and the influence rule (2) needs Pearson significant; an
        # adjusted q is never below its p-value, so with p >= alpha rule 2 cannot hold and the
        # O(k n) influence path (most of the label's cost at large n) is not needed.
        return ev
    if not q_known and _surely_backed(ev, results, tests):
        # Rule 3 also needs that no rank correlation backs r; here one will, so the path cannot
        # change the label (most dependent pairs of a wide table at a few hundred rows or more).
        return ev
    # Influence of single points and of the k most influential ones on r.
    if q_known:  # the single-point change is only ever read by the reasons
        loo = _loo_r(xa - xa.mean(), ya - ya.mean())
        if math.isfinite(r) and np.isfinite(loo).any():
            change = np.abs(loo - r)
            i = int(np.nanargmax(change))
            ev.loo_max_change, ev.loo_r_at_max = float(change[i]), float(loo[i])
    if ev.k >= 1 and math.isfinite(r):
        dropped, path = influence_on_r(xa, ya, ev.k)
        ev.r_drop = float(path[-1])
        if _r_shrinks(ev) and (not q_known or ev.sig("pearson")):
            rest = np.ones(n, dtype=bool)
            rest[dropped] = False
            # A follow-up question about a pair already found dependent, so
            # the unadjusted p-value of the remaining points answers it.
            left = distance.dcor(xa[rest], ya[rest])
            ev.dcor_drop, ev.dcor_drop_p = float(left.estimate), float(left.p_value)

    if with_fit:
        if fit is None:
            fit = gaussian.fit_gaussian(xa, ya)
        ev.marg_p = (fit.marginal_normality.get("x", TestResult(math.nan, math.nan, "")).p_value,
                     fit.marginal_normality.get("y", TestResult(math.nan, math.nan, "")).p_value)
        ev.hz_p = float(fit.normality.p_value)
    return ev


def _gather(x, y, results, q_values, alpha, fit) -> _Evidence:
    ev = _Evidence(alpha=alpha)
    _set_q(ev, results, q_values)
    return _gather_data(ev, x, y, results, fit, with_fit=True, q_known=True)


# -- rule predicates ----------------------------------------------------------

def _rule_degenerate(ev: _Evidence) -> bool:
    return bool(ev.degenerate)


def _r_shrinks(ev: _Evidence) -> bool:
    """Dropping the k most influential points halves |r| (and removes >= 0.10), significant or not."""
    r = ev.r
    if not (math.isfinite(r) and math.isfinite(ev.r_drop)):
        return False
    return abs(ev.r_drop) < FEW_POINTS_SHRINK * abs(r) and abs(r) - abs(ev.r_drop) >= FEW_POINTS_MIN_DROP


def _r_collapses(ev: _Evidence) -> bool:
    return bool(ev.sig("pearson")) and _r_shrinks(ev)


def _rule_few_points(ev: _Evidence) -> bool:
    r = ev.r
    collapses = _r_collapses(ev)
    backed = (ev.any_sig(RANK_MEASURES) and math.isfinite(ev.rank_equiv)
              and abs(ev.rank_equiv) >= FEW_POINTS_SHRINK * abs(r))
    survives = math.isfinite(ev.dcor_drop_p) and ev.dcor_drop_p < ev.alpha
    return collapses and not backed and not survives


def _rule_nothing(ev: _Evidence) -> bool:
    return not any(ev.sig(m) for m in ev.q)


def _rule_non_monotone(ev: _Evidence) -> bool:
    if not ev.any_sig(DEPENDENCE_MEASURES):
        return False
    if not ev.any_sig(TREND_MEASURES):
        return True
    d = ev.est.get("dcor", math.nan)
    return math.isfinite(d) and math.isfinite(ev.dcor_ref_implied) and d - ev.dcor_ref_implied > DCOR_EXCESS


def _rule_curved(ev: _Evidence) -> bool:
    gap, threshold = curvature_beyond_noise(ev.r, ev.rank_equiv, ev.rank_source, ev.n)
    return ev.any_sig(RANK_MEASURES) and math.isfinite(gap) and gap > threshold


def _rule_linear(ev: _Evidence) -> bool:
    return ev.any_sig(TREND_MEASURES)


def _rule_trending(ev: _Evidence) -> bool:
    return bool(ev.trending)


RULES: tuple[Rule, ...] = (
    Rule(1, "no evidence of dependence", "fewer than 3 complete rows or a constant column", _rule_degenerate),
    Rule(2, "not tested (trending)", "rows in time order and a side trends (augmented Dickey-Fuller): no "
         "verdict on levels", _rule_trending),
    Rule(3, "driven by a few points",
         "Pearson significant; dropping the k most influential points halves |r| (and removes >= 0.10); "
         "no rank correlation backs it; dCor of the remaining points not significant", _rule_few_points),
    Rule(4, "no evidence of dependence", "no tested measure has q < alpha", _rule_nothing),
    Rule(5, "non-monotone",
         "a dependence test (dcor, dcor_bc, xi) significant and either no trend test is, or dCor exceeds "
         "the Gaussian-implied dCor of max(|r|, rank-equivalent r) by more than 0.15", _rule_non_monotone),
    Rule(6, "monotone but curved", "a rank correlation significant and atanh|rank-equivalent r| exceeds "
         "atanh|r| by > 0.10 and by > 2.33 standard deviations of that gap under a Gaussian",
         _rule_curved),
    Rule(7, "linear", "a trend test (pearson, spearman, kendall) significant", _rule_linear),
)


# -- reasons ------------------------------------------------------------------

def _describe(ev: _Evidence, m: str) -> str:
    est = ev.est.get(m, math.nan)
    text = f"{_PRETTY.get(m, m)} = {_fmt(est)}"
    if m in ev.computed_here:
        return text + " (computed here, not tested)"
    q = ev.q.get(m)
    return text + (f" ({_fmt_q(q, 'p' if m in ev.q_from_p else 'q')})" if q is not None else " (not tested)")


def _trend_reasons(ev: _Evidence) -> list[str]:
    out = []
    r, req = ev.r, ev.rank_equiv
    rank_name = ev.rank_source or "spearman"
    pair = f"{_describe(ev, 'pearson')} and {_describe(ev, rank_name)}"
    if math.isfinite(r) and math.isfinite(req):
        gap, threshold = curvature_beyond_noise(r, req, rank_name, ev.n)
        if abs(gap) <= threshold:
            out.append(f"{pair} agree (a Gaussian with this r would give {_PRETTY[rank_name]} = "
                       f"{_fmt(_implied_rank(r, rank_name))})")
        elif abs(req) > abs(r):
            out.append(f"{pair}: the ranks are more strongly related than the values, as for a monotone curve "
                       f"(the rank correlation corresponds to r = {_fmt(req)} under a Gaussian)")
        else:
            out.append(f"{pair}: the values are more strongly related than their ranks "
                       f"(the rank correlation corresponds to r = {_fmt(req)} under a Gaussian)")
    else:
        out.append(pair)
    return out


def _implied_rank(r: float, name: str) -> float:
    if name == "kendall":
        return 2.0 / math.pi * math.asin(r)
    return 6.0 / math.pi * math.asin(r / 2.0)


def _dcor_reason(ev: _Evidence) -> str | None:
    d = ev.est.get("dcor", math.nan)
    if not (math.isfinite(d) and math.isfinite(ev.dcor_implied)):
        return None
    text = (f"{_describe(ev, 'dcor')}; a Gaussian with r = {_fmt(ev.r)} would give dCor = "
            f"{_fmt(ev.dcor_implied)}")
    if d - ev.dcor_ref_implied > DCOR_EXCESS:
        text += ", so the dependence is stronger than any straight-line or monotone summary shows"
    elif abs(d - ev.dcor_implied) <= CLOSE_DCOR:
        text += " (close)"
    return text


def _influence_reasons(ev: _Evidence, always: bool) -> list[str]:
    out = []
    if math.isfinite(ev.loo_max_change) and (always or ev.loo_max_change > 0.05):
        out.append(f"Dropping the single most influential point moves r from {_fmt(ev.r)} to "
                   f"{_fmt(ev.loo_r_at_max)}")
    if math.isfinite(ev.r_drop) and (always or abs(ev.r) - abs(ev.r_drop) >= FEW_POINTS_MIN_DROP):
        text = (f"Dropping the {ev.k} most influential points (of {ev.n}) moves r from {_fmt(ev.r)} to "
                f"{_fmt(ev.r_drop)}")
        if math.isfinite(ev.dcor_drop_p):
            text += (f"; without them dCor = {_fmt(ev.dcor_drop)} ({_fmt_q(ev.dcor_drop_p, 'p')}, unadjusted)")
        out.append(text)
    return out


def _normality_reasons(ev: _Evidence) -> list[str]:
    out = []
    r = ev.r
    d = ev.est.get("dcor", math.nan)
    dep = [m for m in DEPENDENCE_MEASURES if ev.sig(m)]
    # Under a Pearson t-test that assumes independence a dependent but
    # uncorrelated pair often shows a "significant" small r, so a weak r that
    # leaves most of the dCor unexplained counts as near 0 as well.
    near_zero = math.isfinite(r) and abs(r) < WEAK_R and (
        ev.sig("pearson") is not True
        or (math.isfinite(d) and math.isfinite(ev.dcor_implied) and d - ev.dcor_implied > DCOR_EXCESS))
    hz = _fmt_q(ev.hz_p, "p")
    if _marginals_normal(ev) and near_zero and dep:
        m = dep[0]
        size = "near 0" if abs(r) < NEAR_ZERO_R else "weak"
        head = f"Both marginals look normal and r = {_fmt(r)} is {size}, yet {_describe(ev, m)} shows dependence"
        if math.isfinite(ev.hz_p) and ev.hz_p < ev.alpha:
            out.append(f"{head}: the pair is not jointly normal (Henze-Zirkler {hz}), so zero correlation "
                       f"does not mean independence here")
        else:
            out.append(f"{head}: the pair cannot be jointly normal (although Henze-Zirkler, {hz}, does not "
                       f"reject it), so zero correlation does not mean independence here")
        return out
    if ev.class_codes:
        sides = " and ".join(f"{side} ({k} distinct whole numbers)" for side, k in ev.class_codes)
        head = f"Columns {sides} look like class codes" if len(ev.class_codes) == 2 else \
            f"Column {sides} looks like a class code"
        out.append(f"{head}, treated as numbers: the Gaussian "
                   f"picture (ellipses, conditional band, Gaussian-implied values) does not apply; read the rank "
                   f"and dependence measures, and compare the groups in the scatter")
        return out
    if math.isfinite(ev.hz_p):
        if ev.hz_p < ev.alpha:
            out.append(f"Henze-Zirkler rejects joint normality ({hz}): ellipses and the Gaussian band may mislead")
        else:
            out.append(f"Henze-Zirkler does not reject joint normality ({hz}): the Gaussian picture fits")
    return out


def _missing_reasons(ev: _Evidence, label: str) -> list[str]:
    out = []
    if ev.q_from_p:
        out.append("No q-value for " + ", ".join(ev.q_from_p) + ": unadjusted p-values used")
    untested_dep = [m for m in ("dcor", "xi") if ev.q.get(m) is None]
    untested_rank = [m for m in RANK_MEASURES if ev.q.get(m) is None]
    if label in ("no evidence of dependence", "linear", "monotone but curved") and len(untested_dep) == 2:
        out.append("No dependence test (dcor, xi) was run, so a non-monotone dependence could go unseen")
    if label in ("no evidence of dependence", "linear") and len(untested_rank) == len(RANK_MEASURES):
        out.append("No rank correlation was tested, so a monotone curve cannot be told from a line")
    return out


def _reasons(rule: Rule, ev: _Evidence) -> list[str]:
    if rule.number == 1:
        return [ev.degenerate]
    label = rule.label
    if label == "not tested (trending)":
        from .serial import trending_reason

        # the estimates stay visible in the table; no sentence here reads them as evidence either way
        return ["Not tested: " + trending_reason(ev.trending),
                "Neither dependence nor independence is claimed on levels alone (Yule 1926; Granger & "
                "Newbold 1974); the differences of the two series can be tested"]
    out: list[str] = []
    if label == "driven by a few points":
        out += _influence_reasons(ev, always=True)
        out += _trend_reasons(ev)
        out.append("r rests on a handful of points; look at them before trusting it")
    elif label == "no evidence of dependence":
        tested = sorted(ev.q, key=lambda m: list(_PRETTY).index(m) if m in _PRETTY else 99)
        if tested:
            out.append("No measure is significant after adjustment: "
                       + "; ".join(_describe(ev, m) for m in tested))
        else:
            out.append("No measure was tested")
        d = ev.est.get("dcor", math.nan)
        if "dcor" in ev.computed_here and math.isfinite(d) and d - ev.dcor_implied > DCOR_EXCESS:
            out.append(f"dCor = {_fmt(d)} (computed here, not tested) is well above the {_fmt(ev.dcor_implied)} "
                       f"a Gaussian with r = {_fmt(ev.r)} implies; test dcor to check")
    elif label == "non-monotone":
        dep = [m for m in DEPENDENCE_MEASURES if ev.sig(m)]
        out.append("Dependence is significant: " + "; ".join(_describe(ev, m) for m in dep))
        best = min(ev.q[m] for m in dep)
        if not ev.any_sig(TREND_MEASURES) and best >= WEAK_EVIDENCE_FACTOR * ev.alpha:
            out.append(f"Weak evidence: the smallest q of a dependence test ({best:.3f}) is between "
                       f"{WEAK_EVIDENCE_FACTOR * ev.alpha:.3f} and {ev.alpha:.2f} and no trend backs it; "
                       f"look at the scatter before reading a shape into it")
        if not ev.any_sig(TREND_MEASURES):
            trend = ev.tested(TREND_MEASURES)
            out.append("but no trend is: " + ("; ".join(_describe(ev, m) for m in trend) if trend
                                               else "no trend measure was tested")
                       + ", so y rises and falls with x (or spreads with it)")
        dr = _dcor_reason(ev)
        if dr:
            out.append(dr)
    else:
        out += _trend_reasons(ev)
        dr = _dcor_reason(ev)
        if dr:
            out.append(dr)
        if label == "linear" and math.isfinite(ev.loo_max_change) and ev.loo_max_change <= 0.05:
            out.append(f"r is stable: no single point moves it by more than {_fmt(ev.loo_max_change)}")
        out += _influence_reasons(ev, always=False)
    out += _normality_reasons(ev)
    out += _missing_reasons(ev, label)
    return out


# -- public functions -------------------------------------------------------

def influence_on_r(x: np.ndarray, y: np.ndarray, k: int, *, method: str = "auto") -> tuple[np.ndarray, np.ndarray]:
    """Greedily drop the k points whose removal shrinks |r| most.

    Parameters
    ----------
    x, y : array_like, 1-D, complete
    k : int
        Number of points to drop (at most n - 3).
    method : {"auto", "compiled", "numpy"}
        ``"compiled"`` (what ``"auto"`` uses): one compiled pass over the rows
        per step; ``"numpy"``: array operations per step, kept as the test
        oracle (the same points; r to rounding, as the sums' order differs).

    Returns
    -------
    dropped : ndarray of int, shape (k,)
        Indices of the dropped points, in the order they were chosen.
    r_path : ndarray, shape (k + 1,)
        r on all points, then after each removal.

    Notes
    -----
    Each step evaluates all leave-one-out correlations at once in O(n) (see
    ``_loo_r``), so the whole path costs O(k n). Greedy removal matters when
    outliers sit together: one of three far points hardly moves r while the
    other two remain, but the path removes them one after the other.

    References
    ----------
    Belsley, Kuh & Welsch (1980) Regression Diagnostics, ch. 2 (deletion
    diagnostics); common practice for the greedy multi-point version.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x, y = rng.normal(size=200), rng.normal(size=200)
    >>> x[:3] = y[:3] = [10.0, 11.0, 12.0]
    >>> dropped, path = influence_on_r(x, y, 3)
    >>> sorted(dropped.tolist()), bool(path[0] > 0.5 > abs(path[-1]))
    ([0, 1, 2], True)
    """
    xa = np.asarray(x, dtype=np.float64).ravel()
    ya = np.asarray(y, dtype=np.float64).ravel()
    n = xa.size
    k = int(max(0, min(k, n - 3)))
    if method in ("auto", "compiled"):
        dropped_rows, r_path, steps = _influence_kernel(np.ascontiguousarray(xa), np.ascontiguousarray(ya), k)
        return dropped_rows[:steps].copy(), r_path[:steps + 1].copy()
    if method != "numpy":
        raise ValueError(f"unknown method {method!r}; choose 'auto', 'compiled' or 'numpy'")
    active = np.arange(n)
    dropped = []
    dx, dy = xa - xa.mean(), ya - ya.mean()
    path = [_r_from_sums(dx, dy)]
    for _ in range(k):
        # dx, dy are centred over the active points (xa[active] equals xa at the first step)
        loo = np.abs(_loo_r(dx, dy))
        if not np.isfinite(loo).any():
            break
        j = int(np.nanargmin(loo))
        dropped.append(int(active[j]))
        active = np.delete(active, j)
        xs, ys = xa[active], ya[active]
        dx, dy = xs - xs.mean(), ys - ys.mean()
        path.append(_r_from_sums(dx, dy))
    return np.asarray(dropped, dtype=np.int64), np.asarray(path)


def rank_rank(x: np.ndarray, y: np.ndarray, *, scale: str = "unit") -> tuple[np.ndarray, np.ndarray]:
    """Rank-rank transform of a pair for the pair view.

    scale "unit": midranks / (n + 1), in (0, 1) (the empirical copula);
    "normal": the standard normal quantiles of those (normal scores), where a
    Gaussian copula looks like an ordinary Gaussian cloud.

    Examples
    --------
    >>> u, v = rank_rank(np.array([3., 1., 2.]), np.array([1., 1., 5.]))
    >>> u.tolist(), v.tolist()
    ([0.75, 0.25, 0.5], [0.375, 0.375, 0.75])
    """
    from scipy.special import ndtri

    from .rank import midranks

    xa = np.asarray(x, dtype=np.float64).ravel()
    ya = np.asarray(y, dtype=np.float64).ravel()
    n = xa.size
    u = midranks(xa) / (n + 1.0)
    v = midranks(ya) / (n + 1.0)
    if scale == "unit":
        return u, v
    if scale == "normal":
        return ndtri(u), ndtri(v)
    raise ValueError(f"unknown scale {scale!r}; choose 'unit' or 'normal'")


def class_code_levels(values: np.ndarray) -> int:
    """Number of distinct codes when ``values`` look like a class code, else 0.

    A class code is a column of whole numbers with at most
    :data:`config.CLASS_CODE_MAX_LEVELS` distinct values and either only two of them
    (0/1) or at least :data:`config.CLASS_CODE_MIN_ROWS` rows (1..3 over many rows).
    Such a column is analysed as a number, but a bivariate Gaussian cannot describe it.

    Examples
    --------
    >>> class_code_levels(np.array([0.0, 1.0, 1.0, 0.0])), class_code_levels(np.array([0.5, 1.0, 2.0]))
    (2, 0)
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    v = v[np.isfinite(v)]
    if v.size == 0 or not np.all(v == np.round(v)):
        return 0
    levels = int(np.unique(v).size)
    if levels == 2 or (2 < levels <= config.CLASS_CODE_MAX_LEVELS and v.size >= config.CLASS_CODE_MIN_ROWS):
        return levels
    return 0


def classify_pair(x: np.ndarray, y: np.ndarray, results: dict[str, TestResult],
                  q_values: dict[str, float], *, alpha: float = 0.05, fit=None,
                  trending: tuple[str, ...] = ()) -> Pattern:
    """Combine adjusted significance, estimates, Gaussian gaps and influence into a label.

    Parameters
    ----------
    x, y : array_like, 1-D
        The pair (rows with NaN are dropped).
    results : dict
        Measure name -> TestResult, any subset of pearson, spearman, kendall,
        dcor, dcor_bc, xi (xi in the direction x -> y).
    q_values : dict
        Measure name -> q-value adjusted over the analysis (for a single pair
        the p-value itself).
    alpha : float
        Level at which a q-value counts as significant.
    fit : GaussianFit, optional
        The pair's Gaussian fit if already computed (saves the Henze-Zirkler
        test); computed here otherwise.
    trending : tuple of str
        Names of the sides found trending when the rows are in time order
        (``--ordered``); any gives "not tested (trending)" (rule 2).

    Returns
    -------
    Pattern
        ``label`` from :data:`LABELS`, ``reasons`` in plain words, the rule
        number and the evidence used.

    Notes
    -----
    The rules are those of :data:`RULES` (table in the module docstring),
    tried in order.

    References
    ----------
    Szekely, Rizzo & Bakirov (2007) doi:10.1214/009053607000000505 (Gaussian
    dCor); Kendall (1948) Rank Correlation Methods (rank correlations of the
    normal); Henze & Zirkler (1990) doi:10.1080/03610929008830400.

    Examples
    --------
    >>> from pairlens.core import linear, rank
    >>> rng = np.random.default_rng(1)
    >>> x = rng.normal(size=300)
    >>> y = 2 * x + rng.normal(size=300)
    >>> res = {"pearson": linear.pearson(x, y), "spearman": rank.spearman(x, y)}
    >>> classify_pair(x, y, res, {m: r.p_value for m, r in res.items()}).label
    'linear'
    """
    ev = _gather(x, y, results or {}, q_values or {}, float(alpha), fit)
    ev.trending = tuple(trending)
    for rule in RULES:
        if rule.holds(ev):
            break
    evidence = {
        "n": float(ev.n), "r": ev.r, "rank_equivalent_r": ev.rank_equiv,
        "dcor": ev.est.get("dcor", math.nan), "dcor_gaussian": ev.dcor_implied,
        "loo_max_change": ev.loo_max_change, "k_dropped": float(ev.k), "r_after_drop": ev.r_drop,
        "dcor_after_drop": ev.dcor_drop, "dcor_after_drop_p": ev.dcor_drop_p,
        "hz_p": ev.hz_p, "x_normality_p": ev.marg_p[0], "y_normality_p": ev.marg_p[1],
    }
    return Pattern(rule.label, tuple(_reasons(rule, ev)), rule.number, evidence)


@dataclass
class LabelEvidence:
    """What a pair's verdict label needs besides its q-values, gathered where the pair's rows are.

    Built by :func:`label_evidence` inside the engine's tiles (O(n log n) per
    pair at most, no Gaussian fit: the label's rules do not read the normality
    tests, only the reasons do); finished by :func:`label_from_evidence` once
    the analysis's q-values exist.
    """

    evidence: _Evidence
    results: dict


def label_evidence(x: np.ndarray, y: np.ndarray, results: dict[str, TestResult], *,
                   alpha: float = 0.05, tests: int | None = None) -> LabelEvidence:
    """The q-independent part of :func:`classify_pair` for one pair (no Gaussian fit).

    Parameters
    ----------
    x, y : array_like, 1-D
        The rows the pair's measures used.
    results : dict
        Measure name -> TestResult as in :func:`classify_pair`.
    alpha : float
        Level at which a q-value counts as significant.
    tests : int, optional
        An upper bound on the number of tests in any measure's adjustment
        family. With it, a pair whose rank correlation will surely be
        significant and backs r skips the influence path, which can then not
        change the label (rule 3).

    Returns
    -------
    LabelEvidence
        Without a p-value below ``alpha`` nothing is gathered: the label can
        only be "no evidence of dependence".
    """
    results = dict(results or {})
    if not any(_may_be_significant(res, float(alpha)) for res in results.values()):
        # No q-value can fall below alpha (q >= p for every adjustment), so rule 4 or rule 1 gives
        # "no evidence of dependence" whatever the data: nothing to gather (most pairs of a wide table).
        return LabelEvidence(_Evidence(alpha=float(alpha), degenerate="no measure has p < alpha"), results)
    ev = _gather_data(_Evidence(alpha=float(alpha)), x, y, results, None, with_fit=False, q_known=False,
                      tests=tests)
    return LabelEvidence(ev, results)


def label_from_evidence(gathered: LabelEvidence, q_values: dict[str, float],
                        trending: tuple[str, ...] = ()) -> str:
    """The label :func:`classify_pair` gives, from :func:`label_evidence` and the q-values
    (``trending`` as there).

    Only the q-values of measures that had a result in :func:`label_evidence`
    are read: the evidence was gathered for those (a dependence test's q-value
    arriving without its result would need estimates that were not computed).

    Examples
    --------
    >>> from pairlens.core import linear, rank
    >>> rng = np.random.default_rng(1)
    >>> x = rng.normal(size=300)
    >>> y = 2 * x + rng.normal(size=300)
    >>> res = {"pearson": linear.pearson(x, y), "spearman": rank.spearman(x, y)}
    >>> q = {m: r.p_value for m, r in res.items()}
    >>> label_from_evidence(label_evidence(x, y, res), q) == classify_pair(x, y, res, q).label
    True
    """
    if trending:
        return RULES[1].label
    if not isinstance(gathered, LabelEvidence):  # a pair with a categorical side (core.verdict_categorical)
        return gathered.label(q_values or {})
    # a shallow copy with fresh q fields: what dataclasses.replace gives, at a third of its cost
    # (it runs once per pair of a wide table, in the engine's process)
    ev = copy.copy(gathered.evidence)
    ev.q, ev.q_from_p, ev.trending = {}, [], tuple(trending)
    _set_q(ev, gathered.results, {m: q for m, q in (q_values or {}).items() if m in gathered.results})
    for rule in RULES:
        if rule.holds(ev):
            return rule.label
    return RULES[-1].label


def settled_label(gathered: LabelEvidence, tests: int | None) -> str | None:
    """The label of :func:`label_from_evidence` when no q-values can change it, else None.

    The rules read a q-value only through q < alpha. With at most ``tests``
    tests in a measure's adjustment family, every adjustment pairlens offers
    gives p <= q <= p ``tests`` (bh, holm, none; a BH q can sit one ulp below
    its p, hence the margin of :func:`_may_be_significant`). So when each
    measure's p-value is either not below alpha or below alpha / ``tests``,
    the label from the p-values is the label from any q-values the analysis
    can give, and it can be decided before they exist (in the engine's
    tiles, in parallel). Groups and categorical pairs are left to
    :func:`label_from_evidence`.

    Examples
    --------
    >>> from pairlens.core import linear, rank
    >>> rng = np.random.default_rng(2)
    >>> x = rng.normal(size=400)
    >>> y = x + rng.normal(size=400)
    >>> res = {"pearson": linear.pearson(x, y), "spearman": rank.spearman(x, y)}
    >>> settled_label(label_evidence(x, y, res, tests=1000), tests=1000)
    'linear'
    """
    if not tests or not isinstance(gathered, LabelEvidence):
        return None
    alpha = gathered.evidence.alpha
    for res in gathered.results.values():
        if res is None or not math.isfinite(res.p_value) or not _may_be_significant(res, alpha):
            continue
        if not res.p_value * tests * (1.0 + 1e-9) < alpha:
            return None
    return label_from_evidence(gathered, {})
