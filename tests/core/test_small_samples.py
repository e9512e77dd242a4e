"""Small samples: default p-values against the exact permutation law, and exact rank sums at any n.

The oracle throughout is the permutation definition of a test of independence:
every pairing of the y values with the x values is equally likely, so a
p-value is the share of the n! pairings whose statistic is at least as extreme
as the observed one. Here the pairings are enumerated in full
(itertools.permutations), independently of the recursion pairlens.core.rank uses.
"""

from __future__ import annotations

import itertools
import math
from functools import lru_cache

import numpy as np
import pytest
import scipy.stats

from pairlens.core import chatterjee, distance, linear, rank
from pairlens.core.registry import MEASURES, PairContext
from pairlens.engine import AnalysisSettings, run_analysis

# Which tail each measure's default test uses: two-sided |statistic| for the signed
# correlations, the upper tail for the dependence measures (their tests reject for large
# values). A new measure must be added here before this module passes.
# the measures of numeric pairs (the categorical ones run on level codes: tests/core/test_categorical.py)
NUMERIC = {name: m for name, m in MEASURES.items() if m.applies_to("numeric", "numeric")}
TAILS = {"pearson": "two", "spearman": "two", "kendall": "two", "dcor": "upper", "dcor_bc": "upper",
         "xi": "upper"}


@lru_cache(maxsize=None)
def _perms(n: int) -> np.ndarray:
    return np.array(list(itertools.permutations(range(n))), dtype=np.int64)


def _oracle_spearman(x: np.ndarray, y: np.ndarray) -> float:
    """Share of all n! pairings with |sum rx ry| at least the observed (centred mid-ranks)."""
    rx = scipy.stats.rankdata(x) - (x.size + 1) / 2   # Reference: scipy.stats.rankdata (mid-ranks)
    ry = scipy.stats.rankdata(y) - (y.size + 1) / 2
    # The sums are multiples of 1/4: doubled ranks make every product an exact integer.
    ax, ay = np.rint(2 * rx).astype(np.int64), np.rint(2 * ry).astype(np.int64)
    observed = abs(int(ax @ ay))
    t = np.abs(ay[_perms(x.size)] @ ax)
    return float(np.count_nonzero(t >= observed) / t.size)


def _estimate(name: str, x: np.ndarray, y: np.ndarray) -> float:
    # the estimate alone, without the default test's resamples (the law of the estimate is what counts)
    if name == "pearson":
        return linear.pearson(x, y).estimate
    if name == "spearman":
        return float(np.corrcoef(scipy.stats.rankdata(x), scipy.stats.rankdata(y))[0, 1])
    if name == "kendall":
        return rank.kendall(x, y).estimate
    if name == "dcor":
        return distance.dcor(x, y).estimate
    if name == "dcor_bc":
        return distance.dcor_bc(x, y).estimate
    if name == "xi":
        return chatterjee.xi(x, y, method="asymptotic", seed=1).estimate
    raise KeyError(name)


def _attainable_minimum(name: str, x: np.ndarray, y: np.ndarray) -> float:
    """Smallest p-value the measure's exact permutation law allows on these rows (full enumeration)."""
    values = np.array([_estimate(name, x, y[list(p)]) for p in _perms(x.size)])
    if TAILS[name] == "two":
        values = np.abs(values)
    top = values.max()
    return float(np.count_nonzero(values >= top - 1e-9 * max(1.0, abs(top))) / values.size)


def _bound(name: str, n: int) -> float:
    """A lower bound of the attainable minimum for untied rows at any n (closed form).

    Every permutation test counts the observed pairing: at least 1/n!. For untied
    Spearman and Kendall the pairing with the x order and its reverse both reach
    |statistic| = 1, and xi is largest exactly for increasing and decreasing y in x
    order (sum |r_(i+1) - r_i| = n - 1): 2/n!.
    """
    return (2.0 if name in ("spearman", "kendall", "xi") else 1.0) / math.factorial(n)


def _data_sets(n: int, rng: np.random.Generator) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    x = np.arange(1.0, n + 1)
    return {
        "increasing": (x, x ** 3),
        "decreasing": (x, -np.exp(x)),
        "almost linear": (x, x + rng.normal(scale=1e-3, size=n)),
        "independent": (rng.normal(size=n), rng.normal(size=n)),
    }


