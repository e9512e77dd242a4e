"""Chatterjee's xi against scipy.stats.chatterjeexi, full enumeration and simulation."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from pairlens import config
from pairlens.core.chatterjee import xi, xi_null_variance
from pairlens.core.testing import pair_seed


def _scipy_xi(x, y):
    # scipy.stats.chatterjeexi with its defaults: y_continuous=False (the
    # general formula with ties in y and the tie-corrected variance of
    # Chatterjee 2021 Theorem 2.2), method="asymptotic", one-sided upper p.
    return stats.chatterjeexi(x, y)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("n", [20, 57, 300, 2000])
def test_matches_scipy_untied_y(seed, n):
    rng = np.random.default_rng([seed, n])
    x = rng.normal(size=n)
    y = np.sin(2 * x) + rng.normal(scale=1.0 + seed % 3, size=n)
    ours = xi(x, y, method="asymptotic")
    ref = _scipy_xi(x, y)  # reference: scipy.stats.chatterjeexi
    assert ours.estimate == pytest.approx(ref.statistic, abs=1e-9)
    assert ours.p_value == pytest.approx(ref.pvalue, abs=1e-6, rel=1e-6)
    assert ours.method == "asymptotic normal, tie-corrected"
    assert ours.n == n


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("levels", [2, 3, 7, 40])
def test_matches_scipy_tied_y(seed, levels):
    rng = np.random.default_rng([seed, levels])
    n = 250
    x = rng.normal(size=n)
    y = np.floor(levels * stats.norm.cdf(0.7 * x + rng.normal(size=n)))  # many ties in y
    assert np.unique(y).size < n
    ours = xi(x, y)
    ref = _scipy_xi(x, y)  # reference: scipy.stats.chatterjeexi (tie-corrected variance)
    assert ours.estimate == pytest.approx(ref.statistic, abs=1e-9)
    assert ours.p_value == pytest.approx(ref.pvalue, abs=1e-6, rel=1e-6)


def test_both_directions_match_scipy_and_differ():
    rng = np.random.default_rng(12)
    x = rng.uniform(-2, 2, 400)
    y = x**2 + 0.05 * rng.normal(size=400)   # y is a function of x, x is not of y
    forward, backward = xi(x, y), xi(y, x)
    # reference: scipy.stats.chatterjeexi in each direction
    assert forward.estimate == pytest.approx(_scipy_xi(x, y).statistic, abs=1e-9)
    assert backward.estimate == pytest.approx(_scipy_xi(y, x).statistic, abs=1e-9)
    assert forward.estimate > 0.8 > backward.estimate + 0.3  # asymmetric by design (Chatterjee 2021 Remark 1)


def test_tie_free_formula_reduces_to_eq_1_1():
    # Chatterjee (2021) eq. 1.1: without ties xi = 1 - 3 sum|r_{i+1} - r_i| / (n^2 - 1).
    rng = np.random.default_rng(5)
    x, y = rng.normal(size=101), rng.normal(size=101)
    r = stats.rankdata(y[np.argsort(x)])
    expected = 1 - 3 * np.abs(np.diff(r)).sum() / (101**2 - 1)
    assert xi(x, y).estimate == pytest.approx(expected, abs=1e-12)
    # scipy's y_continuous=True uses eq. 1.1 as well
    assert xi(x, y).estimate == pytest.approx(stats.chatterjeexi(x, y, y_continuous=True).statistic, abs=1e-12)


@pytest.mark.parametrize("n", [4, 5, 6, 7, 8])
def test_exact_null_variance_by_enumeration(n):
    # Reference: full enumeration of all n! orders of untied y against x.
    x = np.arange(n, dtype=float)
    values = np.array([xi(x, np.array(p, dtype=float), method="asymptotic").estimate
                       for p in itertools.permutations(range(n))])
    assert values.mean() == pytest.approx(0.0, abs=1e-12)
    assert values.var() == pytest.approx(xi_null_variance(n), rel=1e-12)


def test_exact_variance_tends_to_two_fifths():
    # Chatterjee (2021) Theorem 2.1: n Var(xi_n) -> 2/5 without ties.
    assert 100_000 * xi_null_variance(100_000) == pytest.approx(0.4, rel=1e-4)


def test_ties_in_x_broken_at_random_like_jittered_scipy():
    # Chatterjee (2021): break ties in x uniformly at random. Every value we
    # return must be one that scipy gives for some tie-breaking (scipy on x
    # plus a tiny jitter that orders the tied block), and over many seeds the
    # average must approach the average over all tie-breakings.
    x = np.array([0.0, 0.0, 0.0, 1.0, 1.0, 2.0, 3.0])
    y = np.array([3.0, 1.0, 2.0, 5.0, 4.0, 6.0, 0.0])
    possible = []
    for a in itertools.permutations(range(3)):
        for b in itertools.permutations(range(2)):
            jitter = np.zeros(7)
            jitter[:3] = np.array(a) * 1e-6
            jitter[3:5] = np.array(b) * 1e-6
            possible.append(stats.chatterjeexi(x + jitter, y).statistic)  # reference: scipy
    possible = np.array(possible)
    ours = np.array([xi(x, y, seed=s, method="asymptotic").estimate for s in range(3000)])
    assert np.all(np.min(np.abs(ours[:, None] - possible[None, :]), axis=1) < 1e-12)
    # Monte Carlo: 3000 draws, SE = sd/sqrt(3000); 5 SE bound
    assert abs(ours.mean() - possible.mean()) < 5 * possible.std() / math.sqrt(3000)
    assert np.unique(ours.round(12)).size > 1


def test_seed_determinism_with_pair_seed():
    rng = np.random.default_rng(3)
    x = rng.integers(0, 5, 200).astype(float)     # heavy ties in x
    y = x + rng.normal(size=200)
    s1, s2 = pair_seed(7, "a", "b", "xi"), pair_seed(7, "a", "b", "xi")
    assert xi(x, y, seed=s1) == xi(x, y, seed=s2)
    many = {xi(x, y, seed=s).estimate for s in range(20)}
    assert len(many) > 1   # the tie-breaking does use the seed


def test_permutation_p_value_matches_scipy_permutation_test():
    rng = np.random.default_rng(21)
    n = 40
    x = rng.normal(size=n)
    y = 0.4 * x + rng.normal(size=n)
    b = 4999
    ours = xi(x, y, permutations=b, seed=1)
    ref = stats.chatterjeexi(x, y, method=stats.PermutationMethod(n_resamples=b, rng=2))  # reference: scipy
    assert ours.method == f"permutation, B={b}"
    assert ours.estimate == pytest.approx(ref.statistic, abs=1e-12)
    p = ref.pvalue
    # two independent Monte Carlo estimates of the same p: 5 SE of their difference
    assert abs(ours.p_value - p) < 5 * math.sqrt(2 * p * (1 - p) / b) + 1e-3
    assert ours.p_value >= 1 / (b + 1)


def test_small_n_uses_permutations_by_default():
    rng = np.random.default_rng(8)
    x, y = rng.normal(size=12), rng.normal(size=12)
    res = xi(x, y, seed=4)
    assert res.method == f"permutation, B={config.XI_SMALL_N_PERMUTATIONS} (n < {config.XI_PERMUTATION_BELOW_N})"
    assert res.estimate == pytest.approx(stats.chatterjeexi(x, y).statistic, abs=1e-12)  # reference: scipy
    assert xi(x, y, method="asymptotic").p_value == pytest.approx(stats.chatterjeexi(x, y).pvalue, abs=1e-9)


def test_degenerate_inputs():
    assert math.isnan(xi([1.0, 2.0], [3.0, 4.0]).estimate)
    assert "fewer than 3" in xi([1.0, 2.0], [3.0, 4.0]).note
    res = xi(np.arange(10.0), np.ones(10))
    assert math.isnan(res.estimate) and "y is constant" in res.note
    res = xi(np.ones(10), np.arange(10.0))
    assert math.isnan(res.estimate) and "x is constant" in res.note
    x = np.array([1.0, np.nan, 3.0, 4.0, 5.0, 6.0])
    y = np.array([2.0, 1.0, np.nan, 1.0, 7.0, 3.0])
    res = xi(x, y, method="asymptotic")
    assert res.n == 4
    keep = np.isfinite(x) & np.isfinite(y)
    assert res.estimate == pytest.approx(stats.chatterjeexi(x[keep], y[keep]).statistic, abs=1e-12)  # scipy


def test_large_n_fast_path_matches_scipy():
    rng = np.random.default_rng(99)
    n = 200_000
    x = rng.normal(size=n)
    y = np.round(np.cos(x) + rng.normal(size=n), 1)   # ties in y
    ours = xi(x, y)
    ref = _scipy_xi(x, y)  # reference: scipy.stats.chatterjeexi
    assert ours.estimate == pytest.approx(ref.statistic, abs=1e-9)
    assert ours.p_value == pytest.approx(ref.pvalue, abs=1e-6)


_MARGINALS = {
    "normal": lambda rng, n: rng.normal(size=n),
    "exponential": lambda rng, n: rng.exponential(size=n),
    "t3": lambda rng, n: rng.standard_t(3, size=n),
    "lognormal": lambda rng, n: rng.lognormal(size=n),
}


@pytest.mark.slow
@pytest.mark.parametrize("n", [30, 100, 500])
@pytest.mark.parametrize("marginal", list(_MARGINALS))
def test_level_under_independence(n, marginal):
    # Simulation under independence (the definition of the level). With
    # 10,000 replicates the SE of a 5% rate is 0.0022 and of a 1% rate 0.001,
    # so the bounds are 6.8 and 7 SE away from the nominal level.
    reps = 10_000
    rng = np.random.default_rng([n, len(marginal)])
    draw = _MARGINALS[marginal]
    p = np.empty(reps)
    for i in range(reps):
        p[i] = xi(draw(rng, n), draw(rng, n)).p_value
    assert xi(draw(rng, n), draw(rng, n)).method == "asymptotic normal, tie-corrected"
    assert 0.035 <= np.mean(p <= 0.05) <= 0.065
    assert np.mean(p <= 0.01) <= 0.017


@pytest.mark.slow
@pytest.mark.parametrize("n", [30, 100, 500])
def test_level_with_ties_in_both(n):
    # Discrete data (Poisson counts): ties in x broken at random, tie-corrected variance.
    reps = 6000
    rng = np.random.default_rng([n, 77])
    p = np.array([xi(rng.poisson(2.0, n).astype(float), rng.poisson(1.0, n).astype(float), seed=i).p_value
                  for i in range(reps)])
    # SE 0.0028 at 5%: bounds are 5.3 SE away
    assert 0.035 <= np.mean(p <= 0.05) <= 0.065
    assert np.mean(p <= 0.01) <= 0.017


@pytest.mark.slow
def test_level_small_n_permutation_default():
    # n = 12 uses the permutation default; its p-value is valid by construction,
    # the simulation checks the implementation. B is lowered to keep the run short.
    reps, b = 3000, 199
    rng = np.random.default_rng(1234)
    p = np.array([xi(rng.normal(size=12), rng.exponential(size=12), permutations=b, seed=i).p_value
                  for i in range(reps)])
    # SE 0.004 at 5%: 0.035..0.065 is 3.8 SE
    assert 0.035 <= np.mean(p <= 0.05) <= 0.065
    assert np.mean(p <= 0.01) <= 0.017


def test_invariant_under_increasing_transforms():
    # xi_n depends on the data only through ranks (Chatterjee 2021, Section 1).
    rng = np.random.default_rng(61)
    x, y = rng.normal(size=300), rng.normal(size=300)
    y = y + np.sin(3 * x)
    base = xi(x, y)
    other = xi(np.exp(x), y**3 + 5 * y)
    assert other.estimate == pytest.approx(base.estimate, abs=1e-12)
    assert other.p_value == pytest.approx(base.p_value, abs=1e-12)
    assert other.estimate == pytest.approx(stats.chatterjeexi(np.exp(x), y**3 + 5 * y).statistic, abs=1e-12)


def test_permutations_do_not_change_tie_breaking():
    rng = np.random.default_rng(62)
    x = rng.integers(0, 4, 80).astype(float)
    y = x + rng.normal(size=80)
    for s in range(5):
        assert xi(x, y, seed=s).estimate == xi(x, y, seed=s, permutations=99).estimate


def test_bad_arguments():
    with pytest.raises(ValueError):
        xi(np.arange(5.0), np.arange(4.0))
    with pytest.raises(ValueError):
        xi(np.arange(5.0), np.arange(5.0), method="exact")
    with pytest.raises(ValueError):
        xi(np.arange(5.0), np.arange(5.0), permutations=-1)
