"""Pearson, Spearman and Kendall against scipy.stats, statsmodels and published formulas."""

from __future__ import annotations

import itertools
import math
import warnings
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.multitest import multipletests

from pairlens import config
from pairlens.core import linear, rank
from pairlens.core.testing import adjust_pvalues

REL = 1e-9
P_ABS = 1e-6


def _table(n: int, seed: int, missing_fraction: float = 0.1) -> dict[str, np.ndarray]:
    """Columns with ties, integer scores, monotone transforms, offsets and missing values."""
    rng = np.random.default_rng(seed)
    base = rng.normal(size=n)
    cols = {
        "normal": base,
        "linear": 2.0 * base + rng.normal(size=n),
        "rounded": np.round(base + rng.normal(scale=0.7, size=n), 1),       # ties
        "score": np.clip(np.round(2.0 * base + 3 + rng.normal(size=n)), 1, 5),  # integer score 1..5
        "exp_of_normal": np.exp(base),                                       # monotone transform
        "cubed": base ** 3,                                                  # monotone transform
        "offset": 1e6 + rng.normal(size=n) + 0.3 * base,                     # large offset
        "lognormal": rng.lognormal(size=n),
        "noise": rng.standard_t(3, size=n),
        # Independent, heavily tied columns: moderate p-values that depend on every tie term.
        "grade": rng.integers(1, 4, size=n),
        "coarse": np.round(rng.normal(size=n)),
        "weak_score": np.clip(np.round(0.15 * base + rng.normal(size=n)), -2, 2),
    }
    for name, values in cols.items():
        values = values.astype(float)
        values[rng.uniform(size=n) < missing_fraction] = np.nan
        cols[name] = values
    return cols


def _complete(x, y):
    keep = ~np.isnan(x) & ~np.isnan(y)
    return x[keep], y[keep]


def _bonett_wright_interval(rho, n, confidence):
    # Bonett & Wright (2000), Psychometrika 65:23-28, eq. for Spearman: var(atanh rho) ~ (1 + rho^2/2)/(n-3).
    z = stats.norm.ppf((1 + confidence) / 2)
    se = math.sqrt((1 + rho ** 2 / 2) / (n - 3))
    if abs(rho) == 1.0:
        return rho, rho  # limit of the formula as |rho| -> 1
    return math.tanh(math.atanh(rho) - z * se), math.tanh(math.atanh(rho) + z * se)


def _fhp_interval(tau, n, confidence):
    # Fieller, Hartley & Pearson (1957), Biometrika 44:470-481: var(atanh tau) ~ 0.437/(n-4).
    z = stats.norm.ppf((1 + confidence) / 2)
    se = math.sqrt(0.437 / (n - 4))
    if abs(tau) == 1.0:
        return tau, tau  # limit of the formula as |tau| -> 1
    return math.tanh(math.atanh(tau) - z * se), math.tanh(math.atanh(tau) + z * se)


TABLES = [(_table(300, 1), 300), (_table(80, 2), 80), (_table(60, 3, missing_fraction=0.0), 60)]
PAIRS = [(t, a, b) for t, _ in TABLES for a, b in itertools.combinations(t, 2)]


# --- single pairs against scipy ----------------------------------------------------------

@pytest.mark.parametrize("confidence", [0.9, 0.95])
def test_pearson_matches_scipy_on_generated_tables(confidence):
    for table, a, b in PAIRS:
        x, y = _complete(table[a], table[b])
        res = linear.pearson(table[a], table[b], confidence=confidence, test="t")
        ref = stats.pearsonr(x, y)                       # Reference: scipy.stats.pearsonr
        ci = ref.confidence_interval(confidence)          # Reference: scipy Fisher z interval
        assert res.n == x.size
        assert res.estimate == pytest.approx(ref.statistic, rel=REL, abs=1e-12), (a, b)
        assert res.p_value == pytest.approx(ref.pvalue, rel=REL, abs=P_ABS), (a, b)
        assert res.ci_low == pytest.approx(ci.low, rel=REL, abs=1e-12), (a, b)
        assert res.ci_high == pytest.approx(ci.high, rel=REL, abs=1e-12), (a, b)
        assert res.method == "t, n-2 df" and res.note == ""