def _tied_sets(n: int, rng: np.random.Generator) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    x = np.arange(1.0, n + 1)
    return {
        "tied x, increasing": (np.floor(x / 2), x + rng.normal(scale=1e-3, size=n)),
        "tied both": (np.floor(x / 2), np.floor(x / 3) + 0.5 * (x == n)),
    }


def test_tails_cover_the_registry():
    assert set(TAILS) == set(NUMERIC)


@pytest.mark.parametrize("n", range(3, 10))
def test_spearman_exact_equals_full_enumeration(n):
    rng = np.random.default_rng(100 + n)
    cases = list(_data_sets(n, rng).values()) + [(rng.permutation(n) + 0.0, rng.permutation(n) + 0.0)
                                                 for _ in range(3)]
    for x, y in cases:
        res = rank.spearman(x, y)
        assert res.method == "exact"
        # Reference: the permutation definition, all n! pairings enumerated.
        assert res.p_value == pytest.approx(_oracle_spearman(x, y), rel=1e-12, abs=0)


@pytest.mark.parametrize("n", range(3, 9))
def test_spearman_tied_exact_equals_full_enumeration(n):
    rng = np.random.default_rng(200 + n)
    for x, y in list(_tied_sets(n, rng).values()) + [(rng.integers(0, 3, n) + 0.0, rng.normal(size=n))]:
        if np.ptp(x) == 0 or np.ptp(y) == 0:
            continue
        res = rank.spearman(x, y)
        assert res.method == "exact permutation (ties)"
        # Reference: the permutation definition, all n! pairings enumerated.
        assert res.p_value == pytest.approx(_oracle_spearman(x, y), rel=1e-12, abs=0)


def test_spearman_null_counts_add_up_and_match_enumeration():
    for n in range(3, 10):
        s, c = rank.spearman_null_counts(n)
        d2 = ((_perms(n) - np.arange(n)) ** 2).sum(axis=1)   # Reference: sum d^2 of every permutation
        values, counts = np.unique(d2, return_counts=True)
        assert s.tolist() == values.tolist() and c.tolist() == counts.tolist()
    for n in (10, 11, 12):
        assert int(rank.spearman_null_counts(n)[1].sum()) == math.factorial(n)


def test_spearman_against_r_rule_from_memory():
    # From memory: R's cor.test(method = "spearman") is exact below n = 10 without ties, and
    # cor.test(1:4, 1:4, method = "spearman") reports p-value = 0.08333 (2/4!),
    # cor.test(1:5, 1:5, method = "spearman") p-value = 0.01667 (2/5!).
    assert rank.spearman(np.arange(4.0), np.arange(4.0)).p_value == pytest.approx(0.08333, abs=5e-6)
    assert rank.spearman(np.arange(5.0), np.arange(5.0)).p_value == pytest.approx(0.01667, abs=5e-6)
    # The three-row case: perfect rank agreement happens in 1 of 6 orderings (and its
    # reverse in another): p = 1/3, as Kendall's exact test gives (scipy.stats.kendalltau).
    x, y = np.array([1.0, 2.0, 3.0]), np.array([2.0, 5.0, 9.0])
    assert rank.spearman(x, y).p_value == pytest.approx(1 / 3, rel=1e-12)
    assert rank.spearman(x, y).p_value == pytest.approx(scipy.stats.kendalltau(x, y).pvalue, rel=1e-12)


def test_edgeworth_series_close_to_the_exact_law_at_twelve_rows():
    # Reference: the exact counts (checked by enumeration up to n = 9 above). Best & Roberts (1975)
    # report the series accurate to about two significant figures in the body of the law.
    n = 12
    s, c = rank.spearman_null_counts(n)
    checked = 0
    for value in s[::5]:
        exact = rank.spearman_exact_pvalue(n, int(value))
        if 0.01 <= exact <= 0.9:
            assert rank.spearman_edgeworth_pvalue(n, int(value)) == pytest.approx(exact, rel=0.1)
            checked += 1
    assert checked >= 10


