"""The registry of association measures and their properties.

Pages, reports, the CLI and the tests iterate over :data:`MEASURES` instead of
hard-coding names. Adding a measure means one kernel, one entry here and its
reference tests.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from . import chatterjee, distance, linear, partial, rank, serial
from .. import config
from .results import TestResult
from .testing import all_pairings, attainable_minimum, floor_pvalue, permutation_floor

__all__ = ["PairContext", "Measure", "MEASURES", "PARTIAL_MEASURES", "partial_of", "get_measure", "measure_names", "parse_tests", "pvalue_floor"]


@dataclass(frozen=True)
class PairContext:
    """What a measure needs besides the data: level, resamples and the pair's seed."""

    confidence: float = 0.95
    permutations: int = 0
    seed: np.random.SeedSequence | None = None
    test: str = ""          # a method from the measure's ``tests``; "" = its default rule
    # --given: the conditioning columns on the pair's rows (n, q) and which of them are class codes
    given: np.ndarray | None = None
    given_indicator: tuple[bool, ...] = ()


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
    # --given: the name of the entry of PARTIAL_MEASURES that measures this one given other columns ("" = none)
    partial: str = ""
    # an entry of PARTIAL_MEASURES: the unconditional measure it is set beside ("" for the others)
    partial_for: str = ""


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


def _xi(x, y, ctx: PairContext) -> TestResult:
    return chatterjee.xi(x, y, permutations=_resamples(ctx, "normal"), seed=ctx.seed)


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
        # long rows (the block permutation test of --ordered): one relabelled copy at a time, rows then
        # columns, is many times faster than a fancy-indexed (m, n, n) gather and needs n^2 memory only;
        # einsum, not a BLAS dot, whose helper threads cost milliseconds per call on a busy machine
        return np.array([np.einsum("ij,ij->", a, b.take(p, axis=0).take(p, axis=1)) for p in pairings])
    return np.einsum("ij,mij->m", a, b[pairings[:, :, None], pairings[:, None, :]])


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
            partial="partial_pearson",
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
            partial="partial_spearman",
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
            serial=_serial_ess("kendall"), serial_test=_ESS_TEXT.format(law="on the ranks, normal with variance x n/n*"),
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
            compute=_floored(_dcor, "dcor"), pairing_statistics=_dcor_pairings,
            role="dependence", short_label="dCor", implied=lambda rho: float(distance.gaussian_dcor(rho)),
            serial=_serial_block("dcor"), serial_test=_BLOCK_TEXT, serial_resamples=True,
            partial="partial_dcor",
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
            compute=_floored(_dcor_bc, "dcor_bc"), pairing_statistics=_dcor_bc_pairings,
            role="dependence", short_label="bias-corrected dCor²", implied=lambda rho: float(distance.gaussian_dcor(rho)) ** 2,
            serial=_serial_block("dcor_bc"), serial_test=_BLOCK_TEXT, serial_resamples=True,
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
        ),
    )
}


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