def test_pearson_small_pvalues_keep_relative_precision():
    rng = np.random.default_rng(9)
    x = rng.normal(size=500)
    y = x + 0.3 * rng.normal(size=500)
    res = linear.pearson(x, y, test="t")
    ref = stats.pearsonr(x, y)  # Reference: scipy.stats.pearsonr (beta-distribution tail)
    assert ref.pvalue < 1e-100
    assert res.p_value == pytest.approx(ref.pvalue, rel=1e-8)


@pytest.mark.parametrize("confidence", [0.9, 0.95])
def test_spearman_matches_scipy_on_generated_tables(confidence):
    for table, a, b in PAIRS:
        x, y = _complete(table[a], table[b])
        res = rank.spearman(table[a], table[b], confidence=confidence, seed=1)
        ref = stats.spearmanr(x, y)                      # Reference: scipy.stats.spearmanr
        assert res.n == x.size
        assert res.estimate == pytest.approx(ref.statistic, rel=REL, abs=1e-12), (a, b)
        low, high = _bonett_wright_interval(ref.statistic, x.size, confidence)
        assert res.ci_low == pytest.approx(low, rel=REL, abs=1e-12), (a, b)
        assert res.ci_high == pytest.approx(high, rel=REL, abs=1e-12), (a, b)
        tied = len(np.unique(x)) < x.size or len(np.unique(y)) < y.size
        if x.size >= config.SPEARMAN_T_MIN_N or (tied and x.size > config.SPEARMAN_TIED_PERMUTATION_MAX_N):
            # scipy's p-value is the t approximation; below SPEARMAN_T_MIN_N rows the permutation
            # law is used instead (tests/test_small_samples.py checks it against enumeration)
            assert res.p_value == pytest.approx(ref.pvalue, rel=REL, abs=P_ABS), (a, b)
            assert res.method == "t approximation, n-2 df"
        else:
            assert res.method != "t approximation, n-2 df"


@pytest.mark.parametrize("confidence", [0.9, 0.95])
def test_kendall_matches_scipy_on_generated_tables(confidence):
    for table, a, b in PAIRS:
        x, y = _complete(table[a], table[b])
        res = rank.kendall(table[a], table[b], confidence=confidence)
        ref = stats.kendalltau(x, y)                     # Reference: scipy.stats.kendalltau (tau-b, auto)
        assert res.n == x.size
        assert res.estimate == pytest.approx(ref.statistic, rel=REL, abs=1e-12), (a, b)
        assert res.p_value == pytest.approx(ref.pvalue, rel=REL, abs=P_ABS), (a, b)
        low, high = _fhp_interval(ref.statistic, x.size, confidence)
        assert res.ci_low == pytest.approx(low, rel=REL, abs=1e-12), (a, b)
        assert res.ci_high == pytest.approx(high, rel=REL, abs=1e-12), (a, b)
        # scipy.stats.kendalltau(method="auto") rule: exact only without ties and with n <= 33 or
        # at most one discordant (or concordant) pair; untied, D = n0 (1 - tau) / 2.
        n0 = x.size * (x.size - 1) // 2
        untied = np.unique(x).size == x.size and np.unique(y).size == y.size
        discordant = round(n0 * (1 - ref.statistic) / 2)
        exact = untied and (x.size <= 33 or min(discordant, n0 - discordant) <= 1)
        assert res.method == ("exact" if exact else "normal, tie-corrected variance"), (a, b)


def test_rank_measures_see_through_monotone_transforms():
    table, _ = TABLES[0]
    x, y = _complete(table["normal"], table["exp_of_normal"])
    # Reference: scipy.stats.spearmanr / kendalltau give exactly 1 for a strictly increasing relation.
    assert rank.spearman(x, y).estimate == pytest.approx(stats.spearmanr(x, y).statistic, abs=1e-12)
    assert rank.spearman(x, y).estimate == pytest.approx(1.0, abs=1e-12)
    assert rank.kendall(x, y).estimate == pytest.approx(stats.kendalltau(x, y).statistic, abs=1e-12)
    assert rank.kendall(x, y).estimate == 1.0   # one square root of an exact integer product
    # Pearson is not invariant: r(x, exp x) < 1 (Reference: scipy.stats.pearsonr agrees on the value).
    assert linear.pearson(x, y).estimate == pytest.approx(stats.pearsonr(x, y).statistic, rel=REL)
    assert linear.pearson(x, y).estimate < 0.9


