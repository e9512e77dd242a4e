"""The engine: pair order, missing-data policies, groups, q-values, seeds, progress, cancel."""

import math

import numpy as np
import pytest
import scipy.stats as ss

from pairlens.core.registry import MEASURES
from pairlens.engine import AnalysisCancelled, AnalysisSettings, SettingsError, run_analysis
from pairlens.pairs import pair_detail


def _table(seed=0, n=150, missing=0.08):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = a + 0.5 * rng.normal(size=n)
    c = np.round(rng.exponential(size=n), 1)       # ties
    d = rng.uniform(-1, 1, size=n)
    e = d ** 2 + 0.05 * rng.normal(size=n)
    data = np.column_stack([a, b, c, d, e])
    mask = rng.uniform(size=data.shape) < missing
    data[mask] = np.nan
    return data, ["a", "b", "c", "d", "e"]


def _same_record(a, b):
    def same(u, v):
        return (isinstance(u, float) and isinstance(v, float) and math.isnan(u) and math.isnan(v)) or u == v
    return a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)


def _settings(**kw):
    return AnalysisSettings.from_options(**kw)


def test_pairs_in_input_order_and_xi_both_directions():
    data, names = _table()
    res = run_analysis(data, names, _settings(measures="pearson,xi"), workers=1)
    keys = [(r.x, r.y, r.measure) for r in res.rows]
    expected = []
    for i in range(5):
        for j in range(i + 1, 5):
            expected += [(names[i], names[j], "pearson"), (names[i], names[j], "xi"), (names[j], names[i], "xi")]
    assert keys == expected


def test_pairwise_and_complete_missing_policies_count_rows():
    data, names = _table()
    pw = run_analysis(data, names, _settings(measures="pearson"), workers=1)
    cc = run_analysis(data, names, _settings(measures="pearson", missing="complete"), workers=1)
    complete_rows = int((~np.isnan(data).any(axis=1)).sum())
    for r in pw.rows:
        i, j = names.index(r.x), names.index(r.y)
        keep = ~np.isnan(data[:, i]) & ~np.isnan(data[:, j])
        assert r.n == keep.sum()
        # reference: scipy.stats.pearsonr on the pair's complete rows
        assert r.estimate == pytest.approx(ss.pearsonr(data[keep, i], data[keep, j]).statistic, rel=1e-9)
    assert all(r.n == complete_rows for r in cc.rows)


def test_q_values_are_bh_within_each_measure():
    data, names = _table(1)
    res = run_analysis(data, names, _settings(measures="pearson,spearman,xi"), workers=1)
    for m in ("pearson", "spearman", "xi"):
        rows = [r for r in res.rows if r.measure == m]
        p = np.array([r.p_value for r in rows])
        # reference: scipy.stats.false_discovery_control (Benjamini-Hochberg)
        np.testing.assert_allclose([r.q_value for r in rows], ss.false_discovery_control(p), rtol=1e-12)


def test_holm_and_none_adjustments():
    from statsmodels.stats.multitest import multipletests

    data, names = _table(2)
    holm = run_analysis(data, names, _settings(measures="kendall", adjust="holm"), workers=1)
    none = run_analysis(data, names, _settings(measures="kendall", adjust="none"), workers=1)
    p = np.array([r.p_value for r in holm.rows])
    # reference: statsmodels multipletests(method="holm")
    np.testing.assert_allclose([r.q_value for r in holm.rows], multipletests(p, method="holm")[1], rtol=1e-12)
    assert [r.q_value for r in none.rows] == [r.p_value for r in none.rows]


def test_group_takes_the_place_of_its_columns():
    import dcor

    data, names = _table(3, missing=0.0)
    res = run_analysis(data, names, _settings(measures="pearson,dcor", groups=["ab=a,b"]), workers=1)
    assert res.variables == ["ab", "c", "d", "e"]
    rows = res.lookup("ab", "e")
    assert math.isnan(rows["pearson"].estimate) and "group" in rows["pearson"].note
    # reference: dcor.distance_correlation on the (n, 2) block against the column
    expected = dcor.distance_correlation(data[:, :2], data[:, 4])
    assert rows["dcor"].estimate == pytest.approx(expected, rel=1e-9)


def test_constant_column_gives_nan_and_note_not_zero():
    data, names = _table(4)
    data[:, 2] = 1.0
    res = run_analysis(data, names, _settings(measures="pearson,spearman,kendall,dcor"), workers=1)
    for r in res.rows:
        if "c" in (r.x, r.y):
            assert math.isnan(r.estimate) and math.isnan(r.q_value) and "constant" in r.note.lower()
        else:
            assert math.isfinite(r.estimate)


def test_results_do_not_depend_on_workers_or_tiling():
    data, names = _table(5, n=300)
    s = _settings(measures="dcor,xi", permutations=49, seed=11)
    one = run_analysis(data, names, s, workers=1)
    two = run_analysis(data, names, s, workers=2)
    assert len(one.rows) == len(two.rows)
    for a, b in zip(one.rows, two.rows):
        assert _same_record(a.record(), b.record())
    assert any(r.method.startswith("permutation") for r in one.rows)


