"""The presorted all-pairs path against the per-pair path and outside references.

The per-pair functions (the registry's compute functions, via
engine.compute_pair) are the oracle: the presorted path finishes every measure
with the same functions on the same numbers, so every field of every row must
be equal -- bit for bit, not just close.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats
from scipy import special

import dcor as dcor_lib
from pairlens.core import allpairs, chatterjee, distance, rank
from pairlens.core.registry import MEASURES
from pairlens.engine import (AnalysisSettings, _fast_pair_rows, _pairs, compute_pair, plan_variables,
                        prepare_columns, run_analysis)
from pairlens.executors import ProcessExecutor, SerialExecutor

ALL = tuple(MEASURES)
FIELDS = ("x", "y", "measure", "estimate", "ci_low", "ci_high", "p_value", "n", "note", "method")


def _same(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return type(a) is type(b) and a == b


def _oracle_rows(data, names, settings):
    variables = plan_variables(list(names), settings)
    row_mask = None
    if settings.missing == "complete":
        row_mask = np.ones(data.shape[0], dtype=bool)
        for v in variables:
            cols = data[:, list(v.columns)]
            row_mask &= ~np.isnan(cols).any(axis=1)
    return [r for i, j in _pairs(variables)
            for r in compute_pair(data, variables[i], variables[j], settings, row_mask)]


def _assert_rows_equal(fast_rows, oracle_rows):
    assert len(fast_rows) == len(oracle_rows)
    for f, o in zip(fast_rows, oracle_rows):
        for name in FIELDS:
            assert _same(getattr(f, name), getattr(o, name)), (f.x, f.y, f.measure, name,
                                                               getattr(f, name), getattr(o, name))


def _table(seed, n, p=7, missing=0.05):
    """Mixed columns: continuous, heavy ties, a function of another, a constant, missing cells."""
    rng = np.random.default_rng(seed)
    data = rng.normal(size=(n, p))
    data[:, 1] = np.round(data[:, 1] * 1.5)             # few distinct values
    data[:, 2] = data[:, 0] ** 2 + 0.1 * rng.normal(size=n)
    data[:, 3] = 7.0                                     # constant column
    data[:, 4] = rng.integers(0, 3, size=n)              # three levels
    data[:, 5] = 1e9 + rng.normal(size=n)                # large offset
    data[rng.random((n, p)) < missing] = np.nan
    names = [f"v{k}" for k in range(p)]
    return data, names


def _fast_table(data, names, settings, executor=None):
    return run_analysis(data, names, settings, executor=executor or SerialExecutor()).rows


@pytest.mark.parametrize("seed,n", [(1, 300), (2, 57), (3, 12), (4, 5), (5, 4), (6, 3)])
def test_every_field_matches_the_per_pair_path(seed, n):
    data, names = _table(seed, n)
    settings = AnalysisSettings(measures=ALL)
    _assert_rows_equal(_fast_table(data, names, settings), _oracle_rows(data, names, settings))


def test_presorted_path_really_runs():
    # The comparison above is only worth something if the fast path handled the pairs.
    data, names = _table(7, 200, missing=0.1)
    settings = AnalysisSettings(measures=ALL)
    variables = plan_variables(names, settings)
    prep = prepare_columns(data, variables)
    handled = [_fast_pair_rows(prep, variables[i], variables[j], settings) is not None
               for i, j in _pairs(variables)]
    # only the pairs with the constant column v3 go to the per-pair path
    assert sum(handled) == len(handled) - (len(variables) - 1)


def test_missing_cells_with_few_rows_left():
    rng = np.random.default_rng(8)
    data = rng.normal(size=(40, 5))
    data[:35, 0] = np.nan          # 5 rows left in v0
    data[:38, 1] = np.nan          # 2 rows left in v1: pairs with it are undefined
    data[::2, 2] = np.nan
    names = [f"v{k}" for k in range(5)]
    settings = AnalysisSettings(measures=ALL)
    fast = _fast_table(data, names, settings)
    _assert_rows_equal(fast, _oracle_rows(data, names, settings))
    assert any("fewer than 3 rows" in r.note for r in fast)


def test_complete_rows_policy():
    data, names = _table(9, 150, missing=0.03)
    data[:, 3] = np.arange(150.0)  # no constant column, so every pair is regular
    settings = AnalysisSettings(measures=ALL, missing="complete")
    _assert_rows_equal(_fast_table(data, names, settings), _oracle_rows(data, names, settings))


def test_groups_keep_the_per_pair_path_and_match():
    data, names = _table(10, 120, missing=0.02)
    settings = AnalysisSettings(measures=ALL, groups=(("g", ("v5", "v6")),))
    _assert_rows_equal(_fast_table(data, names, settings), _oracle_rows(data, names, settings))


@pytest.mark.parametrize("permutations", [19, 99])
def test_permutations_match_and_do_not_depend_on_workers(permutations):
    data, names = _table(11, 90)
    settings = AnalysisSettings(measures=ALL, permutations=permutations, seed=5)
    serial = _fast_table(data, names, settings)
    _assert_rows_equal(serial, _oracle_rows(data, names, settings))
    pooled = _fast_table(data, names, settings, executor=ProcessExecutor(2))
    _assert_rows_equal(pooled, serial)


def test_xi_ties_broken_from_the_pair_seed():
    rng = np.random.default_rng(12)
    data = np.column_stack([rng.integers(0, 4, 200), rng.integers(0, 6, 200), rng.normal(size=200)])
    names = ["a", "b", "c"]
    for seed in (1, 2, 3):
        settings = AnalysisSettings(measures=("xi",), seed=seed)
        _assert_rows_equal(_fast_table(data, names, settings), _oracle_rows(data, names, settings))


def test_centring_that_merges_distinct_values():
    # 1 and 1 + 2^-52 minus the median -1 both round to 2.0: the stable order
    # of the centred values must then follow the rows, as a fresh sort would.
    eps = 2.0 ** -52
    x = np.array([1.0 + eps, -1.0, 1.0, -1.0, -2.0, -1.0, -3.0, 1.0 + eps, 1.0, -1.0, -1.5])
    rng = np.random.default_rng(13)
    y = rng.normal(size=x.size)
    # x first and last, so that the merged column is once the x and once the y of a pair;
    # Kendall's discordant pairs then cannot come from the distance tree
    data = np.column_stack([x, y, y[::-1], x[::-1]])
    names = ["x", "y", "z", "w"]
    settings = AnalysisSettings(measures=("kendall", "dcor", "dcor_bc"), permutations=29)
    _assert_rows_equal(_fast_table(data, names, settings), _oracle_rows(data, names, settings))
    xc = x - np.median(x)
    assert xc[0] == xc[2]  # the case is real
    prep = allpairs.prepare_columns(data)
    for i, j in ((0, 1), (1, 3)):
        _, _, _, counts, _ = allpairs.pair_work(prep, i, j, 3, spearman=False, kendall=True, distance=True)
        assert counts[0] >= 0  # complete counts, not left to the tree


def test_infinite_values_take_the_per_pair_path():
    data, names = _table(14, 60)
    data[5, 0] = np.inf
    settings = AnalysisSettings(measures=ALL)
    _assert_rows_equal(_fast_table(data, names, settings), _oracle_rows(data, names, settings))


def test_random_tables_property():
    for seed in range(20, 40):
        rng = np.random.default_rng(seed)
        n = int(rng.integers(3, 80))
        data = rng.normal(size=(n, 4))
        data[:, 0] = np.round(data[:, 0] * rng.uniform(0.2, 3))
        data[rng.random((n, 4)) < rng.uniform(0, 0.3)] = np.nan
        settings = AnalysisSettings(measures=ALL, seed=seed)
        _assert_rows_equal(_fast_table(data, list("abcd"), settings),
                           _oracle_rows(data, list("abcd"), settings))


# --- kernels against outside references -----------------------------------------------

def _pair(seed, n, ties=False):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    y = np.sin(2 * x) + 0.5 * rng.normal(size=n)
    if ties:
        x, y = np.round(x * 2), np.round(y * 3)
    data = np.column_stack([x, y])
    data[rng.random((n, 2)) < 0.1] = np.nan
    prep = allpairs.prepare_columns(data)
    keep = ~np.isnan(data).any(axis=1)
    return allpairs.pair_view(prep, 0, 1), data[keep, 0], data[keep, 1]


@pytest.mark.parametrize("ties", [False, True])
def test_pair_view_orders_are_stable_sorts_of_the_complete_rows(ties):
    view, x, y = _pair(15, 500, ties)
    np.testing.assert_array_equal(view.x, x)
    np.testing.assert_array_equal(view.x_order, np.argsort(x, kind="stable"))
    np.testing.assert_array_equal(view.y_order, np.argsort(y, kind="stable"))


@pytest.mark.parametrize("ties", [False, True])
def test_rank_kernels_against_scipy(ties):
    view, x, y = _pair(16, 700, ties)
    sxy, sxx, syy = allpairs.spearman_sums(view)
    # scipy.stats.spearmanr: Pearson r of average ranks
    assert sxy / math.sqrt(sxx * syy) == pytest.approx(scipy.stats.spearmanr(x, y).statistic, rel=1e-12)
    d, tx, ty, txy, *_ = allpairs.kendall_counts_view(view)
    counts = rank.KendallCounts(view.n, int(d), int(tx), int(ty), int(txy), 0.0, 0.0, 0.0, 0.0)
    tau = counts.score / math.sqrt((counts.total - tx) * (counts.total - ty))
    # scipy.stats.kendalltau (tau-b)
    assert tau == pytest.approx(scipy.stats.kendalltau(x, y).statistic, rel=1e-12)
    seq = allpairs.kendall_order(view)
    np.testing.assert_array_equal(seq, np.lexsort((y, x)))
    # the Fenwick count equals the merge-sort count of rank.knight_counts
    assert tuple(allpairs.kendall_counts_view(view)) == tuple(rank.knight_counts(x[seq], y[seq]))
    r, l = allpairs.rank_counts(view.y, view.y_order)
    # r_i = #{y_j <= y_i}: scipy.stats.rankdata(method="max"); l_i = #{y_j >= y_i}
    np.testing.assert_array_equal(r, scipy.stats.rankdata(y, method="max"))
    np.testing.assert_array_equal(l, scipy.stats.rankdata(-y, method="max"))


@pytest.mark.parametrize("ties", [False, True])
def test_distance_statistics_from_orders_against_dcor(ties):
    view, x, y = _pair(17, 600, ties)
    st = distance.centred_statistics_presorted(*allpairs.distance_orders(view))
    ref = distance.distance_statistics(x, y, method="fast")
    assert st[:9] == ref[:9]  # same kernels on the same arrays: identical numbers
    # dcor library, distance_correlation (V-statistic, double centring)
    assert math.sqrt(st.dcov2 / math.sqrt(st.dvar2_x * st.dvar2_y)) == pytest.approx(
        dcor_lib.distance_correlation(x, y), rel=1e-9)


def test_fused_third_quantities_are_the_loops_bit_for_bit():
    # the three-pass kernel against the ten-pass original it replaces (same expressions)
    rng = np.random.default_rng(21)
    for trial in range(400):
        n = int(rng.integers(2, 400))
        x = rng.normal(size=n) * 10 ** rng.uniform(-3, 3)
        if trial % 3 == 0:
            x = np.round(x)
        if trial % 5 == 0:
            x = x + 1e6
        xs = np.sort(x - np.median(x))
        arow = distance._row_sums_sorted(xs)
        assert distance._third_quantities_1d_fused(xs, arow) == distance._third_quantities_1d(xs, arow)


def test_one_call_kernels_are_the_separate_steps():
    # distance._sorted_kernels against the numpy gathers and separate kernels it replaced
    view, _, _ = _pair(22, 800, ties=True)
    xc, yc, order, y_order = allpairs.distance_orders(view)
    n = xc.size
    xv, yv = xc[order], yc[order]
    yr = np.empty(n, np.int64)
    yr[y_order] = np.arange(n)
    y_sorted = yv[y_order]
    arow = distance._row_sums_sorted(xv)
    brow_sorted = distance._row_sums_sorted(y_sorted)
    cross, discordant = distance._cross_sum_discordant(xv, yv, yr)
    expected = (xv, yv, yr, arow, brow_sorted, brow_sorted[yr], cross,
                distance._third_quantities_1d(xv, arow), distance._third_quantities_1d(y_sorted, brow_sorted),
                discordant)
    got = distance._sorted_kernels(xc, yc, order, y_order)
    for e, g in zip(expected, got):
        if isinstance(e, np.ndarray):
            np.testing.assert_array_equal(g, e)
        else:
            assert g == e
    # allpairs.pair_work against the separate presorted steps
    prep = allpairs.prepare_columns(np.column_stack([view.x, view.y]))
    regular, v2, sums, counts, dist = allpairs.pair_work(prep, 0, 1, 3, spearman=True, kendall=True,
                                                         distance=True)
    assert regular and sums == allpairs.spearman_sums(view)
    # with the distance orders asked for too, the discordant pairs come from the cross sum
    full = allpairs.kendall_counts_view(view)
    assert counts[0] == -1 and counts[1:] == full[1:]
    assert distance.centred_statistics_presorted(*dist).discordant == full[0]
    for e, g in zip(allpairs.distance_orders(view), dist):
        np.testing.assert_array_equal(g, e)
    _, _, _, alone, _ = allpairs.pair_work(prep, 0, 1, 3, spearman=False, kendall=True, distance=False)
    assert alone == full


@pytest.mark.parametrize("seed", range(12))
def test_cross_sum_counts_the_discordant_pairs(seed):
    # the count part of the cross sum's tree against the O(n^2) definition and
    # against scipy.stats.kendalltau's statistic rebuilt from the counts
    rng = np.random.default_rng(300 + seed)
    n = int(rng.integers(4, 160))
    x = np.round(rng.normal(size=n) * rng.choice([1, 3, 100]))
    y = np.round(0.5 * x + rng.normal(size=n) * rng.choice([1, 2, 50]))
    sign = np.sign(x[:, None] - x[None, :]) * np.sign(y[:, None] - y[None, :])
    naive = int((sign < 0).sum() // 2)
    xc, yc = x - np.median(x), y - np.median(y)
    order = np.argsort(xc, kind="mergesort")
    y_order = np.argsort(yc[order], kind="mergesort")
    st = distance.centred_statistics_presorted(xc, yc, order, y_order)
    assert st.discordant == naive
    # the cross sum itself still equals the O(n^2) sum (the dcor library's definition)
    a = np.abs(x[:, None] - x[None, :])
    b = np.abs(y[:, None] - y[None, :])
    xv, yv = xc[order], yc[order]
    yr = np.empty(n, np.int64)
    yr[y_order] = np.arange(n)
    np.testing.assert_allclose(distance._cross_sum_discordant(xv, yv, yr)[0], float((a * b).sum()), rtol=1e-12)
    np.testing.assert_allclose(distance._cross_sum(xv, yv, yr), float((a * b).sum()), rtol=1e-12)
    # tau-b from the fused counts (ties from pair_work, discordant from the tree)
    prep = allpairs.prepare_columns(np.column_stack([x, y]))
    regular, _, _, counts, dist = allpairs.pair_work(prep, 0, 1, 3, spearman=False, kendall=True, distance=True)
    if regular:
        d = distance.centred_statistics_presorted(*dist).discordant if counts[0] < 0 else counts[0]
        _, tied_x, tied_y, tied_xy = counts[:4]
        n0 = n * (n - 1) // 2
        tau_b = (n0 - tied_x - tied_y + tied_xy - 2 * d) / math.sqrt((n0 - tied_x) * (n0 - tied_y))
        np.testing.assert_allclose(tau_b, scipy.stats.kendalltau(x, y).statistic, rtol=1e-12, atol=1e-15)


def test_median_from_the_order_is_numpys():
    rng = np.random.default_rng(18)
    for n in (1, 2, 3, 4, 10, 11, 1000, 1001):
        v = rng.normal(size=n) * 10 ** rng.uniform(-5, 5)
        assert allpairs.median_sorted(v, np.argsort(v, kind="stable")) == np.median(v)


def test_xi_from_order_against_scipy_without_ties():
    view, x, y = _pair(19, 400)
    r, l = allpairs.rank_counts(view.y, view.y_order)
    res = chatterjee.xi_from_order(view.x_order, r, l)
    # scipy.stats.chatterjeexi (asymptotic, y continuous)
    ref = scipy.stats.chatterjeexi(x, y)
    assert res.estimate == pytest.approx(ref.statistic, rel=1e-12)
    assert res.p_value == pytest.approx(ref.pvalue, rel=1e-9)


def test_gamma_tail_is_scipy_stats_bit_for_bit():
    rng = np.random.default_rng(20)
    for _ in range(300):
        shape = 10 ** rng.uniform(-2, 3)
        scale = 10 ** rng.uniform(-6, 6)
        x = rng.choice([-1.0, 0.0, 1.0]) * scale * 10 ** rng.uniform(-3, 3)
        # scipy.stats.gamma.sf, the distribution object the fast tail replaces
        assert distance._gamma_sf(x, shape, scale) == float(scipy.stats.gamma.sf(x, shape, scale=scale))
    assert distance._gamma_sf(math.inf, 2.0, 1.0) == 0.0
    assert math.isnan(distance._gamma_sf(math.nan, 2.0, 1.0))
    assert special.gammaincc(2.0, 1.0) == distance._gamma_sf(1.0, 2.0, 1.0)


@pytest.mark.parametrize("n", [3, 8, 9, 30, 1000, 1001])
@pytest.mark.parametrize("ties", ["none", "x", "both"])
def test_presorted_pvalue_floor_is_the_per_pair_floor(n, ties):
    # the per-pair pvalue_floor is the oracle; untied: the closed form 1/n! (Good 2005, ch. 3)
    from pairlens.core.registry import presorted_pvalue_floor, pvalue_floor

    rng = np.random.default_rng(n)
    data = rng.normal(size=(n, 2))
    if ties in ("x", "both"):
        data[:, 0] = np.round(data[:, 0])
    if ties == "both":
        data[:, 1] = np.round(data[:, 1] * 2)
    prep = allpairs.prepare_columns(data)
    regular, view, *_ = allpairs.pair_work(prep, 0, 1, 3, spearman=False, kendall=False, distance=False)
    assert regular
    pair = allpairs.PresortedPair(view, False, None, None, None)
    assert pair.untied() == (ties == "none")
    for measure in MEASURES.values():
        for seen in (pair, pair.direction(True)):
            got = presorted_pvalue_floor(measure, seen)
            assert got == pvalue_floor(measure, seen.x, seen.y), (measure.name, n, ties)
    if ties == "none" and 8 < n <= 1000:
        assert got == pytest.approx(math.exp(-math.lgamma(n + 1.0)), rel=1e-12)   # 1/n!, 0.0 past 170!


@pytest.mark.parametrize("n", [9, 12, 40, 300, 1000])
@pytest.mark.parametrize("ties", ["none", "few", "x", "binary"])
def test_floored_result_skips_only_floors_that_cannot_raise_p(n, ties):
    # Oracle: floor_pvalue with the per-pair pvalue_floor (K/n!, Good 2005, ch. 3), for p-values from
    # 0 and subnormal up to 1, around the floor itself and for every registry measure.
    from pairlens.core.registry import presorted_floored, pvalue_floor
    from pairlens.core.results import TestResult
    from pairlens.core.testing import floor_pvalue

    rng = np.random.default_rng(n + len(ties))
    data = rng.normal(size=(n, 2))
    if ties == "few":
        data[:3, 0] = data[0, 0]
        data[5:7, 1] = data[5, 1]
    elif ties == "x":
        data[:, 0] = np.round(data[:, 0])
    elif ties == "binary":
        data = (data > 0.3).astype(float)
        data[0, 0], data[1, 0], data[0, 1], data[2, 1] = 0.0, 1.0, 0.0, 1.0   # never constant
    prep = allpairs.prepare_columns(data)
    regular, view, *_ = allpairs.pair_work(prep, 0, 1, 3, spearman=False, kendall=False, distance=False)
    pair = allpairs.PresortedPair(view, False, None, None, None)
    checked_raise = 0
    for measure in MEASURES.values():
        floor = pvalue_floor(measure, pair.x, pair.y)
        for p in (0.0, 5e-324, 1e-300, 1e-30, floor * 0.5, floor, floor * 2.0, 0.01, 1.0):
            res = TestResult(0.5, p, "m", math.nan, math.nan, n, "")
            assert presorted_floored(measure, pair, res) == floor_pvalue(res, floor), (measure.name, n, ties, p)
            checked_raise += floor_pvalue(res, floor) is not res
    # two-valued columns do raise some p-values: the comparison above covered raised results too
    assert checked_raise > 0 or ties != "binary"


@pytest.mark.parametrize("seed,n", [(31, 400), (32, 40), (33, 6)])
def test_columns_own_distance_parts_computed_once_give_the_same_rows(seed, n):
    """Pairs on all rows of both columns take each column's own distance sums from a per-column
    cache (distance.column_side); every field still equals the per-pair path's (the oracle above,
    which computes them pair by pair). Columns 5 and 6 miss the same rows: their pair uses all of
    both columns' present rows, while their pairs with the full columns do not."""
    data, names = _table(seed, n, missing=0.0)
    data[: max(1, n // 10), 5:7] = np.nan
    settings = AnalysisSettings(measures=ALL)
    _assert_rows_equal(_fast_table(data, names, settings), _oracle_rows(data, names, settings))
    variables = plan_variables(names, settings)
    prep = prepare_columns(data, variables)
    for i, j in _pairs(variables):
        _fast_pair_rows(prep, variables[i], variables[j], settings)
    # the constant column v3 takes the per-pair path; the others' sides were cached
    assert set(prep.distance_sides) == {0, 1, 2, 4, 5, 6}
    st = {}
    for k in (0, 1):
        x = data[:, k] - np.median(data[:, k])
        st[k] = distance.column_side(x, np.argsort(x, kind="mergesort"))
    x, y = data[:, 0] - np.median(data[:, 0]), data[:, 1] - np.median(data[:, 1])
    order = np.argsort(x, kind="mergesort")
    y_order = np.argsort(y[order], kind="mergesort")
    with_sides = distance.centred_statistics_presorted(x, y, order, y_order, (st[0], st[1]))
    alone = distance.centred_statistics_presorted(x, y, order, y_order)
    for name, value in alone._asdict().items():
        if name != "resample":
            np.testing.assert_array_equal(np.asarray(getattr(with_sides, name)), np.asarray(value), err_msg=name)
