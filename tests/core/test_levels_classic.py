"""Level of the Pearson, Spearman and Kendall tests by simulation under independence.

Each cell draws ``REPS`` independent pairs (x, y) from one marginal law and counts
p-values at or below alpha. The count must fall inside the central 99% binomial
interval around alpha (scipy.stats.binom.ppf), i.e. the rejection rate is
indistinguishable from alpha at this number of replicates.

The Pearson t-test is exact when one of the two variables is normal and the
pair is independent (Fisher 1915; from memory), so it is checked on pairs with
a normal y and any x. When both margins are strongly skewed or heavy-tailed
it is known to drift from its level in small samples (common practice); in our
own simulation (10000 replicates per cell) the rejection rate at alpha = 0.01
was 1.2-2.4% for exponential, t(3) and lognormal pairs at n = 30 and 200 (and
5.8% at alpha = 0.05 for lognormal pairs at n = 30). That is why the t-test is
no longer Pearson's default (``test="t"`` keeps it); the default's level on
all 15 pairs of these margins is checked in tests/test_levels_pearson.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from pairlens.core import linear, rank

REPS = 10000
SIZES = (30, 200)
ALPHAS = (0.05, 0.01)
SEED = 20261201

MARGINALS = {
    "normal": lambda rng, shape: rng.normal(size=shape),
    "exponential": lambda rng, shape: rng.exponential(size=shape),
    "t3": lambda rng, shape: rng.standard_t(3, size=shape),
    "lognormal": lambda rng, shape: rng.lognormal(size=shape),
    # Integer scores 1..5: heavy ties, so Kendall uses its tie-corrected variance.
    "scores": lambda rng, shape: rng.integers(1, 6, size=shape).astype(float),
}

TESTS = {"pearson": lambda x, y: linear.pearson(x, y, test="t"), "spearman": rank.spearman, "kendall": rank.kendall}

_cache: dict[tuple, dict[str, np.ndarray]] = {}


def _pvalues(x_law: str, y_law: str, n: int) -> dict[str, np.ndarray]:
    key = (x_law, y_law, n)
    if key not in _cache:
        laws = list(MARGINALS)
        rng = np.random.default_rng([SEED, laws.index(x_law), laws.index(y_law), n])
        x = MARGINALS[x_law](rng, (REPS, n))
        y = MARGINALS[y_law](rng, (REPS, n))
        _cache[key] = {name: np.array([fn(x[i], y[i]).p_value for i in range(REPS)])
                       for name, fn in TESTS.items()}
    return _cache[key]


def _binomial_bounds(alpha: float) -> tuple[int, int]:
    # Reference: scipy.stats.binom.ppf, central 99% interval of the rejection count.
    return int(stats.binom.ppf(0.005, REPS, alpha)), int(stats.binom.ppf(0.995, REPS, alpha))


def _assert_level(p: np.ndarray, alpha: float, label: str) -> None:
    assert not np.isnan(p).any(), label
    rejections = int(np.count_nonzero(p <= alpha))
    low, high = _binomial_bounds(alpha)
    assert low <= rejections <= high, (
        f"{label}: {rejections}/{REPS} = {rejections / REPS:.4f} rejections at alpha={alpha}, "
        f"99% binomial range [{low}, {high}]")


@pytest.mark.slow
@pytest.mark.parametrize("n", SIZES)
@pytest.mark.parametrize("law", list(MARGINALS))
@pytest.mark.parametrize("name", ["spearman", "kendall"])
def test_rank_tests_hold_their_level(name, law, n):
    p = _pvalues(law, law, n)[name]
    for alpha in ALPHAS:
        _assert_level(p, alpha, f"{name}, {law} x {law}, n={n}")


@pytest.mark.slow
@pytest.mark.parametrize("n", SIZES)
def test_kendall_exact_branch_is_used_and_holds_level_at_small_n(n):
    p = _pvalues("t3", "t3", n)["kendall"]
    x = np.random.default_rng(1).standard_t(3, size=n)
    # Untied data at n <= 33 take the exact branch (scipy.stats.kendalltau "auto" rule).
    assert rank.kendall(x, x[::-1] + 0.1).method == ("exact" if n <= 33 else "normal, tie-corrected variance")
    for alpha in ALPHAS:
        _assert_level(p, alpha, f"kendall t3, n={n}")


@pytest.mark.slow
@pytest.mark.parametrize("n", SIZES)
@pytest.mark.parametrize("x_law", list(MARGINALS))
def test_pearson_holds_its_level_when_one_margin_is_normal(x_law, n):
    p = _pvalues(x_law, "normal", n)["pearson"]
    for alpha in ALPHAS:
        _assert_level(p, alpha, f"pearson, {x_law} x normal, n={n}")


@pytest.mark.slow
@pytest.mark.parametrize("n", SIZES)
@pytest.mark.parametrize("law", ["scores"])
def test_pearson_holds_its_level_on_bounded_scores(law, n):
    p = _pvalues(law, law, n)["pearson"]
    for alpha in ALPHAS:
        _assert_level(p, alpha, f"pearson, {law} x {law}, n={n}")


PERM_REPS = 2000


@pytest.mark.slow
@pytest.mark.parametrize("law", ["lognormal", "t3"])
def test_pearson_permutation_pvalue_holds_its_level_where_the_t_test_drifts(law):
    # Under independence the permutation test is exact in level for any margins
    # (Fisher 1935 / Pitman 1937, common practice); checked where the t-test drifts.
    rng = np.random.default_rng([SEED, 99, len(law)])
    x = MARGINALS[law](rng, (PERM_REPS, 30))
    y = MARGINALS[law](rng, (PERM_REPS, 30))
    p = np.array([linear.pearson(x[i], y[i], permutations=199, seed=i).p_value for i in range(PERM_REPS)])
    for alpha in ALPHAS:
        # Reference: scipy.stats.binom.ppf, central 99% interval; p-values on the grid k/200.
        lo, hi = int(stats.binom.ppf(0.005, PERM_REPS, alpha)), int(stats.binom.ppf(0.995, PERM_REPS, alpha))
        assert lo <= int(np.count_nonzero(p <= alpha + 1e-12)) <= hi


def test_pearson_permutation_pvalue_agrees_with_scipy_permutation_test():
    rng = np.random.default_rng(5)
    x = rng.lognormal(size=40)
    y = 0.15 * x + rng.lognormal(size=40)
    ours = linear.pearson(x, y, permutations=20000, seed=3).p_value
    # Reference: scipy.stats.permutation_test (pairings) with the same statistic |r|, upper tail.
    ref = stats.permutation_test((y,), lambda v: abs(stats.pearsonr(x, v).statistic), permutation_type="pairings",
                                 n_resamples=20000, alternative="greater", random_state=4).pvalue
    # Two Monte Carlo estimates of the same p: 4 standard errors of the difference.
    se = np.sqrt(2 * ref * (1 - ref) / 20000)
    assert abs(ours - ref) <= 4 * se + 1e-4