@pytest.mark.parametrize("method", ["bh", "holm"])
@pytest.mark.parametrize("measure", ["pearson", "spearman", "kendall"])
def test_qvalues_over_a_table_match_references(measure, method):
    table, _ = TABLES[0]
    # the t-test (test="t") is the option that equals scipy.stats.pearsonr
    ours = {"pearson": lambda x, y: linear.pearson(x, y, test="t"), "spearman": rank.spearman,
            "kendall": rank.kendall}[measure]
    ref_fn = {"pearson": stats.pearsonr, "spearman": stats.spearmanr, "kendall": stats.kendalltau}[measure]
    names = list(table)
    p_ours, p_ref = [], []
    for a, b in itertools.combinations(names, 2):
        p_ours.append(ours(table[a], table[b]).p_value)
        p_ref.append(ref_fn(*_complete(table[a], table[b])).pvalue)
    q = adjust_pvalues(np.array(p_ours), method)
    # Reference: scipy.stats.false_discovery_control (bh) and statsmodels multipletests (holm).
    q_ref = (stats.false_discovery_control(p_ref, method="bh") if method == "bh"
             else multipletests(p_ref, method="holm")[1])
    np.testing.assert_allclose(q, q_ref, rtol=REL, atol=P_ABS)


# --- Kendall exact p-values and counts ---------------------------------------------------

@pytest.mark.parametrize("n", [3, 4, 5, 8, 12, 20, 33])
def test_kendall_exact_pvalues_match_scipy(n):
    rng = np.random.default_rng(100 + n)
    for strength in (0.0, 0.5, 2.0, 20.0):
        x = rng.normal(size=n)
        y = strength * x + rng.normal(size=n)
        res = rank.kendall(x, y)
        ref = stats.kendalltau(x, y, method="auto")   # Reference: scipy exact branch (n <= 33, no ties)
        assert res.method == "exact"
        assert res.estimate == pytest.approx(ref.statistic, rel=REL, abs=1e-12)
        assert res.p_value == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-12)


def test_kendall_exact_rule_beyond_33_rows():
    rng = np.random.default_rng(77)
    x = np.sort(rng.normal(size=60))
    y = x.copy()
    y[[10, 11]] = y[[11, 10]]                          # exactly one discordant pair
    res = rank.kendall(x, y)
    ref = stats.kendalltau(x, y)                      # Reference: scipy uses exact when min(D, C) <= 1
    assert res.method == "exact"
    assert res.p_value == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)
    z = rng.normal(size=60)
    assert rank.kendall(x, z).method == "normal, tie-corrected variance"
    assert rank.kendall(x, z).p_value == pytest.approx(stats.kendalltau(x, z).pvalue, rel=1e-9, abs=P_ABS)


def test_kendall_exact_pvalue_small_closed_forms():
    # Worked example (closed form): n = 4, all 24 permutations equally likely; D = 0 has
    # probability 1/24, so the two-sided p-value is 2/24.
    assert rank.kendall_exact_pvalue(4, 0) == pytest.approx(2 / 24, rel=1e-15)
    # D <= 1: the identity and the 3 adjacent transpositions -> 2 * 4/24.
    assert rank.kendall_exact_pvalue(4, 1) == pytest.approx(8 / 24, rel=1e-15)
    # Mahonian numbers for n = 4 are 1, 3, 5, 6, 5, 3, 1 (OEIS A008302): P(D <= 2) = 9/24.
    assert rank.kendall_exact_pvalue(4, 2) == pytest.approx(18 / 24, rel=1e-15)
    assert rank.kendall_exact_pvalue(4, 3) == 1.0


def test_knight_equals_naive_on_many_tied_arrays():
    rng = np.random.default_rng(2026)
    for trial in range(300):
        n = int(rng.integers(2, 120))
        levels_x = int(rng.integers(1, 12))
        levels_y = int(rng.integers(1, 12))
        x = rng.integers(0, levels_x, size=n).astype(float)
        y = (rng.integers(0, levels_y, size=n) + (x if trial % 3 == 0 else 0)).astype(float)
        if trial % 5 == 0:
            y = -y                                        # strong discordance
        fast = rank.kendall_counts(x, y, method="knight")
        slow = rank.kendall_counts(x, y, method="naive")
        # Exact integer equality (common practice for an oracle of counts).
        assert fast == slow, (trial, fast, slow)


