"""The registry of association measures and their properties.

Pages, reports, the CLI and the tests iterate over :data:`MEASURES` instead of
hard-coding names. Adding a measure means one kernel, one entry here and its
reference tests.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from . import chatterjee, distance, linear, rank
from .results import TestResult

__all__ = ["PairContext", "Measure", "MEASURES", "get_measure", "measure_names"]


@dataclass(frozen=True)
class PairContext:
    """What a measure needs besides the data: level, resamples and the pair's seed."""

    confidence: float = 0.95
    permutations: int = 0
    seed: np.random.SeedSequence | None = None


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
    interval: str               # "" where no interval is defined
    formula: str
    reference: str
    compute: Callable[[np.ndarray, np.ndarray, PairContext], TestResult]


def _pearson(x, y, ctx: PairContext) -> TestResult:
    return linear.pearson(x, y, confidence=ctx.confidence, permutations=ctx.permutations, seed=ctx.seed)


def _spearman(x, y, ctx: PairContext) -> TestResult:
    return rank.spearman(x, y, confidence=ctx.confidence)


def _kendall(x, y, ctx: PairContext) -> TestResult:
    return rank.kendall(x, y, confidence=ctx.confidence)


def _dcor(x, y, ctx: PairContext) -> TestResult:
    return distance.dcor(x, y, permutations=ctx.permutations, seed=ctx.seed)


def _dcor_bc(x, y, ctx: PairContext) -> TestResult:
    return distance.dcor_bc(x, y, permutations=ctx.permutations, seed=ctx.seed)


def _xi(x, y, ctx: PairContext) -> TestResult:
    return chatterjee.xi(x, y, permutations=ctx.permutations, seed=ctx.seed)


MEASURES: dict[str, Measure] = {
    m.name: m
    for m in (
        Measure(
            name="pearson", label="Pearson r", family="linear", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="t-test with n-2 degrees of freedom; permutation with --permutations",
            interval="Fisher z, SE = 1/sqrt(n-3)",
            formula="r = sum((x-mean x)(y-mean y)) / sqrt(sum((x-mean x)^2) sum((y-mean y)^2))",
            reference="Pearson, K. (1895) Proc. R. Soc. Lond. 58:240-242; Fisher, R.A. (1921) Metron 1:3-32",
            compute=_pearson,
        ),
        Measure(
            name="spearman", label="Spearman rho", family="rank", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="t approximation with n-2 degrees of freedom",
            interval="Fisher z, SE = sqrt((1 + rho^2/2)/(n-3)) (Bonett & Wright 2000)",
            formula="rho_s = Pearson r of the mid-ranks of x and y",
            reference="Spearman, C. (1904) Am. J. Psychol. 15:72-101; Bonett, D.G. & Wright, T.A. (2000) "
                      "Psychometrika 65:23-28, doi:10.1007/BF02294183",
            compute=_spearman,
        ),
        Measure(
            name="kendall", label="Kendall tau-b", family="rank", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=False, reflection="flips sign",
            default_test="exact for small untied samples, else normal with tie-corrected variance",
            interval="Fisher z, SE = sqrt(0.437/(n-4)) (Fieller, Hartley & Pearson 1957)",
            formula="tau_b = (C - D) / sqrt((n0 - n1)(n0 - n2)), n0 = n(n-1)/2, n1, n2 tied pairs in x, y",
            reference="Kendall, M.G. (1938) Biometrika 30:81-93; Kendall (1945) Biometrika 33:239-251; "
                      "Knight, W.R. (1966) JASA 61:436-439, doi:10.1080/01621459.1966.10480879; "
                      "Fieller, Hartley & Pearson (1957) Biometrika 44:470-481",
            compute=_kendall,
        ),
        Measure(
            name="dcor", label="Distance correlation", family="distance", symmetric=True, signed=False,
            lower=0.0, upper=1.0, multivariate=True, reflection="unchanged",
            default_test="shifted gamma approximation to the permutation law of n V_n^2, matched to its exact "
                         "mean, variance and third moment; permutation with --permutations",
            interval="",
            formula="R_n = dCov_n(x, y) / sqrt(dVar_n(x) dVar_n(y)), double-centred distance matrices",
            reference="Szekely, Rizzo & Bakirov (2007) Ann. Statist. 35:2769-2794, doi:10.1214/009053607000000505; "
                      "Huo & Szekely (2016) Technometrics 58:435-447, doi:10.1080/00401706.2015.1054435",
            compute=_dcor,
        ),
        Measure(
            name="dcor_bc", label="Bias-corrected dCor²", family="distance", symmetric=True, signed=True,
            lower=-1.0, upper=1.0, multivariate=True, reflection="unchanged",
            default_test="as dcor",
            interval="",
            formula="R*_n = <A~, B~> / sqrt(<A~, A~> <B~, B~>), U-centred distance matrices",
            reference="Szekely & Rizzo (2013) J. Multivariate Anal. 117:193-213, doi:10.1016/j.jmva.2013.02.012; "
                      "Szekely & Rizzo (2014) Ann. Statist. 42:2382-2412, doi:10.1214/14-AOS1255",
            compute=_dcor_bc,
        ),
        Measure(
            name="xi", label="Chatterjee ξ", family="rank", symmetric=False, signed=True,
            lower=-0.5, upper=1.0, multivariate=False, reflection="unchanged",
            default_test="asymptotic normal with tie-corrected variance (permutation below 20 rows); "
                         "permutation with --permutations",
            interval="",
            formula="xi_n = 1 - n sum|r_{i+1} - r_i| / (2 sum l_i (n - l_i)), rows sorted by x",
            reference="Chatterjee, S. (2021) JASA 116:2009-2022, doi:10.1080/01621459.2020.1758115",
            compute=_xi,
        ),
    )
}


def measure_names() -> tuple[str, ...]:
    return tuple(MEASURES)


def get_measure(name: str) -> Measure:
    try:
        return MEASURES[name]
    except KeyError:
        raise ValueError(f"unknown measure {name!r}; choose from {', '.join(MEASURES)}") from None
