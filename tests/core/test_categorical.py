"""Measures of pairs with a categorical side (issue 18): references, hand-worked values, levels.

Sources are named beside each check: scipy.stats (chi2_contingency, contingency.association,
f_oneway, kruskal), the dcor package, and Bergsma (2013) J. Korean Stat. Soc. 42:323-328
(doi:10.1016/j.jkss.2012.10.002) for the bias-corrected V.
"""

import math

import dcor as dcor_ref
import numpy as np
import pytest
import scipy.stats

from pairlens import config
from pairlens.core import categorical
from pairlens.core.registry import MEASURES, PairContext, measures_for

CAT = ("categorical", "categorical")
NUM_CAT = ("numeric", "categorical")
CAT_NUM = ("categorical", "numeric")


def _ctx(kinds, seed=7, permutations=0):
    return PairContext(permutations=permutations, seed=np.random.SeedSequence(seed), kinds=kinds)


def _groups(values, codes):
    return [values[codes == g] for g in np.unique(codes)]


# --- Cramér's V and the chi-square test ---------------------------------------------------

@pytest.mark.parametrize("seed", range(4))
def test_cramer_v_and_chi2_match_scipy(seed):
    rng = np.random.default_rng(seed)
    n = 300
    a = rng.integers(0, 3, n).astype(float)
    b = np.where(rng.random(n) < 0.3, a, rng.integers(0, 4, n)).astype(float)
    table = categorical.contingency(a, b)
    # Reference: scipy.stats.contingency.association(method="cramer") (uncorrected V)
    v, _ = categorical.bergsma_v(table)
    assert v == pytest.approx(scipy.stats.contingency.association(table, method="cramer"), rel=1e-12)
    # Reference: scipy.stats.chi2_contingency without Yates' correction (statistic, p-value, df)
    stat, p, df, _ = scipy.stats.chi2_contingency(table, correction=False)
    res = MEASURES["cramer_v"].compute(a, b, _ctx(CAT))
    assert res.p_value == pytest.approx(p, rel=1e-9)
    assert f"{df} df" in res.method and "chi-square test" in res.method
    assert res.n == n


def test_bergsma_correction_on_a_hand_worked_table():
    # Hand-worked (Bergsma 2013, eqs. for phi~^2, r~, k~), table [[10, 5, 5], [4, 8, 8]], n = 40:
    #   row totals 20, 20; column totals 14, 13, 13; expected 7, 6.5, 6.5 in both rows
    #   chi^2 = 2 * 3^2/7 + 4 * 1.5^2/6.5 = 18/7 + 18/13 = 360/91;   phi^2 = chi^2/n = 9/91
    #   V = sqrt(phi^2 / min(1, 2)) = sqrt(9/91) = 0.314485...
    #   phi~^2 = 9/91 - (1 * 2)/39 = 13/273 = 1/21
    #   r~ = 2 - 1/39, k~ = 3 - 4/39;  min(r~ - 1, k~ - 1) = 38/39
    #   V~ = sqrt((1/21) / (38/39)) = sqrt(13/266) = 0.221070...
    table = np.array([[10, 5, 5], [4, 8, 8]])
    v, vc = categorical.bergsma_v(table)
    assert v == pytest.approx(math.sqrt(9 / 91), rel=1e-12)
    assert vc == pytest.approx(math.sqrt(13 / 266), rel=1e-12)
    # the same table through the registry from row-level codes
    x = np.repeat([0.0, 0.0, 0.0, 1.0, 1.0, 1.0], [10, 5, 5, 4, 8, 8])
    y = np.repeat([0.0, 1.0, 2.0, 0.0, 1.0, 2.0], [10, 5, 5, 4, 8, 8])
    res = MEASURES["cramer_v"].compute(x, y, _ctx(CAT))
    assert res.estimate == pytest.approx(math.sqrt(13 / 266), rel=1e-12)
    # Reference: scipy.stats.chi2_contingency(correction=False) gives the same chi^2 = 360/91
    assert scipy.stats.chi2_contingency(table, correction=False)[0] == pytest.approx(360 / 91, rel=1e-12)