def test_knight_counts_match_scipy_tau_on_large_tied_data():
    rng = np.random.default_rng(31)
    x = rng.integers(0, 50, size=20_000).astype(float)
    y = np.round(x / 7 + rng.normal(size=20_000), 1)
    res = rank.kendall(x, y)
    ref = stats.kendalltau(x, y)                          # Reference: scipy.stats.kendalltau
    assert res.estimate == pytest.approx(ref.statistic, rel=REL)
    assert res.p_value == pytest.approx(ref.pvalue, rel=1e-9, abs=P_ABS)


def test_knight_kernel_accepts_presorted_rows():
    rng = np.random.default_rng(6)
    x = rng.integers(0, 9, size=500).astype(float)
    y = rng.integers(0, 9, size=500).astype(float)
    order = np.argsort(x, kind="stable")        # y left unsorted within tied x
    y_by_x = y[order].copy()
    counts = rank.knight_counts(x[order], y_by_x)
    naive = rank.kendall_counts(x, y, method="naive")
    assert [int(c) for c in counts[:4]] == [naive.discordant, naive.tied_x, naive.tied_y, naive.tied_xy]
    assert [float(c) for c in counts[4:]] == [naive.x_t3, naive.x_t5, naive.y_t3, naive.y_t5]
    np.testing.assert_array_equal(y_by_x, y[order])   # the kernel works on a copy


# --- midranks and matrices ---------------------------------------------------------------

def test_midranks_match_scipy_rankdata():
    rng = np.random.default_rng(12)
    for values in (rng.normal(size=500), rng.integers(0, 7, size=500).astype(float),
                   np.round(rng.normal(size=1000), 1), np.array([5.0]), np.array([2.0, 2.0, 2.0])):
        # Reference: scipy.stats.rankdata(method="average").
        np.testing.assert_array_equal(rank.midranks(values), stats.rankdata(values, method="average"))


def test_midranks_leave_nan_out():
    values = np.array([3.0, np.nan, 1.0, 3.0])
    out = rank.midranks(values)
    assert np.isnan(out[1])
    # Reference: scipy.stats.rankdata on the non-missing values.
    np.testing.assert_array_equal(out[[0, 2, 3]], stats.rankdata([3.0, 1.0, 3.0]))


def _offset_missing_data(seed, n=400, p=7, missing=0.1):
    rng = np.random.default_rng(seed)
    latent = rng.normal(size=(n, 1))
    data = rng.normal(size=(n, p)) + 0.7 * latent
    data *= np.array([1.0, 1e-3, 50.0, 1.0, 2.0, 1.0, 1e4])[:p]
    data += np.array([1e6, 0.0, -1e6, 3.0, 1e6, 0.0, 1e8])[:p]
    data[:, 3] = np.round(data[:, 3])                     # heavy ties
    data[rng.uniform(size=data.shape) < missing] = np.nan
    return data


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_pearson_matrix_pairwise_matches_per_pair_pearsonr(seed):
    data = _offset_missing_data(seed)
    r, n_used = linear.pearson_matrix(data, missing="pairwise")
    p = data.shape[1]
    for i, j in itertools.combinations(range(p), 2):
        x, y = _complete(data[:, i], data[:, j])
        assert n_used[i, j] == n_used[j, i] == x.size
        # Reference: scipy.stats.pearsonr on the pair's complete rows.
        assert r[i, j] == pytest.approx(stats.pearsonr(x, y).statistic, rel=1e-9, abs=1e-12), (i, j)
        assert r[j, i] == r[i, j]
    np.testing.assert_array_equal(np.diag(r), np.ones(p))


def _exact_r(x, y):
    # Reference: the definition of r evaluated in exact rational arithmetic (Python fractions).
    fx = [Fraction(float(v)) for v in x]
    fy = [Fraction(float(v)) for v in y]
    mx, my = sum(fx) / len(fx), sum(fy) / len(fy)
    sxy = sum((a - mx) * (b - my) for a, b in zip(fx, fy))
    sxx = sum((a - mx) ** 2 for a in fx)
    syy = sum((b - my) ** 2 for b in fy)
    return math.copysign(math.sqrt(sxy * sxy / (sxx * syy)), sxy)


