"""The level table of Pearson's default p-value, and its agreement with a permutation test on real tables.

Level table: for each of the 15 unordered pairs of five margins (normal,
exponential, t(3), lognormal, integer scores 1..5) and n = 10, 30, 200,
10,000 independent pairs; the rejection count at alpha = 0.05 and 0.01 is
compared with the central binomial interval around alpha (reference:
scipy.stats.binom.ppf). The table is printed (``pytest -s``) with every cell
outside the 99% interval marked. 90 counts are checked at once, so an exact
test would put about one of them outside its 99% interval by chance; the
assertion uses the 99.9% interval per cell and allows at most 3 of the 90
outside the 99% one (a test at exactly the nominal level passes both with
probability about 0.91, scipy.stats.binom; all 90 inside the 99% intervals
only about 46% of the time, so that stricter goal is not asserted: see the
README's level table for the two cells outside at this seed and the
permutation test on the same draws, benchmarks/pearson_level_paired.py).
Print the table: ``python -m pytest -n 0 -s -m slow tests/test_levels_pearson.py -k level_table``.

The p-values come from :func:`pairlens.core.linear.moment_pvalue` on all
replicates at once (the function ``pearson`` calls; checked equal below).
"""

from __future__ import annotations

import collections
import itertools
import math

import numpy as np
import pytest
from scipy import stats

from pairlens.core import linear

REPS = 10_000
SIZES = (10, 30, 200)
ALPHAS = (0.05, 0.01)
SEED = 20261202

MARGINS = {
    "normal": lambda rng, shape: rng.normal(size=shape),
    "exponential": lambda rng, shape: rng.exponential(size=shape),
    "t3": lambda rng, shape: rng.standard_t(3, size=shape),
    "lognormal": lambda rng, shape: rng.lognormal(size=shape),
    "scores": lambda rng, shape: rng.integers(1, 6, size=shape).astype(float),
}


def _draw(a: str, b: str, n: int, reps: int):
    laws = list(MARGINS)
    rng = np.random.default_rng([SEED, laws.index(a), laws.index(b), n])
    return MARGINS[a](rng, (reps, n)), MARGINS[b](rng, (reps, n))


def _bounds(alpha: float, level: float) -> tuple[int, int]:
    # Reference: scipy.stats.binom.ppf, central interval of the rejection count.
    tail = (1 - level) / 2
    return int(stats.binom.ppf(tail, REPS, alpha)), int(stats.binom.ppf(1 - tail, REPS, alpha))


def test_vectorised_pvalues_are_the_ones_pearson_returns():
    for a, b, n in (("lognormal", "t3", 10), ("exponential", "scores", 30), ("t3", "t3", 200)):
        x, y = _draw(a, b, n, 6)
        batch = linear.moment_pvalue(x, y)
        for i in range(6):
            assert linear.pearson(x[i], y[i]).p_value == pytest.approx(batch[i], rel=1e-10, abs=1e-15)


@pytest.mark.slow
def test_level_table_of_the_default_pearson_test():
    lines, outside_99, outside_999 = [], [], []
    for (a, b), n in itertools.product(itertools.combinations_with_replacement(MARGINS, 2), SIZES):
        x, y = _draw(a, b, n, REPS)
        p = linear.moment_pvalue(x, y)
        assert np.isfinite(p).all()
        cells = []
        for alpha in ALPHAS:
            count = int(np.count_nonzero(p <= alpha))
            lo, hi = _bounds(alpha, 0.99)
            lo3, hi3 = _bounds(alpha, 0.999)
            mark = "" if lo <= count <= hi else " *"
            if mark:
                outside_99.append((a, b, n, alpha, count, (lo, hi)))
            if not lo3 <= count <= hi3:
                outside_999.append((a, b, n, alpha, count, (lo3, hi3)))
            cells.append(f"{count / REPS:.4f}{mark}")
        lines.append(f"| {a} | {b} | {n} | {cells[0]} | {cells[1]} |")
    print("\n| x | y | n | alpha 0.05 | alpha 0.01 |\n|---|---|---|---|---|\n" + "\n".join(lines))
    print(f"99% intervals: 0.05 -> {_bounds(0.05, 0.99)}, 0.01 -> {_bounds(0.01, 0.99)} of {REPS}; "
          f"outside: {outside_99}")
    assert not outside_999, outside_999
    assert len(outside_99) <= 3, outside_99