def test_bergsma_v_is_zero_when_chi2_is_below_its_null_mean():
    # Bergsma (2013): phi~^2 = max(0, phi^2 - (r-1)(k-1)/(n-1)); a perfectly balanced table has chi^2 = 0
    table = np.array([[5, 5], [5, 5]])
    assert categorical.bergsma_v(table) == (0.0, 0.0)


def test_small_expected_counts_switch_to_permutations():
    rng = np.random.default_rng(3)
    a = rng.integers(0, 3, 15).astype(float)
    b = rng.integers(0, 3, 15).astype(float)
    res = MEASURES["cramer_v"].compute(a, b, _ctx(CAT))
    assert "permutation" in res.method
    # Reference: the permutation p-value of chi^2 is close to the exact conditional law; compare with
    # scipy.stats.chi2_contingency's statistic by recomputing it on scipy's side for the observed table
    stat = scipy.stats.chi2_contingency(categorical.contingency(a, b), correction=False)[0]
    draws = np.random.default_rng(99)
    null = [scipy.stats.chi2_contingency(categorical.contingency(a, draws.permutation(b)), correction=False)[0]
            for _ in range(3000)]
    assert res.p_value == pytest.approx(np.mean(np.array(null) >= stat - 1e-9), abs=0.04)


def test_cramer_v_degenerate_is_nan_with_reason():
    res = MEASURES["cramer_v"].compute(np.zeros(20), np.arange(20.0) % 3, _ctx(CAT))
    assert math.isnan(res.estimate) and "one level" in res.note


# --- eta, F and Kruskal-Wallis ---------------------------------------------------------------

@pytest.mark.parametrize("seed", range(4))
def test_eta_and_f_match_scipy_f_oneway(seed):
    rng = np.random.default_rng(10 + seed)
    n = 150
    g = rng.choice(4, n, p=[0.4, 0.3, 0.2, 0.1]).astype(float)
    v = rng.exponential(size=n) + 0.3 * g
    res = MEASURES["eta"].compute(v, g, _ctx(NUM_CAT))
    # Reference: scipy.stats.f_oneway (one-way ANOVA F and p-value)
    f, p = scipy.stats.f_oneway(*_groups(v, g))
    assert res.p_value == pytest.approx(p, rel=1e-9)
    assert f"{f:.4g}" in res.method
    # Reference: eta^2 = SS_between / SS_total (Pearson 1903), computed here from group means
    ss_b = sum(len(x) * (x.mean() - v.mean()) ** 2 for x in _groups(v, g))
    ss_t = ((v - v.mean()) ** 2).sum()
    assert res.estimate == pytest.approx(math.sqrt(ss_b / ss_t), rel=1e-12)
    # the same pair in the other order gives the same row (eta explains the numeric side)
    assert MEASURES["eta"].compute(g, v, _ctx(CAT_NUM)).estimate == pytest.approx(res.estimate, rel=1e-14)
    # Reference: omega^2 = (SS_b - (k-1) MS_w) / (SS_t + MS_w) (Hays 1963), from the scipy F:
    # MS_w = SS_b / ((k-1) F)
    k = 4
    ms_w = ss_b / ((k - 1) * f)
    omega2 = (ss_b - (k - 1) * ms_w) / (ss_t + ms_w)
    assert categorical.correlation_ratio(v, g).omega2 == pytest.approx(omega2, rel=1e-9)


@pytest.mark.parametrize("seed", range(4))
def test_kruskal_matches_scipy(seed):
    rng = np.random.default_rng(20 + seed)
    n = 120
    g = rng.integers(0, 3, n).astype(float)
    v = np.round(rng.normal(size=n) + 0.4 * g, 1)   # rounded: ties, so the tie correction matters
    res = MEASURES["kruskal"].compute(g, v, _ctx(CAT_NUM))
    # Reference: scipy.stats.kruskal (tie-corrected H, chi-square k-1 df)
    h, p = scipy.stats.kruskal(*_groups(v, g))
    assert res.p_value == pytest.approx(p, rel=1e-9)
    assert res.estimate == pytest.approx(math.sqrt(h / (n - 1)), rel=1e-12)


