"""Every pair gets its verdict label from the engine, and it is the label the pair view gives.

The pair view's label comes from :func:`pairlens.core.verdict.classify_pair`
with the full Gaussian fit; the engine decides the label in its tiles from
evidence gathered without the fit (the rules do not read the normality tests)
and finishes it once the q-values exist. Checked on the invented vineyard demo
(every pair) and on a 100-column table (every pair labelled; a seeded sample
compared with classify_pair). W1's count is printed by
``python benchmarks/bench_engine.py --only W1V`` (pairs_labelled).
"""

from __future__ import annotations

import numpy as np
import pytest

from pairlens.core.results import TestResult
from pairlens.core.verdict import LABELS, classify_pair
from pairlens.engine import AnalysisSettings, run_analysis
from pairlens.ingest import load_table
from pairlens.library import demo_path
from pairlens.pairs import pair_detail


def _classify(data, names, table, x, y):
    i, j = names.index(x), names.index(y)
    keep = ~np.isnan(data[:, i]) & ~np.isnan(data[:, j])
    rows = table.lookup(x, y)
    results = {m: TestResult(r.estimate, r.p_value, r.method, r.ci_low, r.ci_high, r.n, r.note)
               for m, r in rows.items()}
    return classify_pair(data[keep, i], data[keep, j], results, {m: r.q_value for m, r in rows.items()},
                         alpha=0.05).label


def test_every_demo_pair_has_the_pair_views_label():
    demo = load_table(demo_path())
    settings = AnalysisSettings(measures=("pearson", "spearman", "kendall", "dcor", "xi"))
    table = run_analysis(demo.data, demo.columns, settings, workers=1, verdicts=True)
    k = len(table.variables)
    assert len(table.verdicts) == k * (k - 1) // 2 == 231   # 20 numeric, row_orientation and grape_variety
    assert set(table.verdicts.values()) <= set(LABELS)
    # the pair view's verdict (full detail, with the Gaussian fit) for a seeded sample of pairs
    rng = np.random.default_rng(15)
    keys = list(table.verdicts)
    for idx in rng.choice(len(keys), 12, replace=False):
        x, y = keys[idx]
        assert pair_detail(demo.data, demo.columns, x, y, settings, table=table)["pattern"]["label"] == \
            table.verdicts[(x, y)], (x, y)


@pytest.mark.slow  # 4,950 pairs: about 10 s on an idle core, 30 s on the shared CI machine
def test_a_100_column_table_has_a_verdict_for_every_pair():
    rng = np.random.default_rng(100)
    n, p = 150, 100
    z = rng.normal(size=(n, p))
    z[:, 1::4] = 0.7 * z[:, 0::4] + 0.5 * z[:, 1::4]          # linear partners
    z[:, 2::4] = z[:, 0::4] ** 2 + 0.3 * z[:, 2::4]           # non-monotone partners
    z[rng.random((n, p)) < 0.03] = np.nan
    names = [f"v{j:03d}" for j in range(p)]
    table = run_analysis(z, names, AnalysisSettings(), workers=1, verdicts=True)
    assert len(table.verdicts) == p * (p - 1) // 2 == 4950
    assert all(label in LABELS for label in table.verdicts.values())
    labels = set(table.verdicts.values())
    assert {"linear", "non-monotone", "no evidence of dependence"} <= labels
    keys = list(table.verdicts)
    for idx in rng.choice(len(keys), 25, replace=False):
        x, y = keys[idx]
        assert _classify(z, names, table, x, y) == table.verdicts[(x, y)], (x, y)
    # the partners themselves, where the influence rule and the significant paths run
    for j in range(0, 20, 4):
        for other in (j + 1, j + 2):
            x, y = names[j], names[other]
            assert _classify(z, names, table, x, y) == table.verdicts[(x, y)], (x, y)


@pytest.mark.parametrize("measures", [("pearson",), ("pearson", "spearman"), ("pearson", "xi"),
                                      ("spearman", "dcor_bc"), ("kendall", "xi"), ("dcor",)])
def test_labels_of_partial_panels_are_the_pair_views(measures):
    # The tiles skip the estimates a label cannot read with these panels (no dependence test that
    # can be significant: rule 5 out of reach); every pair's label must still be classify_pair's.
    rng = np.random.default_rng(21)
    n = 120
    base = rng.normal(size=n)
    few_x, few_y = rng.normal(size=n), rng.normal(size=n)
    few_x[-3:], few_y[-3:] = (8.0, 9.0, 10.0), (8.5, 9.5, 10.5)   # three points make r
    z = np.column_stack([base, 0.8 * base + 0.6 * rng.normal(size=n), base ** 2 + 0.3 * rng.normal(size=n),
                         np.exp(2 * base) + 0.2 * rng.normal(size=n), few_x, few_y, rng.normal(size=n),
                         np.round(rng.normal(size=n))])
    z[rng.random(z.shape) < 0.02] = np.nan
    names = ["base", "linear", "square", "curve", "few_x", "few_y", "noise", "ticks"]
    table = run_analysis(z, names, AnalysisSettings(measures=measures), workers=1, verdicts=True)
    assert len(table.verdicts) == 28
    for x, y in table.verdicts:
        assert _classify(z, names, table, x, y) == table.verdicts[(x, y)], (measures, x, y)
    # the panels see different things: not every pair gets the same label
    assert len(set(table.verdicts.values())) >= 2