def test_spearman_methods_by_size():
    rng = np.random.default_rng(7)
    for n, method in ((12, "exact"), (13, "Edgeworth series (AS 89)"), (149, "Edgeworth series (AS 89)"),
                      (150, "t approximation, n-2 df")):
        x, y = rng.normal(size=n), rng.normal(size=n)
        assert rank.spearman(x, y).method == method
    x, y = rng.integers(0, 4, 25).astype(float), rng.normal(size=25)
    res = rank.spearman(x, y, seed=3)
    assert res.method.startswith("permutation, B=9999")
    assert res.p_value == rank.spearman(x, y, seed=3).p_value
    # tied beyond SPEARMAN_TIED_PERMUTATION_MAX_N rows: the t approximation (scipy.stats.spearmanr's)
    x, y = rng.integers(0, 4, 40).astype(float), rng.normal(size=40)
    res = rank.spearman(x, y, seed=3)
    assert res.method == "t approximation, n-2 df"
    assert res.p_value == pytest.approx(scipy.stats.spearmanr(x, y).pvalue, rel=1e-9)
    # Reference: the t approximation from 150 rows is scipy.stats.spearmanr's p-value.
    x, y = rng.normal(size=160), rng.normal(size=160)
    assert rank.spearman(x, y).p_value == pytest.approx(scipy.stats.spearmanr(x, y).pvalue, rel=1e-9)


@pytest.mark.slow
@pytest.mark.parametrize("n", range(3, 13))
def test_default_pvalues_not_below_the_attainable_minimum(n):
    """Every registered measure, registry and engine alike, at n = 3..12 (the issue's audit)."""
    rng = np.random.default_rng(300 + n)
    sets = _data_sets(n, rng)
    if n <= 6:
        sets |= _tied_sets(n, rng)
    ctx = PairContext(seed=np.random.SeedSequence(11))
    checked = 0
    for label, (x, y) in sets.items():
        if np.ptp(x) == 0 or np.ptp(y) == 0:
            continue
        table = run_analysis(np.column_stack([x, y]), ["x", "y"], AnalysisSettings(measures=tuple(NUMERIC)),
                             workers=1)
        engine_p = {(r.measure, r.x): r.p_value for r in table.rows}
        for name, measure in NUMERIC.items():
            p = measure.compute(x, y, ctx).p_value
            if math.isnan(p):   # an undefined test (dcor_bc needs 4 rows; a zero variance): nothing to bound
                assert math.isnan(engine_p[(name, "x")])
                continue
            # Reference: full enumeration of the n! pairings (n <= 6), else the closed-form bound.
            floor = _attainable_minimum(name, x, y) if n <= 6 else _bound(name, n)
            assert p >= floor * (1 - 1e-9), (n, label, name, p, floor)
            assert engine_p[(name, "x")] >= floor * (1 - 1e-9), (n, label, name, "engine")
            checked += 1
    assert checked >= 4 * len(NUMERIC) - 2


def test_exact_score_sums_are_exact_integers_beyond_float_range():
    # Reference: Python's arbitrary-precision integers.
    rng = np.random.default_rng(8)
    n = 400_000
    a = rng.permutation(np.arange(-(n - 1), n, 2, dtype=np.int64))
    b = rng.permutation(np.arange(-(n - 1), n, 2, dtype=np.int64))
    hi, lo = rank.exact_score_sums(a, b)
    joined = [int(h) * 2**32 + int(l) for h, l in zip(hi, lo)]
    exact = [sum(int(u) * int(v) for u, v in zip(a.tolist(), b.tolist())), sum(int(u) ** 2 for u in a.tolist()),
             sum(int(v) ** 2 for v in b.tolist())]
    assert joined == exact
    assert exact[1] > 2**53   # a float64 running sum could not hold these exactly


def test_long_table_spearman_without_resorting_matches_scipy():
    # 250,000 rows: above the old 200,000-row limit where pairs were re-sorted; the presorted
    # path's exact sums give the per-pair result bit for bit, and scipy.stats.spearmanr's rho.
    rng = np.random.default_rng(9)
    n = 250_000
    x = rng.normal(size=n)
    y = np.round(x + rng.normal(size=n), 1)
    table = run_analysis(np.column_stack([x, y]), ["x", "y"], AnalysisSettings(measures=("spearman",)),
                         workers=1)
    res = rank.spearman(x, y)
    row = table.rows[0]
    assert (row.estimate, row.p_value, row.ci_low, row.ci_high) == (res.estimate, res.p_value, res.ci_low,
                                                                    res.ci_high)
    ref = scipy.stats.spearmanr(x, y)   # Reference: scipy.stats.spearmanr
    assert row.estimate == pytest.approx(ref.statistic, rel=1e-12)