def test_kruskal_small_groups_use_permutations():
    rng = np.random.default_rng(5)
    g = np.repeat([0.0, 1.0, 2.0], 4)
    v = rng.normal(size=12)
    res = MEASURES["kruskal"].compute(v, g, _ctx(NUM_CAT))
    assert "permutation" in res.method
    # Reference: scipy.stats.kruskal's H, its permutation law by scipy.stats.permutation_test
    ref = scipy.stats.permutation_test(
        _groups(v, g), lambda *s: scipy.stats.kruskal(*s).statistic, permutation_type="independent",
        n_resamples=4000, alternative="greater", random_state=1)
    assert res.p_value == pytest.approx(ref.pvalue, abs=0.04)


def test_eta_degenerate_cases_are_nan_with_reason():
    g = np.repeat([0.0, 1.0], 10)
    assert "constant" in MEASURES["eta"].compute(np.ones(20), g, _ctx(NUM_CAT)).note
    assert "one level" in MEASURES["eta"].compute(np.arange(20.0), np.zeros(20), _ctx(NUM_CAT)).note
    assert "constant" in MEASURES["kruskal"].compute(np.ones(20), g, _ctx(NUM_CAT)).note


# --- distance correlation under the discrete metric --------------------------------------------

def test_discrete_embedding_gives_the_discrete_metric():
    codes = np.array([0.0, 1.0, 2.0, 1.0, 4.0])
    e = categorical.discrete_embedding(codes)
    d = np.sqrt(((e[:, None, :] - e[None, :, :]) ** 2).sum(axis=2))
    # discrete metric: 0 on equal levels, 1 otherwise (definition)
    np.testing.assert_allclose(d, (codes[:, None] != codes[None, :]).astype(float), rtol=0, atol=1e-15)


def test_dcor_on_categorical_sides_matches_the_dcor_package():
    rng = np.random.default_rng(6)
    n = 200
    g = rng.integers(0, 4, n).astype(float)
    h = np.where(rng.random(n) < 0.4, g, rng.integers(0, 3, n)).astype(float)
    v = np.sin(g) + rng.normal(size=n)
    onehot_g = (g[:, None] == np.unique(g)[None, :]).astype(float)
    onehot_h = (h[:, None] == np.unique(h)[None, :]).astype(float)
    # Reference: dcor.distance_correlation on the levels as indicator vectors; the scale 1/sqrt(2)
    # cancels in the ratio, so any common scale gives the same value.
    assert MEASURES["dcor"].compute(v, g, _ctx(NUM_CAT)).estimate == pytest.approx(
        dcor_ref.distance_correlation(v, onehot_g), rel=1e-9)
    assert MEASURES["dcor"].compute(g, h, _ctx(CAT)).estimate == pytest.approx(
        dcor_ref.distance_correlation(onehot_g, onehot_h), rel=1e-9)
    # Reference: dcor.u_distance_correlation_sqr for the bias-corrected square
    assert MEASURES["dcor_bc"].compute(g, v, _ctx(CAT_NUM)).estimate == pytest.approx(
        dcor_ref.u_distance_correlation_sqr(onehot_g, v), rel=1e-9)


def test_dcor_of_a_two_level_column_matches_the_dcor_package():
    # two levels take the univariate path (one 0/1 column: the same discrete metric)
    rng = np.random.default_rng(16)
    g = rng.integers(0, 2, 150).astype(float) * 3.0 + 1.0     # codes 1 and 4: only equality matters
    v = g + rng.normal(size=150)
    onehot = (g[:, None] == np.unique(g)[None, :]).astype(float)
    # Reference: dcor.distance_correlation on the indicator vectors
    assert MEASURES["dcor"].compute(g, v, _ctx(CAT_NUM)).estimate == pytest.approx(
        dcor_ref.distance_correlation(onehot, v), rel=1e-9)


# --- the registry's kinds --------------------------------------------------------------------

def test_registry_kinds_pick_the_measures_of_each_pair():
    every = tuple(MEASURES)
    assert set(measures_for(every, "numeric", "numeric")) == {"pearson", "spearman", "kendall", "dcor", "dcor_bc", "xi"}
    assert set(measures_for(every, "numeric", "categorical")) == {"eta", "kruskal", "dcor", "dcor_bc"}
    assert measures_for(every, "categorical", "numeric") == measures_for(every, "numeric", "categorical")
    assert set(measures_for(every, "categorical", "categorical")) == {"cramer_v", "dcor", "dcor_bc"}
    assert set(config.DEFAULT_CATEGORICAL_MEASURES) <= set(MEASURES)


