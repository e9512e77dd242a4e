"""Estimate-only kernels (what the verdict reads) equal the full functions' estimates, bit for bit.

The verdict needs Spearman's rho and dCor even where the analysis did not ask for them; the
full functions also run their tests (thousands of permutations for small tied samples), so the
verdict calls the estimate-only forms. Checked against the full functions (the same bits) and
against the reference libraries (scipy.stats.spearmanr, dcor.distance_correlation).
"""

from __future__ import annotations

import dcor as dcor_reference
import numpy as np
import pytest
from scipy import stats

from pairlens.core import distance, rank


def _samples():
    rng = np.random.default_rng(2026)
    for k in range(120):
        n = int(rng.integers(3, 120))
        x = rng.normal(size=n)
        y = 0.4 * x ** 2 + rng.normal(size=n)
        if k % 3 == 0:
            x = np.round(2 * x)          # ties
        if k % 5 == 0:
            y = np.round(y)
        yield x, y


def test_spearman_estimate_is_the_full_functions_estimate_and_scipys():
    for x, y in _samples():
        alone = rank.spearman_estimate(x, y)
        assert alone == rank.spearman(x, y).estimate
        # scipy.stats.spearmanr: Pearson r of the mid-ranks
        assert alone == pytest.approx(stats.spearmanr(x, y).statistic, abs=1e-12)


def test_dcor_estimate_is_the_full_functions_estimate_and_the_dcor_librarys():
    for x, y in _samples():
        alone = distance.dcor_estimate(x, y)
        assert alone == distance.dcor(x, y).estimate
        # dcor.distance_correlation (the dcor package), the V-statistic R_n
        assert alone == pytest.approx(dcor_reference.distance_correlation(x, y), abs=1e-9)


def test_degenerate_pairs_give_nan_like_the_full_functions():
    const = np.ones(10)
    x = np.arange(10.0)
    assert np.isnan(rank.spearman_estimate(x, const)) and np.isnan(rank.spearman(x, const).estimate)
    assert np.isnan(distance.dcor_estimate(x, const)) and np.isnan(distance.dcor(x, const).estimate)
    assert np.isnan(rank.spearman_estimate(x[:2], x[:2]))