# -- real tables ----------------------------------------------------------------

B = 9_999


def _real_pairs() -> list[tuple[str, str, str, np.ndarray, np.ndarray]]:
    """50 pairs of skewed columns (|skewness| > 1, more than 5 distinct values) from tables that
    ship inside scikit-learn and statsmodels, with t-test p above 1e-3 so that a permutation
    test with B resamples resolves them; taken in turn from each table."""
    sklearn_datasets = pytest.importorskip("sklearn.datasets")
    sm_datasets = pytest.importorskip("statsmodels.datasets")
    tables = {}
    for name, loader in (("breast_cancer", sklearn_datasets.load_breast_cancer),
                         ("wine", sklearn_datasets.load_wine)):
        bunch = loader()
        tables[f"scikit-learn {name}"] = (bunch.data, list(bunch.feature_names))
    tables["scikit-learn diabetes"] = (sklearn_datasets.load_diabetes(scaled=False).data,
                                       list(sklearn_datasets.load_diabetes().feature_names))
    for name in ("engel", "grunfeld", "star98", "committee", "ccard", "statecrime", "china_smoking"):
        df = getattr(sm_datasets, name).load_pandas().data.select_dtypes("number")
        tables[f"statsmodels {name}"] = (df.to_numpy(float), list(df.columns))
    by_table = collections.defaultdict(list)
    for tname, (data, cols) in tables.items():
        usable = [j for j in range(data.shape[1]) if np.isfinite(data[:, j]).all()
                  and len(np.unique(data[:, j])) > 5 and abs(stats.skew(data[:, j])) > 1]
        for i, j in itertools.combinations(usable, 2):
            if stats.pearsonr(data[:, i], data[:, j]).pvalue > 1e-3:
                by_table[tname].append((tname, cols[i], cols[j], data[:, i], data[:, j]))
    picked = []
    while len(picked) < 50 and any(by_table.values()):
        for tname in list(by_table):
            if by_table[tname] and len(picked) < 50:
                picked.append(by_table[tname].pop(0))
    return picked


def _point_mass(v: np.ndarray) -> float:
    return np.unique(v, return_counts=True)[1].max() / v.size


_AGREEMENT: list = []


def _agreement():
    if _AGREEMENT:
        return _AGREEMENT
    out = _AGREEMENT
    for tname, a, b, x, y in _real_pairs():
        xc, yc = x - x.mean(), y - y.mean()
        scale = math.sqrt((xc @ xc) * (yc @ yc))
        # Reference: scipy.stats.permutation_test, statistic |r|, upper tail (our two-sided definition).
        ref = stats.permutation_test((yc,), lambda v, axis=-1: np.abs(v @ xc) / scale,
                                     permutation_type="pairings", vectorized=True, n_resamples=B,
                                     alternative="greater", random_state=1, batch=1000).pvalue
        ours = linear.pearson(x, y).p_value
        se = math.sqrt(ref * (1 - ref) / B)
        lumpy = max(_point_mass(x), _point_mass(y)) > 0.5
        out.append((tname, a, b, x.size, ref, ours, se, lumpy))
    return out


@pytest.mark.slow
def test_default_pvalue_agrees_with_permutation_test_on_real_skewed_tables():
    # B = 9,999 resamples (not 99,999) to keep CI time reasonable: the tolerance is 4 Monte Carlo
    # standard errors at B = 9,999, about 3.2 times wider than at 99,999. Run with B = 99,999 by hand
    # (the same pairs, scipy.stats.permutation_test, random_state=1): see README "Pearson's default
    # test on real tables". Columns with most of their values at one point are held to the same bound
    # (the law split on the partners of two dominant values, linear._two_point_pvalue).
    rows = _agreement()
    assert len(rows) == 50
    assert any(r[7] for r in rows)      # the mostly-one-value columns (star98 PCTCHRT, PCTYRRND) are in
    failures = []
    for tname, a, b, n, ref, ours, se, lumpy in rows:
        print(f"{tname} | {a} | {b} | n={n} | permutation {ref:.5f} | ours {ours:.5f} | z {(ours - ref) / se:+.1f}"
              + (" | point mass > 50%" if lumpy else ""))
        ok = abs(ours - ref) <= 4 * se or (ref < 1e-3 and abs(ours - ref) <= 0.1 * ref)
        if not ok:
            failures.append((tname, a, b, ref, ours))
    assert not failures, failures