@pytest.mark.parametrize("name", ["cramer_v", "eta", "kruskal"])
def test_categorical_measures_bounds_and_symmetry(name):
    rng = np.random.default_rng(8)
    n = 90
    g = rng.integers(0, 3, n).astype(float)
    other = (rng.integers(0, 4, n) if name == "cramer_v" else rng.normal(size=n) + g).astype(float)
    kinds = CAT if name == "cramer_v" else CAT_NUM
    m = MEASURES[name]
    a = m.compute(g, other, _ctx(kinds))
    b = m.compute(other, g, _ctx(kinds[::-1]))
    assert m.lower <= a.estimate <= m.upper and 0 <= a.p_value <= 1
    assert a.estimate == pytest.approx(b.estimate, rel=1e-12)
    # relabelling the levels changes nothing (the levels have no order)
    relabelled = np.array([2.0, 0.0, 1.0])[g.astype(int)]
    assert m.compute(relabelled, other, _ctx(kinds)).estimate == pytest.approx(a.estimate, rel=1e-12)


# --- levels under independence ---------------------------------------------------------------

def _binomial_99(reps, alpha):
    # Reference: scipy.stats.binom quantiles, the central 99% range of the rejection count
    return scipy.stats.binom.ppf(0.005, reps, alpha), scipy.stats.binom.ppf(0.995, reps, alpha)


def _levels(draw, compute, reps, seed):
    rng = np.random.default_rng(seed)
    p = np.array([compute(*draw(rng), k) for k in range(reps)])
    assert not np.isnan(p).any()
    for alpha in (0.05, 0.01):
        low, high = _binomial_99(reps, alpha)
        count = int((p <= alpha).sum())
        assert low <= count <= high, (alpha, count, (low, high))


def _run(name, kinds, permutations=0):
    def compute(x, y, k):
        return MEASURES[name].compute(x, y, _ctx(kinds, seed=1000 + k, permutations=permutations)).p_value
    return compute


def test_level_chi2_asymptotic_under_independence():
    # 200 rows in a 3 x 4 table: the smallest expected count is about 10, so the chi-square law is used
    def draw(rng):
        return rng.choice(3, 200, p=[0.5, 0.3, 0.2]).astype(float), rng.integers(0, 4, 200).astype(float)
    _levels(draw, _run("cramer_v", CAT), 2000, 1)


def test_level_chi2_permutation_under_independence():
    # 25 rows in a 3 x 3 table: Cochran's rule fails, so every replicate takes the permutation test
    # (199 relabellings here to keep the run short; the test is exact for any B)
    def draw(rng):
        return rng.choice(3, 25, p=[0.6, 0.3, 0.1]).astype(float), rng.integers(0, 3, 25).astype(float)
    _levels(draw, _run("cramer_v", CAT, permutations=199), 1000, 2)


@pytest.mark.parametrize("margin", ["normal", "exponential"])
def test_level_anova_f_under_independence(margin):
    def draw(rng):
        v = rng.normal(size=60) if margin == "normal" else rng.exponential(size=60)
        return v, rng.choice(3, 60, p=[0.5, 0.3, 0.2]).astype(float)
    _levels(draw, _run("eta", NUM_CAT), 2000, 3)


def test_level_kruskal_under_independence():
    def draw(rng):
        return rng.integers(0, 3, 60).astype(float), np.round(rng.exponential(size=60), 1)
    _levels(draw, _run("kruskal", CAT_NUM), 2000, 4)


def test_level_kruskal_permutation_under_independence():
    def draw(rng):
        return rng.normal(size=12), np.repeat([0.0, 1.0, 2.0], 4)
    _levels(draw, _run("kruskal", NUM_CAT, permutations=199), 1000, 5)


@pytest.mark.parametrize("kinds", [NUM_CAT, CAT])
def test_level_dcor_discrete_metric_under_independence(kinds):
    def draw(rng):
        x = rng.exponential(size=50) if kinds[0] == "numeric" else rng.integers(0, 3, 50).astype(float)
        return x, rng.choice(4, 50, p=[0.4, 0.3, 0.2, 0.1]).astype(float)
    _levels(draw, _run("dcor", kinds), 1500, 6)