def test_large_offsets_agree_with_exact_arithmetic():
    rng = np.random.default_rng(44)
    n = 250
    latent = rng.normal(size=n)
    data = np.column_stack([1e12 + latent + rng.normal(size=n), 1e12 + latent + rng.normal(size=n),
                            -3e9 + 1e-3 * (latent + rng.normal(size=n))])
    data[rng.uniform(size=data.shape) < 0.1] = np.nan
    r, _ = linear.pearson_matrix(data)
    for i, j in itertools.combinations(range(3), 2):
        x, y = _complete(data[:, i], data[:, j])
        exact = _exact_r(x, y)
        assert r[i, j] == pytest.approx(exact, rel=1e-12), (i, j)
        assert linear.pearson(x, y).estimate == pytest.approx(exact, rel=1e-12), (i, j)


@pytest.mark.filterwarnings("error")
@pytest.mark.parametrize("scale", [1e-300, 1e-150, 1e150, 1e300])
def test_extreme_units_without_overflow(scale):
    rng = np.random.default_rng(45)
    x = rng.normal(size=200)
    y = x + rng.normal(size=200)
    # r is scale-free (common practice): the same value in any unit, and no overflow warnings.
    reference = stats.pearsonr(x, y).statistic           # Reference: scipy.stats.pearsonr in unit scale
    assert linear.pearson(scale * x, scale * y).estimate == pytest.approx(reference, rel=1e-12)
    r, _ = linear.pearson_matrix(np.column_stack([scale * x, scale * y]))
    assert r[0, 1] == pytest.approx(reference, rel=1e-12)


def test_pearson_matrix_complete_policy_matches_numpy_corrcoef():
    data = _offset_missing_data(4)
    r, n_used = linear.pearson_matrix(data, missing="complete")
    rows = ~np.isnan(data).any(axis=1)
    # Reference: numpy.corrcoef on the complete rows.
    np.testing.assert_allclose(r, np.corrcoef(data[rows], rowvar=False), rtol=1e-9, atol=1e-12)
    assert (n_used == rows.sum()).all()


@pytest.mark.filterwarnings("error")
def test_pearson_matrix_degenerate_pairs_are_nan():
    rng = np.random.default_rng(8)
    n = 50
    data = np.column_stack([
        rng.normal(size=n),
        np.full(n, 4.2),                  # constant everywhere
        rng.normal(size=n),
        np.full(n, np.nan),               # all missing
        rng.normal(size=n),
    ])
    data[:25, 2] = 7.0                    # constant on the rows where column 4 is present
    data[25:, 4] = np.nan
    data[:, 4][:2] = np.nan               # leaves column 4 with 23 rows
    r, n_used = linear.pearson_matrix(data)
    assert np.isnan(r[1]).all() and np.isnan(r[:, 1]).all()
    assert np.isnan(r[3]).all() and (n_used[3] == 0).all()
    assert np.isnan(r[2, 4]) and np.isnan(r[4, 2])          # column 2 constant on the shared rows
    x, y = _complete(data[:, 0], data[:, 4])
    assert r[0, 4] == pytest.approx(stats.pearsonr(x, y).statistic, rel=1e-9)  # Reference: scipy.stats.pearsonr
    few = np.array([[1.0, 2.0], [2.0, np.nan], [3.0, 1.0], [4.0, 5.0]])
    r_few, n_few = linear.pearson_matrix(few)
    assert n_few[0, 1] == 3 and not np.isnan(r_few[0, 1])
    few[3, 1] = np.nan
    r_few, n_few = linear.pearson_matrix(few)
    assert n_few[0, 1] == 2 and np.isnan(r_few[0, 1])        # fewer than 3 rows


def test_spearman_matrix_matches_scipy():
    rng = np.random.default_rng(13)
    base = rng.normal(size=(150, 1))
    data = np.column_stack([base[:, 0], np.exp(base[:, 0]), np.round(base[:, 0] + rng.normal(size=150)),
                            rng.integers(0, 4, size=150), rng.normal(size=150)]).astype(float)
    rho, n_used = rank.spearman_matrix(data)
    # Reference: scipy.stats.spearmanr on the whole matrix.
    np.testing.assert_allclose(rho, stats.spearmanr(data).statistic, rtol=1e-9, atol=1e-12)
    assert (n_used == 150).all()
    with pytest.raises(ValueError):
        rank.spearman_matrix(np.where(data > 2, np.nan, data))


