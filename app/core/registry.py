"""The registry of association measures and their properties.

Pages, reports, the CLI and the tests iterate over :data:`MEASURES` instead of
hard-coding names. Adding a measure means one kernel, one entry here and its
reference tests.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace as replace_fields
from typing import Callable

import numpy as np
from scipy import special

from . import allpairs, categorical, chatterjee, distance, linear, partial, rank, serial
from .. import config
from .results import TestResult
from .testing import all_pairings, attainable_minimum, floor_pvalue, permutation_floor

__all__ = ["PairContext", "Measure", "MEASURES", "PARTIAL_MEASURES", "partial_of", "KINDS", "pair_kind",
           "measures_for", "get_measure", "measure_names", "parse_tests", "pvalue_floor", "presorted_floored",
           "register", "unregister"]


class _SeedOnFirstRead:
    """The data descriptor behind ``PairContext.seed`` (a dataclass descriptor-typed field).

    It holds a ``SeedSequence``, None, or a zero-argument callable that makes the
    sequence the first time ``seed`` is read. Most default tests draw nothing,
    and making a pair's sequence (a hash of its names) costs about a tenth of a
    presorted pair's work on a wide table.
    """

    def __set_name__(self, owner, name) -> None:
        self._slot = "_" + name

    def __get__(self, obj, objtype=None):
        if obj is None:
            return None                      # the field's default
        value = obj.__dict__[self._slot]
        if callable(value):
            value = obj.__dict__[self._slot] = value()
        return value

    def __set__(self, obj, value) -> None:
        obj.__dict__[self._slot] = value


@dataclass(frozen=True)
class PairContext:
    """What a measure needs besides the data: level, resamples and the pair's seed.

    ``seed`` may be given as a callable returning the ``SeedSequence``; it is
    then called only if a measure reads the seed.
    """

    confidence: float = 0.95
    permutations: int = 0
    seed: np.random.SeedSequence | None = _SeedOnFirstRead()
    test: str = ""          # a method from the measure's ``tests``; "" = its default rule
    kinds: tuple[str, str] = ("numeric", "numeric")   # column kinds of x and y (pairlens.kinds)
    # --given: the conditioning columns on the pair's rows (n, q) and which of them are class codes
    given: np.ndarray | None = None
    given_indicator: tuple[bool, ...] = ()


KINDS: tuple[str, ...] = ("numeric", "categorical")
_NUMERIC_PAIR = ("numeric x numeric",)
_ANY_PAIR = ("numeric x numeric", "categorical x numeric", "categorical x categorical")


def pair_kind(kx: str, ky: str) -> str:
    """The kind of a pair, independent of order: "numeric x numeric", "categorical x numeric", ..."""
    a, b = sorted((kx, ky))
    return f"{a} x {b}"


def _resamples(ctx: PairContext, default_test: str) -> int:
    """Resamples for measures whose methods are a closed form (``default_test``) or "permutation"."""
    from ..config import DEFAULT_TEST_PERMUTATIONS

    if ctx.test == "permutation":
        return ctx.permutations or DEFAULT_TEST_PERMUTATIONS
    if ctx.test == default_test:
        return 0
    return ctx.permutations


@dataclass(frozen=True)
class Measure:
    name: str
    label: str
    family: str
    symmetric: bool
    signed: bool
    lower: float
    upper: float
    multivariate: bool          # accepts column groups (2-D arrays)
    reflection: str             # effect of x -> -x: "flips sign" or "unchanged"
    default_test: str
    tests: tuple[str, ...]      # methods --test MEASURE=METHOD can choose; the first is the default
    interval: str               # "" where no interval is defined
    formula: str
    reference: str
    compute: Callable[[np.ndarray, np.ndarray, PairContext], TestResult]
    # The default test's statistic for every pairing of the rows (x, y, pairings of shape
    # (n!, n)), larger meaning more extreme: gives the exact floor of tiny samples' p-values.
    pairing_statistics: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray] | None = None
    # What the verdict reads: "trend" (a monotone or linear trend test), "rank" (a rank
    # correlation, also a trend test) or "dependence" (any dependence); "" takes no part.
    role: str = ""
    # The name in running text (verdict reasons): "Pearson r", "ξ(x → y)".
    short_label: str = ""
    # The measure's value under a bivariate normal with correlation rho; None when unknown.
    implied: Callable[[float], float] | None = None
    # The test when the rows are in time order (--ordered): (x, y, ctx, result on independent rows)
    # -> result; None keeps the independent-rows test. See pairlens.core.serial.
    serial: Callable[[np.ndarray, np.ndarray, PairContext, TestResult], TestResult] | None = None
    serial_test: str = ""       # its description for the methods page and report
    serial_resamples: bool = False  # the serial test draws relabellings (counted in the work estimate)
    # The engine's fast path: the measure from a pair's presorted columns, (pair, ctx) -> result, or
    # None when this pair needs ``compute`` on its rows. ``presorted_needs`` names the parts of
    # allpairs.pair_work it reads: "rank_sums", "kendall_counts", "distance".
    presorted: Callable[["allpairs.PresortedPair", PairContext], TestResult | None] | None = None
    presorted_needs: frozenset[str] = frozenset()
    # The kinds of pairs the measure applies to (pair_kind); the engine runs it on those only.
    kinds: tuple[str, ...] = _NUMERIC_PAIR

    def applies_to(self, kx: str, ky: str) -> bool:
        return pair_kind(kx, ky) in self.kinds
    # --given: the name of the entry of PARTIAL_MEASURES that measures this one given other columns ("" = none)
    partial: str = ""
    # an entry of PARTIAL_MEASURES: the unconditional measure it is set beside ("" for the others)
    partial_for: str = ""
    # The report's disagreement map "this measure minus another": (other measure, "signed" when
    # this one is unsigned and the other's magnitude is subtracted, "absolute" for |a| - |b|,
    # what its largest values mean). Empty: no such map.
    contrast: tuple[str, str, str] = ()
    # The methods page's paragraph on this measure's p-value, given the analysis's number of
    # permutations ("" when it has nothing to add then), and the references that paragraph cites.
    pvalue_note: Callable[[int], str] | None = None
    pvalue_references: tuple[str, ...] = ()


def _pearson(x, y, ctx: PairContext) -> TestResult:
    return linear.pearson(x, y, confidence=ctx.confidence, permutations=ctx.permutations, seed=ctx.seed,
                          test=ctx.test or None)


def _spearman(x, y, ctx: PairContext) -> TestResult:
    return rank.spearman(x, y, confidence=ctx.confidence, seed=ctx.seed)


def _kendall(x, y, ctx: PairContext) -> TestResult:
    return rank.kendall(x, y, confidence=ctx.confidence)


def _dcor(x, y, ctx: PairContext) -> TestResult:
    return distance.dcor(x, y, permutations=_resamples(ctx, "gamma"), seed=ctx.seed)


def _dcor_bc(x, y, ctx: PairContext) -> TestResult:
    return distance.dcor_bc(x, y, permutations=_resamples(ctx, "gamma"), seed=ctx.seed)


def _discrete(codes: np.ndarray) -> np.ndarray:
    # two levels as one 0/1 column: the same discrete metric, and the fast univariate distance path
    e = categorical.discrete_embedding(codes)
    return e[:, 0] if e.shape[1] == 2 else e


def _embedded(compute):
    """Categorical sides as points under the discrete metric (:func:`categorical.discrete_embedding`)."""
    def run(x, y, ctx: PairContext) -> TestResult:
        if "categorical" in ctx.kinds:
            x, y = _complete(x, y)
            x = _discrete(x) if ctx.kinds[0] == "categorical" else x
            y = _discrete(y) if ctx.kinds[1] == "categorical" else y
        return compute(x, y, ctx)
    run.__name__ = compute.__name__
    run.__doc__ = compute.__doc__
    return run


def _cramer_v(x, y, ctx: PairContext) -> TestResult:
    return categorical.cramers_v(x, y, permutations=ctx.permutations, seed=ctx.seed, test=ctx.test)


def _eta(x, y, ctx: PairContext) -> TestResult:
    return categorical.eta(x, y, ctx.kinds)


def _kruskal(x, y, ctx: PairContext) -> TestResult:
    return categorical.kruskal_eta(x, y, ctx.kinds, permutations=ctx.permutations, seed=ctx.seed)


def _xi(x, y, ctx: PairContext) -> TestResult:
    return chatterjee.xi(x, y, permutations=_resamples(ctx, "normal"), seed=ctx.seed)


# -- presorted forms (the engine's fast path): each ends with the function its measure's own
# compute ends with, on the same numbers, so the result is the per-pair result.

def _pearson_presorted(pair: "allpairs.PresortedPair", ctx: PairContext) -> TestResult | None:
    if linear.resolved_test(ctx.test, ctx.permutations) == "permutation":
        return None  # resamples: the per-pair path draws them
    return linear.pearson_screened(pair.x, pair.y, confidence=ctx.confidence, test=ctx.test or None)


def _spearman_presorted(pair: "allpairs.PresortedPair", ctx: PairContext) -> TestResult | None:
    sums = pair.rank_sums
    if rank.spearman_needs_rows(sums[1], sums[2], pair.n):
        return None  # a small tied pair: its permutation test needs the rows
    return rank.spearman_from_sums(sums[0], sums[1], sums[2], pair.n, confidence=ctx.confidence)


def _kendall_presorted(pair: "allpairs.PresortedPair", ctx: PairContext) -> TestResult | None:
    d, tx, ty, txy, x3, x5, y3, y5 = pair.kendall_counts
    if d < 0:  # counted with the distance cross sum
        d = pair.distance_statistics().discordant
    counts = rank.KendallCounts(pair.n, int(d), int(tx), int(ty), int(txy), float(x3), float(x5),
                                float(y3), float(y5))
    return rank.kendall_from_counts(counts, confidence=ctx.confidence)


def _distance_presorted(finish):
    def run(pair: "allpairs.PresortedPair", ctx: PairContext) -> TestResult | None:
        if pair.n < 4:
            return None
        resamples = _resamples(ctx, "gamma")
        # the seed only drives resamples; without them it is not drawn from
        return finish(pair.distance_statistics(), permutations=resamples, seed=ctx.seed if resamples else None)
    return run


def _xi_presorted(pair: "allpairs.PresortedPair", ctx: PairContext) -> TestResult | None:
    order = allpairs.xi_order(pair.x, pair.x_order, lambda: chatterjee.xi_tie_keys(ctx.seed, pair.n))
    r, l = allpairs.rank_counts(pair.y, pair.y_order)
    return chatterjee.xi_from_order(order, r, l, permutations=_resamples(ctx, "normal"), seed=ctx.seed)


def _centred(v: np.ndarray) -> np.ndarray:
    return v - v.mean()


def _pearson_pairings(x, y, pairings):
    return np.abs(_centred(y)[pairings] @ _centred(x))


def _spearman_pairings(x, y, pairings):
    return np.abs(_centred(rank.midranks(y))[pairings] @ _centred(rank.midranks(x)))


def _kendall_pairings(x, y, pairings):
    # the numerator C - D of tau-b; its denominator does not change under pairings
    sx = np.sign(x[:, None] - x[None, :])
    sy = np.sign(y[:, None] - y[None, :])
    return np.abs(np.einsum("ij,mij->m", sx, sy[pairings[:, :, None], pairings[:, None, :]]))


def _distances(v: np.ndarray) -> np.ndarray:
    v = v.reshape(v.shape[0], -1)
    return np.sqrt(((v[:, None, :] - v[None, :, :]) ** 2).sum(axis=2))


def _double_centred(d: np.ndarray) -> np.ndarray:
    return d - d.mean(axis=0) - d.mean(axis=1)[:, None] + d.mean()


def _u_centred(d: np.ndarray) -> np.ndarray:
    n = d.shape[0]
    out = d - d.sum(axis=0) / (n - 2) - d.sum(axis=1)[:, None] / (n - 2) + d.sum() / ((n - 1) * (n - 2))
    np.fill_diagonal(out, 0.0)
    return out


def _cross(a: np.ndarray, b: np.ndarray, pairings: np.ndarray) -> np.ndarray:
    # centring commutes with relabelling the rows, so each pairing only permutes b
    if b.shape[0] > 16:
        # long rows (the block permutation test of --ordered): a compiled gather per cell, no relabelled
        # copy; about 2x NumPy's take-then-einsum per relabelling at n = 100-1,500 (benchmarks/README.md)
        return distance._relabelled_cross(np.ascontiguousarray(a, dtype=np.float64),
                                          np.ascontiguousarray(b, dtype=np.float64),
                                          np.ascontiguousarray(pairings, dtype=np.int64))
    # few rows (every pairing of a tiny table): a gather of (m, n, n) cells, in chunks of at most
    # _GATHER_CELLS so that many pairings stay within a few tens of MB
    step = max(1, _GATHER_CELLS // (b.shape[0] * b.shape[0]))
    return np.concatenate([np.einsum("ij,mij->m", a, b[part[:, :, None], part[:, None, :]])
                           for part in (pairings[i: i + step] for i in range(0, pairings.shape[0], step))])


_GATHER_CELLS = 4_000_000


def _dcor_pairings(x, y, pairings):
    return _cross(_double_centred(_distances(x)), _double_centred(_distances(y)), pairings)


def _dcor_bc_pairings(x, y, pairings):
    if x.shape[0] < 4:
        return None
    return _cross(_u_centred(_distances(x)), _u_centred(_distances(y)), pairings)


def _xi_pairings(x, y, pairings):
    # minus sum |r_(i+1) - r_i| over rows in x order (ties by row); its denominator is fixed
    order = np.argsort(x, kind="stable")
    r = np.searchsorted(np.sort(y), y, side="right")
    return -np.abs(np.diff(r[pairings][:, order], axis=1)).sum(axis=1)


def pvalue_floor(measure: "Measure", x: np.ndarray, y: np.ndarray) -> float:
    """The smallest p-value the permutation law of ``measure`` on these complete rows allows.

    Parameters
    ----------
    measure : Measure
        A registry entry.
    x, y : numpy.ndarray
        The pair's complete rows (1-D, or 2-D for column groups).

    Returns
    -------
    float
        Up to :data:`pairlens.config.PVALUE_FLOOR_ENUMERATE_MAX_N` rows the exact
        minimum: the share of the n! pairings at the most extreme value of the
        entry's ``pairing_statistics``. Above it, up to
        :data:`pairlens.config.PVALUE_FLOOR_MAX_N` rows, the bound K/n! of
        :func:`pairlens.core.testing.permutation_floor`; beyond, 0.

    Examples
    --------
    >>> pvalue_floor(MEASURES["pearson"], np.arange(3.0), np.array([1.0, 8.0, 27.0]))  # x symmetric: 2/3!
    0.3333333333333333
    """
    n = int(np.shape(x)[0])
    if n < 2 or n > config.PVALUE_FLOOR_MAX_N:
        return 0.0
    if n <= config.PVALUE_FLOOR_ENUMERATE_MAX_N and measure.pairing_statistics is not None:
        values = measure.pairing_statistics(np.asarray(x, float), np.asarray(y, float), all_pairings(n))
        if values is not None:
            return attainable_minimum(values)
    return permutation_floor(x, y)


def presorted_pvalue_floor(measure: "Measure", pair: "allpairs.PresortedPair") -> float:
    """:func:`pvalue_floor` of a presorted pair; the same value, without grouping the rows when untied.

    Between the enumerated sizes and :data:`pairlens.config.PVALUE_FLOOR_MAX_N`
    rows a pair with no ties in either column has K = 1, so the floor is
    1/n! (:func:`pairlens.core.testing.permutation_floor` computes
    exp(0 - ln n!), the same bits); the ties are read off the sorted orders in
    O(n) instead of two ``np.unique`` calls.
    """
    n = pair.n
    if config.PVALUE_FLOOR_ENUMERATE_MAX_N < n <= config.PVALUE_FLOOR_MAX_N and pair.untied():
        return float(math.exp(0.0 - special.gammaln(n + 1.0)))
    return pvalue_floor(measure, pair.x, pair.y)


def presorted_floored(measure: "Measure", pair: "allpairs.PresortedPair", result: TestResult) -> TestResult:
    """``floor_pvalue(result, presorted_pvalue_floor(measure, pair))``: the same result, the floor
    computed only when it could raise the p-value.

    Above the enumerated sizes the floor is K/n!, and K is at most the product
    of c! over the tie runs of both columns
    (:meth:`pairlens.core.allpairs.PresortedPair.tie_log_factorials`). When that
    bound is already at most p (or underflows to 0, as at 1,000 rows with a few
    ties), the floor cannot raise p, and a tied pair's grouping of its rows is
    skipped.
    """
    p, n = result.p_value, pair.n
    if p == p and config.PVALUE_FLOOR_ENUMERATE_MAX_N < n <= config.PVALUE_FLOOR_MAX_N:
        # the margin covers the rounding of the log sums (about 1e-12 relative on values near ln n!)
        log_bound = pair.tie_log_factorials() - float(special.gammaln(n + 1.0)) + 1e-6
        if log_bound < 0.0 and math.exp(log_bound) <= p:
            return result
    return floor_pvalue(result, presorted_pvalue_floor(measure, pair))


def _floored(compute: Callable[[np.ndarray, np.ndarray, PairContext], TestResult], name: str):
    """Every default p-value at least the smallest its permutation law allows (:func:`pvalue_floor`)."""
    def run(x, y, ctx: PairContext) -> TestResult:
        res = compute(x, y, ctx)
        if not res.p_value == res.p_value:  # NaN: nothing to raise
            return res
        return floor_pvalue(res, pvalue_floor(MEASURES[name], *_complete(x, y)))
    run.__name__ = compute.__name__
    run.__doc__ = compute.__doc__
    return run


def _serial_ess(kind: str):
    """Rows in time order: the effective-sample-size test of :func:`pairlens.core.serial.ess_test`."""
    def run(x, y, ctx: PairContext, base: TestResult) -> TestResult:
        return serial.ess_test(x, y, kind, base, confidence=ctx.confidence)
    return run


def _serial_block(name: str):
    """Rows in time order: :func:`pairlens.core.serial.block_permutation_test` on the entry's statistic.

    Up to ``config.SERIAL_MATRIX_MAX_N`` rows the entry's ``pairing_statistics`` (vectorised over
    relabellings, n x n cells each); beyond, the measure's own O(n log n) estimate per relabelling.
    """
    def by_estimate(x, y, orders):
        plain = PairContext()
        return np.array([MEASURES[name].compute(x, y[o], plain).estimate for o in orders])

    def run(x, y, ctx: PairContext, base: TestResult) -> TestResult:
        n = int(np.shape(x)[0])
        statistic = MEASURES[name].pairing_statistics if n <= config.SERIAL_MATRIX_MAX_N else by_estimate
        return serial.block_permutation_test(x, y, statistic, base,
                                             permutations=ctx.permutations or config.SERIAL_PERMUTATIONS,
                                             seed=ctx.seed, block_factor=config.SERIAL_BLOCK_FACTOR)
    return run


_ESS_TEXT = ("effective rows n* from the autocorrelations of both series (Bartlett 1935; sum to lag n/5, "
             "Pyper & Peterman 1998), {law}; interval with n* rows")
_BLOCK_TEXT = ("block permutation: y rotated and cut into blocks of twice the Politis-White (2004) length, "
               "blocks shuffled, 499 relabellings")


def _complete(x, y):
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    keep = ~(np.isnan(x) if x.ndim == 1 else np.isnan(x).any(axis=1))
    keep &= ~(np.isnan(y) if y.ndim == 1 else np.isnan(y).any(axis=1))
    return x[keep], y[keep]


# The methods page's paragraphs on a measure's p-value (Measure.pvalue_note).
# Measured in tests/core/test_levels_classic.py (t-test) and tests/core/test_levels_pearson.py (the default),
# 10,000 replicates per cell.
_PEARSON_DEFAULT_NOTE = (
    "Pearson's default p-value approximates the permutation law of r (Pitman 1937) from its exact first "
    "four moments with a Pearson curve, without resamples (all relabellings are enumerated up to 7 rows; "
    "small or lumpy samples are split by where their most extreme value lands). It holds its level on "
    "normal, skewed, heavy-tailed and integer-score margins. The t-test (--test pearson=t, as "
    "scipy.stats.pearsonr) is exact when at least one of the two variables is normal, but when both are "
    "skewed or heavy-tailed it rejects too often: in our simulations of independent exponential, t(3) "
    "and lognormal pairs, 1.2-2.4% of its p-values fell below 0.01.")


_BEST_ROBERTS = ("Best, D.J. & Roberts, D.E. (1975). Algorithm AS 89: the upper tail probabilities of "
                 "Spearman's rho. Applied Statistics 24:377-379. doi:10.2307/2347111")

_SPEARMAN_SMALL_N_NOTE = (
    "Spearman's rho is referred to its permutation law: every pairing of the y ranks with the x ranks is "
    f"equally likely under independence. Up to {config.SPEARMAN_EXACT_MAX_N} rows without ties (and "
    f"{config.SPEARMAN_TIED_EXACT_MAX_N} with ties) the law is counted exactly; below "
    f"{config.SPEARMAN_T_MIN_N} rows it is approximated by the Edgeworth series of Best & Roberts (1975, "
    f"algorithm AS 89) without ties, or by {config.SPEARMAN_SMALL_N_PERMUTATIONS:,} seeded random pairings "
    f"with ties up to {config.SPEARMAN_TIED_PERMUTATION_MAX_N} rows (beyond that, tied samples use the t "
    "distribution, whose cost per pair stays small on wide tables); "
    f"from {config.SPEARMAN_T_MIN_N} rows on, by the t distribution with n - 2 degrees of "
    "freedom, which there rejects within a few percent of the nominal rate even at the 0.1% level. With few "
    "rows the t approximation alone would overstate the evidence: three rows in the same (or the "
    "reverse) rank order occur by chance in two orderings of six, which it reports as p = 0.")

MEASURES: dict[str, Measure] = {
    m.name: m
    for m in (
        Measure(
            name="pearson", label="Pearson r", family="linear", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="approximation to the permutation law of r from its exact first four moments "
                         "(Pitman 1937) by a Pearson curve, no resamples (exact enumeration up to 7 rows); "
                         "--test pearson=t: t-test with n-2 df (as scipy.stats.pearsonr); "
                         "--test pearson=permutation: random relabellings",
            tests=linear.TESTS,
            interval="Fisher z, SE = 1/sqrt(n-3)",
            formula="r = sum((x-mean x)(y-mean y)) / sqrt(sum((x-mean x)^2) sum((y-mean y)^2))",
            reference="Pearson, K. (1895) Proc. R. Soc. Lond. 58:240-242; Fisher, R.A. (1921) Metron 1:3-32",
            compute=_floored(_pearson, "pearson"), pairing_statistics=_pearson_pairings,
            role="trend", short_label="Pearson r", implied=lambda rho: rho,
            serial=_serial_ess("pearson"), serial_test=_ESS_TEXT.format(law="t with n*-2 df"),
            presorted=_pearson_presorted,
            partial="partial_pearson",
            # with permutations requested the default moments test is not the one used
            pvalue_note=lambda permutations: "" if permutations else _PEARSON_DEFAULT_NOTE,
        ),
        Measure(
            name="spearman", label="Spearman rho", family="rank", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="permutation law of rho: exact up to 12 untied rows (10 tied), Edgeworth series "
                         "(untied) or 9,999 permutations (tied, up to 29 rows) below 150 rows, t approximation with n-2 "
                         "degrees of freedom from 150 rows (tied: from 30 rows)",
            tests=("auto",),
            interval="Fisher z, SE = sqrt((1 + rho^2/2)/(n-3)) (Bonett & Wright 2000)",
            formula="rho_s = Pearson r of the mid-ranks of x and y",
            reference="Spearman, C. (1904) Am. J. Psychol. 15:72-101; Best, D.J. & Roberts, D.E. (1975) "
                      "Applied Statistics 24:377-379, doi:10.2307/2347111; Bonett, D.G. & Wright, T.A. (2000) "
                      "Psychometrika 65:23-28, doi:10.1007/BF02294183",
            compute=_floored(_spearman, "spearman"), pairing_statistics=_spearman_pairings,
            role="rank", short_label="Spearman rho", implied=lambda rho: 6.0 / math.pi * math.asin(rho / 2.0),
            serial=_serial_ess("spearman"), serial_test=_ESS_TEXT.format(law="on the ranks, t with n*-2 df"),
            presorted=_spearman_presorted, presorted_needs=frozenset({"rank_sums"}),
            partial="partial_spearman",
            pvalue_note=lambda permutations: _SPEARMAN_SMALL_N_NOTE, pvalue_references=(_BEST_ROBERTS,),
            contrast=("pearson", "absolute",
                      "|Spearman rho| and |Pearson r| far apart: curvature (ranks stronger) or a few influential "
                      "points (raw values stronger)."),
        ),
        Measure(
            name="kendall", label="Kendall tau-b", family="rank", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="exact for small untied samples, else normal with tie-corrected variance",
            tests=("auto",),
            interval="Fisher z, SE = sqrt(0.437/(n-4)) (Fieller, Hartley & Pearson 1957)",
            formula="tau_b = (C - D) / sqrt((n0 - n1)(n0 - n2)), n0 = n(n-1)/2, n1, n2 tied pairs in x, y",
            reference="Kendall, M.G. (1938) Biometrika 30:81-93; Kendall (1945) Biometrika 33:239-251; "
                      "Knight, W.R. (1966) JASA 61:436-439, doi:10.1080/01621459.1966.10480879; "
                      "Fieller, Hartley & Pearson (1957) Biometrika 44:470-481",
            compute=_floored(_kendall, "kendall"), pairing_statistics=_kendall_pairings,
            role="rank", short_label="Kendall tau", implied=lambda rho: 2.0 / math.pi * math.asin(rho),
            serial=_serial_ess("kendall"),
            serial_test=_ESS_TEXT.format(law="on the ranks, normal with the tie-corrected variance x n/n*"),
            presorted=_kendall_presorted, presorted_needs=frozenset({"kendall_counts"}),
        ),
        Measure(
            name="dcor", label="Distance correlation", family="distance", symmetric=True, signed=False,
            lower=0.0, upper=1.0, multivariate=True, reflection="unchanged",
            default_test="shifted gamma approximation to the permutation law of n V_n^2, matched to its exact "
                         "mean, variance and third moment; permutation with --permutations",
            tests=("gamma", "permutation"),
            interval="",
            formula="R_n = dCov_n(x, y) / sqrt(dVar_n(x) dVar_n(y)), double-centred distance matrices",
            reference="Szekely, Rizzo & Bakirov (2007) Ann. Statist. 35:2769-2794, doi:10.1214/009053607000000505; "
                      "Huo & Szekely (2016) Technometrics 58:435-447, doi:10.1080/00401706.2015.1054435",
            compute=_embedded(_floored(_dcor, "dcor")), pairing_statistics=_dcor_pairings, kinds=_ANY_PAIR,
            role="dependence", short_label="dCor", implied=lambda rho: float(distance.gaussian_dcor(rho)),
            serial=_serial_block("dcor"), serial_test=_BLOCK_TEXT, serial_resamples=True,
            presorted=_distance_presorted(distance.dcor_from_statistics), presorted_needs=frozenset({"distance"}),
            partial="partial_dcor",
            contrast=("pearson", "signed",
                      "Distance correlation well above |Pearson r|: dependence that a straight line misses "
                      "(curved, U-shaped or mixed patterns)."),
        ),
        Measure(
            name="dcor_bc", label="Bias-corrected dCor²", family="distance", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=True, reflection="unchanged",
            default_test="as dcor",
            tests=("gamma", "permutation"),
            interval="",
            formula="R*_n = <A~, B~> / sqrt(<A~, A~> <B~, B~>), U-centred distance matrices",
            reference="Szekely & Rizzo (2013) J. Multivariate Anal. 117:193-213, doi:10.1016/j.jmva.2013.02.012; "
                      "Szekely & Rizzo (2014) Ann. Statist. 42:2382-2412, doi:10.1214/14-AOS1255",
            compute=_embedded(_floored(_dcor_bc, "dcor_bc")), pairing_statistics=_dcor_bc_pairings, kinds=_ANY_PAIR,
            role="dependence", short_label="bias-corrected dCor²", implied=lambda rho: float(distance.gaussian_dcor(rho)) ** 2,
            serial=_serial_block("dcor_bc"), serial_test=_BLOCK_TEXT, serial_resamples=True,
            presorted=_distance_presorted(distance.dcor_bc_from_statistics), presorted_needs=frozenset({"distance"}),
            partial="partial_dcor",
        ),
        Measure(
            name="xi", label="Chatterjee ξ", family="rank", symmetric=False, signed=True,
            lower=-0.5, upper=1.0, multivariate=False, reflection="unchanged",
            default_test="asymptotic normal with tie-corrected variance (permutation below 20 rows); "
                         "permutation with --permutations",
            tests=("normal", "permutation"),
            interval="",
            formula="xi_n = 1 - n sum|r_{i+1} - r_i| / (2 sum l_i (n - l_i)), rows sorted by x",
            reference="Chatterjee, S. (2021) JASA 116:2009-2022, doi:10.1080/01621459.2020.1758115",
            compute=_floored(_xi, "xi"), pairing_statistics=_xi_pairings,
            role="dependence", short_label="ξ(x → y)", implied=chatterjee.gaussian_xi,
            serial=_serial_block("xi"), serial_test=_BLOCK_TEXT, serial_resamples=True,
            presorted=_xi_presorted,
        ),
        Measure(
            name="cramer_v", label="Cramér's V (bias-corrected)", family="categorical", symmetric=True,
            signed=False, lower=0.0, upper=1.0, multivariate=False, reflection="unchanged",
            default_test="Pearson chi-square test on (r-1)(k-1) df; when Cochran's rule fails (an expected "
                         "count below 1 or more than 20% below 5) a permutation test of the chi-square "
                         "statistic with 1,999 relabellings",
            tests=("auto", "chi2", "permutation"),
            interval="",
            formula="V~ = sqrt(phi~^2 / min(r~-1, k~-1)), phi~^2 = max(0, chi^2/n - (r-1)(k-1)/(n-1)), "
                    "r~ = r - (r-1)^2/(n-1), k~ = k - (k-1)^2/(n-1)",
            reference="Cramér, H. (1946) Mathematical Methods of Statistics; Cochran, W.G. (1954) Biometrics "
                      "10:417-451, doi:10.2307/3001616; Bergsma, W. (2013) J. Korean Stat. Soc. 42:323-328, "
                      "doi:10.1016/j.jkss.2012.10.002",
            compute=_floored(_cramer_v, "cramer_v"), role="dependence", short_label="Cramér's V",
            kinds=("categorical x categorical",),
        ),
        Measure(
            name="eta", label="Correlation ratio η", family="categorical", symmetric=True,
            signed=False, lower=0.0, upper=1.0, multivariate=False, reflection="unchanged",
            default_test="one-way ANOVA F test on (k-1, n-k) df; omega² (Hays 1963), the bias-corrected "
                         "effect size, beside it",
            tests=("anova",),
            interval="",
            formula="eta^2 = SS_between / SS_total; F = (SS_between/(k-1)) / (SS_within/(n-k)); "
                    "omega^2 = (SS_between - (k-1) MS_within) / (SS_total + MS_within)",
            reference="Pearson, K. (1903) Proc. R. Soc. Lond. 71:288-313, doi:10.1098/rspl.1902.0099; "
                      "Fisher, R.A. (1925) Statistical Methods for Research Workers; Hays, W.L. (1963) "
                      "Statistics for Psychologists; Okada, K. (2013) Behaviormetrika 40:129-147, "
                      "doi:10.2333/bhmk.40.129",
            compute=_floored(_eta, "eta"), role="trend", short_label="η",
            kinds=("categorical x numeric",),
        ),
        Measure(
            name="kruskal", label="Kruskal-Wallis η (ranks)", family="categorical", symmetric=True,
            signed=False, lower=0.0, upper=1.0, multivariate=False, reflection="unchanged",
            default_test="Kruskal-Wallis H (tie-corrected) against chi-square with k-1 df; a permutation test "
                         "with 1,999 relabellings when a level has fewer than 5 rows",
            tests=("auto",),
            interval="",
            formula="eta_R = sqrt(H/(n-1)), H = (n-1) SS_between(R)/SS_total(R) on mid-ranks R; "
                    "eta_R^2 is the epsilon^2 of Kruskal-Wallis",
            reference="Kruskal, W.H. & Wallis, W.A. (1952) JASA 47:583-621, doi:10.1080/01621459.1952.10483441; "
                      "Tomczak, M. & Tomczak, E. (2014) Trends Sport Sci. 21:19-25",
            compute=_floored(_kruskal, "kruskal"), role="rank", short_label="rank η",
            kinds=("categorical x numeric",),
        ),
    )
}


_BUILT_IN = frozenset(MEASURES)
_NAME = re.compile(r"[a-z][a-z0-9_]{0,31}")


def register(measure: Measure, *, replace: bool = False) -> Measure:
    """Add a measure to the registry; every face (CLI, API, pages, report) then offers it.

    Parameters
    ----------
    measure : Measure
        The entry: at least its name, labels, properties and ``compute``
        (``(x, y, PairContext) -> TestResult``). Properties left at their
        defaults (``role=""``, ``implied=None``, ``serial=None``) mean the
        verdict does not read it, no Gaussian-implied value is shown and
        ``--ordered`` keeps its independent-rows test.
    replace : bool, default False
        Allow replacing an entry of the same name.

    Returns
    -------
    Measure
        The registered entry, with its p-values floored at the attainable
        permutation minimum when ``pairing_statistics`` is given.

    Raises
    ------
    ValueError
        A name that is not 1-32 lower-case letters, digits or underscores
        starting with a letter, a name already taken, an empty ``tests``, or
        bounds with ``lower >= upper``.

    Notes
    -----
    Measures from other modules reach the server's analysis children and
    ``pairlens`` commands through the ``PAIRLENS_PLUGINS`` environment
    variable (see :mod:`pairlens.plugins`).

    Examples
    --------
    >>> import numpy as np
    >>> from pairlens.core.results import TestResult
    >>> def _sign_agreement(x, y, ctx):
    ...     s = np.sign(x - np.median(x)) * np.sign(y - np.median(y))
    ...     return TestResult(float(s.mean()), float("nan"), "no test")
    >>> entry = register(Measure(
    ...     name="sign_demo", label="Sign agreement", family="rank", symmetric=True, signed=True,
    ...     lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign", default_test="none",
    ...     tests=("none",), interval="", formula="mean of sign products", reference="-",
    ...     compute=_sign_agreement))
    >>> "sign_demo" in measure_names()
    True
    >>> unregister("sign_demo")
    """
    if not isinstance(measure, Measure):
        raise TypeError("register() takes a pairlens.core.registry.Measure")
    if not _NAME.fullmatch(measure.name):
        raise ValueError(f"measure name {measure.name!r} must be 1-32 lower-case letters, digits or "
                         "underscores, starting with a letter")
    if measure.name in MEASURES and not replace:
        raise ValueError(f"a measure named {measure.name!r} is already registered")
    if not measure.tests:
        raise ValueError(f"measure {measure.name!r} needs at least one test method in `tests`")
    if not measure.lower < measure.upper:
        raise ValueError(f"measure {measure.name!r}: lower bound {measure.lower} is not below upper {measure.upper}")
    measure = replace_fields(measure, compute=_guarded(measure.compute, measure.name))
    if measure.pairing_statistics is not None:
        measure = replace_fields(measure, compute=_floored(measure.compute, measure.name))
    MEASURES[measure.name] = measure
    return measure


def _guarded(compute, name: str):
    """A registered kernel's result with its row count filled in, and its failures as a note.

    A fault in a measure from outside the project gives NaN with the reason for
    that measure and pair instead of stopping the analysis.
    """
    def run(x, y, ctx: PairContext) -> TestResult:
        try:
            res = compute(x, y, ctx)
        except Exception as exc:  # noqa: BLE001 - any fault of an outside kernel, reported per pair
            return TestResult(math.nan, math.nan, "", math.nan, math.nan, len(x),
                              f"{name} failed on this pair: {type(exc).__name__}: {exc}")
        if not isinstance(res, TestResult):
            return TestResult(math.nan, math.nan, "", math.nan, math.nan, len(x),
                              f"{name} returned {type(res).__name__}, not a TestResult")
        return res if res.n else replace_fields(res, n=len(x))
    return run


def unregister(name: str) -> None:
    """Remove a measure added with :func:`register` (the built-in ones stay)."""
    if name in _BUILT_IN:
        raise ValueError(f"{name!r} is a built-in measure and cannot be removed")
    MEASURES.pop(name, None)


def measures_for(measures, kx: str, ky: str) -> tuple[str, ...]:
    """The measures of ``measures`` that apply to a pair of kinds ``kx`` and ``ky``, in their order."""
    return tuple(m for m in measures if MEASURES[m].applies_to(kx, ky))
def _partial_pearson(x, y, ctx: PairContext) -> TestResult:
    return partial.partial_pearson(x, y, ctx.given, ctx.given_indicator or None, confidence=ctx.confidence)


def _partial_spearman(x, y, ctx: PairContext) -> TestResult:
    return partial.partial_spearman(x, y, ctx.given, ctx.given_indicator or None, confidence=ctx.confidence)


def _partial_dcor(x, y, ctx: PairContext) -> TestResult:
    return partial.partial_dcor(x, y, ctx.given, ctx.given_indicator or None,
                                permutations=ctx.permutations or config.PARTIAL_DCOR_PERMUTATIONS,
                                seed=ctx.seed, max_n=config.PARTIAL_DCOR_MAX_N)


_GIVEN_Z = ("least squares on [1, Z]; a given column that is a class code (text, or at most "
            f"{config.GIVEN_INDICATOR_MAX_LEVELS} distinct values) enters as indicators of its levels")

# Measures given other columns (--given COL,...). They are not chosen with --measures: each entry of
# MEASURES names its conditional variant in ``partial``, and a run with --given adds the variants of
# its measures. Their rows carry the conditioning columns in the pair table's ``given`` field.
PARTIAL_MEASURES: dict[str, Measure] = {
    m.name: m
    for m in (
        Measure(
            name="partial_pearson", label="Partial Pearson r | Z", family="partial", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="t test with n-2-k degrees of freedom (k = regressors of Z)", tests=("t",),
            interval="Fisher z, SE = 1/sqrt(n-3-k)",
            formula="r_xy.Z = Pearson r of the residuals of x and y after " + _GIVEN_Z,
            reference="Fisher, R.A. (1924) Metron 3:329-332; Baba, Shibata & Sibuya (2004) Aust. N. Z. J. Stat. "
                      "46:657-664, doi:10.1111/j.1467-842X.2004.00360.x",
            compute=_partial_pearson, short_label="partial r", implied=lambda rho: rho, partial_for="pearson",
        ),
        Measure(
            name="partial_spearman", label="Partial Spearman rho | Z", family="partial", symmetric=True,
            signed=True, lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="t test with n-2-k degrees of freedom on the ranks", tests=("t",),
            interval="Fisher z, SE = 1/sqrt(n-3-k)",
            formula="r_s.Z = partial Pearson r of the mid-ranks of x, y and the numeric columns of Z; " + _GIVEN_Z,
            reference="Kendall, M.G. (1942) Biometrika 32:277-283, doi:10.1093/biomet/32.3-4.277; "
                      "Conover (1999) Practical Nonparametric Statistics, 3rd ed., section 5.4",
            compute=_partial_spearman, short_label="partial rho", partial_for="spearman",
        ),
        Measure(
            name="partial_dcor", label="Partial distance correlation | Z", family="partial", symmetric=True,
            signed=True, lower=-1.0, upper=1.0, multivariate=True, reflection="unchanged",
            default_test=f"permutation test of Szekely & Rizzo (2014): rows of the projected x matrix relabelled, "
                         f"{config.PARTIAL_DCOR_PERMUTATIONS} relabellings (or --permutations); up to "
                         f"{config.PARTIAL_DCOR_MAX_N} rows",
            tests=("permutation",), interval="",
            formula="R*(x, y; Z) = <P(A~), P(B~)> / sqrt(<P(A~), P(A~)> <P(B~), P(B~)>), U-centred distance "
                    "matrices A~, B~ projected on the complement of Z's (numeric Z columns scaled to unit SD, "
                    "class codes as 0/1 indicators)",
            reference="Szekely, G.J. & Rizzo, M.L. (2014) Ann. Statist. 42:2382-2412, doi:10.1214/14-AOS1255",
            compute=_partial_dcor, short_label="partial dCor", partial_for="dcor",
        ),
    )
}


def partial_of(measures) -> tuple[str, ...]:
    """The conditional variants (PARTIAL_MEASURES names) of ``measures``, in order, each once."""
    out: list[str] = []
    for m in measures:
        name = MEASURES[m].partial
        if name and name not in out:
            out.append(name)
    return tuple(out)


def map_order_measure(measures) -> str:
    """The measure whose clustering orders a report's maps and ranks the top pairs by default.

    The first chosen unsigned distance measure (it sees any kind of dependence, so
    related columns end up side by side), else the first chosen measure.
    """
    measures = tuple(measures)
    for name in measures:
        entry = get_measure(name)
        if entry.family == "distance" and not entry.signed:
            return name
    return measures[0]


def measure_names() -> tuple[str, ...]:
    return tuple(MEASURES)


def get_measure(name: str) -> Measure:
    """An entry of MEASURES or of PARTIAL_MEASURES by name."""
    if name in PARTIAL_MEASURES:
        return PARTIAL_MEASURES[name]
    try:
        return MEASURES[name]
    except KeyError:
        raise ValueError(f"unknown measure {name!r}; choose from {', '.join(MEASURES)}") from None


def parse_tests(tests) -> tuple[tuple[str, str], ...]:
    """``MEASURE=METHOD`` choices (a dict, a list of "m=method" strings, or one comma-separated string)
    checked against the registry; ValueError with the allowed names otherwise."""
    if not tests:
        return ()
    if isinstance(tests, str):
        tests = [t for t in tests.split(",") if t.strip()]
    items = list(tests.items()) if isinstance(tests, dict) else list(tests)
    out: dict[str, str] = {}
    for item in items:
        if isinstance(item, str):
            name, sep, method = item.partition("=")
            if not sep:
                raise ValueError(f"test {item!r} must look like MEASURE=METHOD, e.g. pearson=t")
        else:
            name, method = item
        name, method = str(name).strip().lower(), str(method).strip().lower()
        measure = get_measure(name)
        if method not in measure.tests:
            raise ValueError(f"unknown test {method!r} for {name}; choose from {', '.join(measure.tests)}")
        if name in out and out[name] != method:
            raise ValueError(f"two tests given for {name}: {out[name]} and {method}")
        out[name] = method
    return tuple(out.items())
