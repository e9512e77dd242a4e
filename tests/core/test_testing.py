"""Multiplicity adjustment and Fisher z intervals against scipy and statsmodels."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from pairlens.core.testing import adjust_pvalues, fisher_z_interval, pair_seed


def _pvalue_sets():
    rng = np.random.default_rng(20261201)
    yield rng.uniform(size=1)
    yield rng.uniform(size=7)
    yield rng.uniform(size=200) ** 4          # many small values
    yield np.round(rng.uniform(size=60), 2)   # ties among p-values
    yield np.array([0.0, 0.0, 1.0, 1.0, 0.5])
    yield np.concatenate([rng.uniform(size=50) * 1e-8, rng.uniform(size=50)])


@pytest.mark.parametrize("p", list(_pvalue_sets()), ids=lambda p: f"m{p.size}")
def test_bh_matches_scipy(p):
    # Reference: scipy.stats.false_discovery_control(method="bh").
    np.testing.assert_allclose(adjust_pvalues(p, "bh"), stats.false_discovery_control(p, method="bh"),
                               rtol=1e-12, atol=0)
    # Reference: statsmodels multipletests "fdr_bh".
    np.testing.assert_allclose(adjust_pvalues(p, "bh"), multipletests(p, method="fdr_bh")[1],
                               rtol=1e-12, atol=0)


@pytest.mark.parametrize("p", list(_pvalue_sets()), ids=lambda p: f"m{p.size}")
def test_holm_matches_statsmodels(p):
    # Reference: statsmodels.stats.multitest.multipletests(method="holm").
    np.testing.assert_allclose(adjust_pvalues(p, "holm"), multipletests(p, method="holm")[1],
                               rtol=1e-12, atol=0)


def test_none_returns_a_copy():
    p = np.array([0.2, np.nan, 0.01])
    out = adjust_pvalues(p, "none")
    np.testing.assert_array_equal(out, p)
    out[0] = 0.9
    assert p[0] == 0.2  # the caller's array is not modified (common practice)


@pytest.mark.parametrize("method", ["bh", "holm"])
def test_nan_entries_stay_nan_and_do_not_count(method):
    rng = np.random.default_rng(11)
    p = rng.uniform(size=40) ** 2
    with_nan = p.copy()
    holes = [3, 17, 18, 39]
    with_nan[holes] = np.nan
    kept = np.delete(p, holes)
    out = adjust_pvalues(with_nan, method)
    assert np.isnan(out[holes]).all()
    # Reference: scipy false_discovery_control / statsmodels holm on the non-missing values
    # alone, i.e. m = number of defined p-values.
    ref = (stats.false_discovery_control(kept, method="bh") if method == "bh"
           else multipletests(kept, method="holm")[1])
    np.testing.assert_allclose(np.delete(out, holes), ref, rtol=1e-12)


def test_shape_preserved_for_matrices():
    rng = np.random.default_rng(5)
    p = rng.uniform(size=(6, 4))
    p[1, 2] = np.nan
    out = adjust_pvalues(p, "bh")
    assert out.shape == (6, 4)
    flat = p.reshape(-1)
    ok = ~np.isnan(flat)
    # Reference: scipy.stats.false_discovery_control on the flattened defined values.
    np.testing.assert_allclose(out.reshape(-1)[ok], stats.false_discovery_control(flat[ok]), rtol=1e-12)


def test_edge_inputs():
    assert adjust_pvalues([], "bh").size == 0
    assert np.isnan(adjust_pvalues([np.nan, np.nan], "holm")).all()
    with pytest.raises(ValueError):
        adjust_pvalues([0.1, 1.2], "bh")
    with pytest.raises(ValueError):
        adjust_pvalues([0.1], "bonferroni-ish")


def test_adjusted_values_never_below_raw():
    # BH and Holm q-values are >= the raw p-values and <= 1 (Benjamini & Hochberg 1995; Holm 1979).
    rng = np.random.default_rng(8)
    p = rng.uniform(size=300) ** 3
    for method in ("bh", "holm"):
        q = adjust_pvalues(p, method)
        assert np.all(q >= p) and np.all(q <= 1.0)


@pytest.mark.parametrize("confidence", [0.8, 0.95, 0.99])
@pytest.mark.parametrize("n", [4, 10, 57, 1000])
def test_fisher_interval_matches_scipy_pearson_interval(n, confidence):
    # Reference: scipy.stats.pearsonr(...).confidence_interval uses Fisher z with SE 1/sqrt(n-3).
    rng = np.random.default_rng(n)
    x = rng.normal(size=n)
    y = 0.4 * x + rng.normal(size=n)
    res = stats.pearsonr(x, y)
    ci = res.confidence_interval(confidence)
    low, high = fisher_z_interval(res.statistic, 1 / np.sqrt(n - 3), confidence)
    assert low == pytest.approx(ci.low, rel=1e-12, abs=1e-14)
    assert high == pytest.approx(ci.high, rel=1e-12, abs=1e-14)


def test_fisher_interval_closed_form():
    # Reference: the closed form tanh(atanh(r) -/+ z_{0.975} se), z from scipy.stats.norm.ppf.
    r, se = -0.35, 0.12
    z = stats.norm.ppf(0.975)
    low, high = fisher_z_interval(r, se, 0.95)
    assert low == pytest.approx(np.tanh(np.arctanh(r) - z * se), rel=1e-13)
    assert high == pytest.approx(np.tanh(np.arctanh(r) + z * se), rel=1e-13)


@pytest.mark.filterwarnings("error")
def test_fisher_interval_at_the_boundary_without_warnings():
    # atanh(+/-1) is infinite; the limit of the formula puts both ends at +/-1 (common practice).
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert fisher_z_interval(1.0, 0.2, 0.95) == (1.0, 1.0)
        assert fisher_z_interval(-1.0, 0.2, 0.95) == (-1.0, -1.0)
        assert fisher_z_interval(1.0 + 2e-16, 0.2, 0.95) == (1.0, 1.0)
        assert fisher_z_interval(0.3, np.inf, 0.95) == (-1.0, 1.0)
        low, high = fisher_z_interval(np.nan, 0.2, 0.95)
        assert np.isnan(low) and np.isnan(high)
    with pytest.raises(ValueError):
        fisher_z_interval(0.3, 0.1, 1.0)


def test_pair_seed_is_deterministic_and_pair_specific():
    a = pair_seed(7, "x", "y", "dcor").generate_state(4)
    b = pair_seed(7, "x", "y", "dcor").generate_state(4)
    c = pair_seed(7, "y", "x", "dcor").generate_state(4)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)