# --- degenerate input ----------------------------------------------------------------

MEASURES = {"pearson": linear.pearson, "spearman": rank.spearman, "kendall": rank.kendall}


@pytest.mark.filterwarnings("error")
@pytest.mark.parametrize("name", list(MEASURES))
def test_degenerate_inputs_give_nan_with_a_note(name):
    fn = MEASURES[name]
    x = np.arange(10.0)
    constant = np.full(10, 3.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cases = {
            "constant column: x": fn(constant, x),
            "constant column: y": fn(x, constant),
            "constant column: x and y": fn(constant, constant),
            "fewer than 3 rows": fn(x[:2], x[:2] ** 2),
        }
        all_nan = fn(np.full(10, np.nan), x)
        partly_nan = fn(np.where(x > 1, np.nan, x), x)      # two rows survive
        empty = fn(np.array([]), np.array([]))
    for note, res in cases.items():
        assert math.isnan(res.estimate) and math.isnan(res.p_value), note
        assert math.isnan(res.ci_low) and math.isnan(res.ci_high), note
        assert res.note == note
    assert all_nan.n == 0 and all_nan.note == "fewer than 3 rows" and math.isnan(all_nan.estimate)
    assert partly_nan.n == 2 and math.isnan(partly_nan.estimate)
    assert empty.n == 0 and math.isnan(empty.estimate)
    assert cases["constant column: x"].n == 10


@pytest.mark.filterwarnings("error")
def test_smallest_defined_samples_keep_estimate_and_whole_range_interval():
    x = np.array([1.0, 2.0, 3.0])
    y = np.array([1.0, 3.0, 2.0])
    res = linear.pearson(x, y, test="t")
    ref = stats.pearsonr(x, y)  # Reference: scipy.stats.pearsonr gives (-1, 1) for n = 3
    assert res.estimate == pytest.approx(ref.statistic, rel=REL)
    assert res.p_value == pytest.approx(ref.pvalue, rel=REL)
    assert (res.ci_low, res.ci_high) == (ref.confidence_interval().low, ref.confidence_interval().high)
    assert "interval" in res.note
    res = rank.kendall(np.arange(4.0), np.array([0.0, 2.0, 1.0, 3.0]))
    assert res.p_value == pytest.approx(stats.kendalltau(np.arange(4.0), [0.0, 2.0, 1.0, 3.0]).pvalue)
    assert (res.ci_low, res.ci_high) == (-1.0, 1.0) and "interval" in res.note  # FHP SE needs n > 4
    res = rank.spearman(x, y)
    assert res.estimate == pytest.approx(stats.spearmanr(x, y).statistic)  # Reference: scipy.stats.spearmanr
    assert (res.ci_low, res.ci_high) == (-1.0, 1.0)


@pytest.mark.filterwarnings("error")
@pytest.mark.parametrize("name", list(MEASURES))
def test_perfect_relations_without_warnings(name):
    x = np.linspace(0, 1, 25)
    res = MEASURES[name](x, 3 * x + 1)
    assert res.estimate == pytest.approx(1.0, abs=1e-12)
    # Spearman's 25 untied rows take the Edgeworth series (AS 89), 3.2e-7 at rho = 1 there
    # (the exact permutation value, 2/25!, is far smaller; the series is conservative in this tail).
    assert res.p_value < (1e-6 if name == "spearman" else 1e-8)
    assert res.ci_high == pytest.approx(1.0, abs=1e-12)
    res = MEASURES[name](x, -x)
    assert res.estimate == pytest.approx(-1.0, abs=1e-12)


def test_nan_rows_dropped_pairwise():
    rng = np.random.default_rng(21)
    x = rng.normal(size=120)
    y = x + rng.normal(size=120)
    x[::7] = np.nan
    y[3::11] = np.nan
    cx, cy = _complete(x, y)
    for name, fn in MEASURES.items():
        assert fn(x, y) == fn(cx, cy), name


def test_unknown_kendall_method_is_rejected():
    with pytest.raises(ValueError):
        rank.kendall(np.arange(5.0), np.arange(5.0), method="fastest")


# --- properties ---------------------------------------------------------------------

tied_values = st.lists(st.integers(-20, 20), min_size=3, max_size=60)
float_values = st.lists(st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False, width=64),
                        min_size=3, max_size=60)