def test_progress_reaches_one_and_cancel_stops():
    data, names = _table(6)
    seen = []
    run_analysis(data, names, _settings(measures="pearson"), workers=1, progress=lambda f, left: seen.append(f))
    assert seen and seen[-1] == pytest.approx(1.0) and seen == sorted(seen)
    with pytest.raises(AnalysisCancelled):
        run_analysis(data, names, _settings(measures="pearson"), workers=1, cancel=lambda: True)


def _collector_on(_task):
    import gc

    return gc.isenabled()


@pytest.mark.parametrize("caller_collects", [True, False])
def test_the_collector_pause_is_the_engines_own(caller_collects):
    # the engine pauses this process's garbage collector while results arrive: the caller's setting
    # comes back after a run and after a cancelled one, and forked workers collect as usual
    import gc

    from pairlens.executors import ProcessExecutor

    data, names = _table(8, n=200)
    was = gc.isenabled()
    try:
        (gc.enable if caller_collects else gc.disable)()
        run_analysis(data, names, _settings(measures="pearson,kendall"), workers=2, verdicts=True)
        assert gc.isenabled() == caller_collects
        with pytest.raises(AnalysisCancelled):
            run_analysis(data, names, _settings(measures="kendall"), workers=2, cancel=lambda: True)
        assert gc.isenabled() == caller_collects
        gc.disable()
        seen = [on for _, on in ProcessExecutor(2).run(_collector_on, [0, 1, 2, 3], lambda: None, ())]
        assert seen == [True] * 4
    finally:
        (gc.enable if was else gc.disable)()


@pytest.mark.parametrize("bad", [
    dict(measures="pearson,nope"), dict(missing="listwise"), dict(adjust="bonferroni"),
    dict(confidence=1.5), dict(permutations=-1), dict(groups=["g=a,zz"]), dict(columns="a,zz"),
    dict(groups=["a=b,c"]), dict(groups=["g1=a,b", "g2=b,c"]),
])
def test_bad_settings_raise_settings_error(bad):
    data, names = _table(7)
    with pytest.raises(SettingsError):
        run_analysis(data, names, _settings(**bad), workers=1)


def test_pair_detail_matches_contract_shape():
    data, names = _table(8)
    d = pair_detail(data, names, "d", "e")
    assert set(d) >= {"x", "y", "n", "measures", "gaussian", "pattern"}
    # every measure that applies to a pair of two numeric columns (registry ``kinds``)
    assert set(d["measures"]) == {m for m, e in MEASURES.items() if e.applies_to("numeric", "numeric")}
    for m in d["measures"].values():
        assert set(m) >= {"estimate", "ci_low", "ci_high", "p_value"}
    g = d["gaussian"]
    assert set(g) >= {"mean", "cov", "rho", "conditional", "implied", "normality"}
    assert set(g["conditional"]) == {"slope", "intercept", "residual_sd"}
    assert g["normality"]["test"] == "henze-zirkler"
    keep = ~np.isnan(data[:, 3]) & ~np.isnan(data[:, 4])
    # reference: numpy mean and cov (ddof=1)
    np.testing.assert_allclose(g["mean"], data[keep][:, [3, 4]].mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(g["cov"], np.cov(data[keep, 3], data[keep, 4]), rtol=1e-12)
    assert d["pattern"]["label"] and isinstance(d["pattern"]["reasons"], list)


def test_pair_detail_uses_the_rows_of_a_complete_case_analysis():
    data, names = _table(9)
    settings = _settings(measures="pearson,spearman", missing="complete")
    table = run_analysis(data, names, settings, workers=1)
    d = pair_detail(data, names, "a", "b", settings, table=table)
    complete = ~np.isnan(data).any(axis=1)
    assert d["n"] == int(complete.sum()) == d["measures"]["pearson"]["n"]
    # reference: numpy mean over the complete-case rows
    np.testing.assert_allclose(d["gaussian"]["mean"], data[complete][:, :2].mean(axis=0), rtol=1e-12)


def test_note_is_empty_for_defined_values_and_method_is_kept():
    data, names = _table(10)
    res = run_analysis(data, names, _settings(measures="pearson,kendall,dcor"), workers=1)
    for r in res.rows:
        assert math.isfinite(r.estimate) and r.note == "" and r.method


def test_permutations_count_as_work_when_choosing_local_workers():
    # 66 pairs of 2,000 rows are too little work to fork for, 999 resamples of each are not
    from pairlens.executors import ProcessExecutor, SerialExecutor, make_executor

    assert isinstance(make_executor(workers=2, n_tasks=66, n_rows=2000), SerialExecutor)
    chosen = make_executor(workers=2, n_tasks=66, n_rows=2000, resamples=999)
    assert isinstance(chosen, ProcessExecutor) and chosen.parallelism == 2
    assert isinstance(make_executor(workers=1, n_tasks=66, n_rows=2000, resamples=999), SerialExecutor)