def _pair(draw_x, draw_y):
    n = min(len(draw_x), len(draw_y))
    return np.array(draw_x[:n], dtype=float), np.array(draw_y[:n], dtype=float)


def _defined(res):
    return not math.isnan(res.estimate)


@settings(max_examples=80, deadline=None)
@given(st.one_of(tied_values, float_values), st.one_of(tied_values, float_values))
def test_symmetry_and_bounds(xs, ys):
    x, y = _pair(xs, ys)
    for name, fn in MEASURES.items():
        a, b = fn(x, y), fn(y, x)
        if not _defined(a):
            assert not _defined(b) and a.note != ""
            continue
        # Symmetric measures (common practice): same estimate, p-value and interval both ways.
        assert a.estimate == pytest.approx(b.estimate, rel=1e-12, abs=1e-14), name
        assert a.p_value == pytest.approx(b.p_value, rel=1e-9, abs=1e-14), name
        assert -1.0 <= a.estimate <= 1.0, name
        assert 0.0 <= a.p_value <= 1.0, name
        assert -1.0 <= a.ci_low <= a.estimate <= a.ci_high <= 1.0, name


@settings(max_examples=80, deadline=None)
@given(tied_values)
def test_rank_measures_are_one_for_increasing_relations(xs):
    x = np.array(xs, dtype=float)
    if np.all(x == x[0]):
        return
    for y in (np.exp(x / 10.0), x ** 3 + x, 5.0 * x - 2.0):
        # A strictly increasing y = f(x) has the same ranks (common practice): rho_s = tau_b = 1.
        assert rank.spearman(x, y).estimate == pytest.approx(1.0, abs=1e-12)
        assert rank.kendall(x, y).estimate == 1.0
        assert rank.spearman(x, -y).estimate == pytest.approx(-1.0, abs=1e-12)
        assert rank.kendall(x, -y).estimate == -1.0


@settings(max_examples=80, deadline=None)
@given(tied_values, tied_values)
def test_rank_measures_invariant_under_increasing_transforms(xs, ys):
    x, y = _pair(xs, ys)
    gx, hy = np.exp(x / 10.0), y ** 3 + 2.0 * y
    # Rank measures depend on the data only through the ranks (common practice).
    for fn in (rank.spearman, rank.kendall):
        a, b = fn(x, y), fn(gx, hy)
        if not _defined(a):
            assert not _defined(b)
            continue
        assert a.estimate == pytest.approx(b.estimate, rel=1e-12, abs=1e-14)
        assert a.p_value == pytest.approx(b.p_value, rel=1e-9, abs=1e-14)


@settings(max_examples=60, deadline=None)
@given(float_values, float_values, st.floats(0.01, 100.0), st.floats(-1e3, 1e3))
def test_pearson_invariant_under_positive_affine_maps(xs, ys, scale, shift):
    x, y = _pair(xs, ys)
    if np.ptp(x) < 1e-3 or np.ptp(y) < 1e-3:
        return  # near-constant columns lose their digits under the map itself
    a, b = linear.pearson(x, y), linear.pearson(scale * x + shift, y)
    if not _defined(a):
        return
    # r is invariant under x -> a x + b, a > 0 (common practice).
    assert b.estimate == pytest.approx(a.estimate, rel=1e-7, abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(tied_values, tied_values)
def test_knight_equals_naive_property(xs, ys):
    x, y = _pair(xs, ys)
    # Exact integer agreement of the two counting algorithms (oracle, common practice).
    assert rank.kendall_counts(x, y, method="knight") == rank.kendall_counts(x, y, method="naive")


@pytest.mark.parametrize("seed", range(4))
def test_pearson_r_against_exact_rational_arithmetic(seed):
    # Reference: r computed exactly with fractions.Fraction from the float inputs (Python's
    # standard library), rounded once at the end; near-zero r is where summation errors show.
    rng = np.random.default_rng(700 + seed)
    n = 3000
    x = rng.normal(size=n) * 10.0 ** rng.uniform(-3, 3) + rng.choice([0.0, 1e3])
    y = 0.002 * (x - x.mean()) + rng.normal(size=n) * x.std()
    fx, fy = [Fraction(v) for v in x], [Fraction(v) for v in y]
    mx, my = sum(fx) / n, sum(fy) / n
    sxy = sum((a - mx) * (b - my) for a, b in zip(fx, fy))
    sxx = sum((a - mx) ** 2 for a in fx)
    syy = sum((b - my) ** 2 for b in fy)
    exact = float(sxy) / math.sqrt(float(sxx) * float(syy))
    got = linear.pearson(x, y).estimate
    assert abs(got - exact) <= 1e-13 * abs(exact) + 1e-16
    # scipy.stats.pearsonr, for scale: both within a few units of the 15th digit
    assert abs(stats.pearsonr(x, y).statistic - exact) <= 1e-13 * abs(exact) + 1e-16


@pytest.mark.parametrize("n", [3, 4, 5, 6, 7, 12, 31, 100, 101, 250, 401, 402, 403, 1000])
def test_t_pvalue_series_equals_scipy_t_tail(n):
    """The series form of the t tail (Abramowitz & Stegun 26.7.3-26.7.4) against scipy.stats.t.sf.

    Reference: scipy.stats.t.sf(|t|, n - 2) doubled, t = r sqrt((n-2)/(1-r^2)); below the
    series' bound and above T_SERIES_MAX_DF the incomplete beta function answers, so those
    values must also equal the reference method ("betainc") bit for bit."""
    rng = np.random.default_rng(n)
    r = np.concatenate([rng.uniform(-1, 1, 4000), np.tanh(rng.normal(scale=3 / math.sqrt(n), size=4000)),
                        [0.0, -0.0, 1.0, -1.0, 1 - 1e-15, 1e-3, -1e-3, 0.5, np.nan]])
    fast = linear.correlation_t_pvalue(r, n, "series")
    reference = linear.correlation_t_pvalue(r, n, "betainc")
    finite = ~np.isnan(r)
    assert np.array_equal(np.isnan(fast), ~finite)
    t = np.abs(r[finite]) * np.sqrt((n - 2) / ((1 - r[finite]) * (1 + r[finite])))
    with np.errstate(divide="ignore"):
        scipy_p = 2 * stats.t.sf(t, n - 2)
    # scipy.stats.t.sf keeps full precision near r = 0 (where 1 - r^2 rounds to 1) and in the tail
    assert fast[finite] == pytest.approx(scipy_p, rel=1e-9, abs=1e-300)
    by_beta = (reference[finite] <= config.T_SERIES_MIN_P) | (n - 2 > config.T_SERIES_MAX_DF)
    assert np.array_equal(fast[finite][by_beta], reference[finite][by_beta])
    # and the two methods agree to the matrix path's tolerance away from r = 0
    away = finite & (np.abs(r) > 1e-5)
    assert fast[away] == pytest.approx(reference[away], rel=1e-9)


def test_t_pvalue_series_with_a_row_count_per_value():
    """Mixed row counts (pairs with missing values) and counts below MIN_ROWS: NaN there,
    scipy.stats.t.sf elsewhere."""
    rng = np.random.default_rng(5)
    r = rng.uniform(-0.9, 0.9, 3000)
    n = rng.integers(1, 60, size=r.size)
    fast = linear.correlation_t_pvalue(r, n, "series")
    few = n < config.MIN_ROWS
    assert np.isnan(fast[few]).all()
    t = np.abs(r[~few]) * np.sqrt((n[~few] - 2) / (1 - r[~few] ** 2))
    assert fast[~few] == pytest.approx(2 * stats.t.sf(t, n[~few] - 2), rel=1e-9)
    with pytest.raises(ValueError, match="betainc, series or auto"):
        linear.correlation_t_pvalue(r, n, "fast")


@pytest.mark.parametrize("n", [13, 30, 100, 1000])
def test_compiled_edgeworth_equals_the_per_pair_series(n):
    """The matrix path's compiled AS 89 series against the per-pair function it mirrors, whose
    coefficients are Best & Roberts (1975), on every even S from 0 to its maximum (n = 13, 30)
    or a random sample of them."""
    from pairlens.core import wide

    top = (n ** 3 - n) // 3
    s = np.arange(0, top + 1, 2) if n <= 30 else np.random.default_rng(n).integers(0, top // 2 + 1, 5000) * 2
    got = wide._spearman_edgeworth(n, s)
    expected = np.array([rank.spearman_edgeworth_pvalue(n, int(v)) for v in s])
    assert got == pytest.approx(expected, rel=1e-9, abs=1e-15)
