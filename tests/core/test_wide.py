"""The matrix path (app/core/wide.py, app/matrix_path.py) against the per-pair kernels and reference libraries.

The per-pair kernels are the oracle of the matrix path (issue 19): estimates to 1e-12
relative, p-values to 1e-9. Near r = 0 a relative bound cannot hold for any two orders of
summation (both paths carry an absolute rounding of about 1e-16 on r), so estimates also
get an absolute slack of 1e-15.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import json

import numpy as np
import pytest
from scipy import stats

from pairlens import config
from pairlens.cli import main
from pairlens.core import wide
from pairlens.core.registry import MEASURES, PairContext
from pairlens.engine import AnalysisSettings, run_analysis
from pairlens.export import pairs_to_csv, write_pairs_stream
from pairlens.matrix_path import WidePairTable


def _table(n: int, seed: int) -> np.ndarray:
    """Normal, constant, tied, skewed, affine and missing columns."""
    rng = np.random.default_rng(seed)
    d = rng.normal(size=(n, 9))
    d[:, 2] = 1.5                                   # constant
    d[:, 3] = np.round(d[:, 3])                     # ties
    d[:, 4] = rng.lognormal(size=n) ** 2            # one dominant point: Pearson's split rule
    d[:, 5] = 2.0 * d[:, 0] + 1.0                   # |r| = 1
    d[:, 6] = np.round(2.0 * d[:, 6])               # ties
    if n >= 6:
        d[::5, 7] = np.nan                          # missing values
        d[1, 8] = np.nan
    return d


def _assert_matches_per_pair(data: np.ndarray, test: str) -> dict:
    wp = wide.pair_matrix(data, pearson_test=test)
    seen = {}
    for m, arr in wp.measures.items():
        ctx = PairContext(test=test if m == "pearson" else "")
        checked = 0
        for k, (i, j) in enumerate(zip(wp.i.tolist(), wp.j.tolist())):
            if arr.fallback[k]:
                continue
            # Oracle: the per-pair kernel behind the registry entry (with its p-value floor).
            ref = MEASURES[m].compute(data[:, i], data[:, j], ctx)
            where = f"{m} {test} pair ({i}, {j}) n={data.shape[0]}"
            np.testing.assert_allclose(arr.estimate[k], ref.estimate, rtol=1e-12, atol=1e-15, err_msg=where)
            np.testing.assert_allclose(arr.p_value[k], ref.p_value, rtol=1e-9, atol=1e-15, err_msg=where)
            np.testing.assert_allclose([arr.ci_low[k], arr.ci_high[k]], [ref.ci_low, ref.ci_high],
                                       rtol=1e-10, atol=1e-14, err_msg=where)
            assert arr.n[k] == ref.n, where
            if ref.n < config.MIN_ROWS:
                # the engine's wording (engine._compute_one), which the matrix path gives, adds the count
                assert arr.notes[arr.note[k]] == f"fewer than 3 rows with both values present ({ref.n})", where
                assert arr.methods[arr.method[k]] == "", where
                checked += 1
                continue
            assert arr.notes[arr.note[k]] == ref.note, where
            assert arr.methods[arr.method[k]] == ref.method, where
            checked += 1
        seen[m] = checked
    return seen


@pytest.mark.parametrize("n", [3, 4, 9, 40, 160])
@pytest.mark.parametrize("test", ["moments", "t"])
def test_matrix_path_equals_per_pair_kernels(n, test):
    checked = _assert_matches_per_pair(_table(n, seed=n), test)
    # most pairs are checked, not handed back
    assert checked["pearson"] >= 20 and checked["spearman"] >= 10


@pytest.mark.parametrize("n", [12, 90])
def test_missing_values_in_every_column_match_per_pair_kernels(n):
    rng = np.random.default_rng(n)
    data = np.column_stack([rng.normal(size=(n, 4)), rng.lognormal(size=(n, 3)) ** 2])
    data[rng.uniform(size=data.shape) < 0.15] = np.nan
    data[: n - 6, 6] = np.nan            # a pair with only a few rows: exact enumeration on its rows
    wp = wide.pair_matrix(data)
    assert not wp.measures["pearson"].fallback.all()
    _assert_matches_per_pair(data, "moments")
    _assert_matches_per_pair(data, "t")


@pytest.mark.parametrize("n", [60, 200])
def test_spearman_with_missing_values_on_each_pairs_own_rows(n):
    """Spearman of pairs touching incomplete columns, from scores on each pair's own rows.

    Reference: scipy.stats.spearmanr on the pair's complete rows (estimate; its t p-value where
    the per-pair rule is the t approximation), and the per-pair kernel for everything (p-values of
    the Edgeworth series, notes, methods, row counts); ties, a constant-on-its-rows column and a
    column with only a few rows left are included."""
    rng = np.random.default_rng(n)
    data = rng.normal(size=(n, 8)) + rng.normal(size=(n, 1))
    data[:, 2] = np.round(data[:, 2])                     # ties
    data[:, 3] = np.exp(data[:, 3])                       # skewed, same ranks as a normal column
    data[rng.uniform(size=data.shape) < 0.12] = np.nan
    data[: n - 20, 6] = np.nan                            # 20 rows left: the per-pair kernel's laws
    data[:, 7] = np.where(np.arange(n) < n // 2, 1.0, data[:, 7])
    wp = wide.pair_matrix(data, measures=("spearman",))
    arr = wp.measures["spearman"]
    computed = 0
    for k, (i, j) in enumerate(zip(wp.i.tolist(), wp.j.tolist())):
        if arr.fallback[k]:
            continue
        both = ~np.isnan(data[:, i]) & ~np.isnan(data[:, j])
        ref = stats.spearmanr(data[both, i], data[both, j])
        np.testing.assert_allclose(arr.estimate[k], ref.statistic, rtol=1e-12, atol=1e-15)
        assert arr.n[k] == both.sum()
        if arr.methods[arr.method[k]].startswith("t approximation"):
            np.testing.assert_allclose(arr.p_value[k], ref.pvalue, rtol=1e-9)
        computed += 1
    # pairs of columns 0-5 (no few-row column among them) come from the scores, not the fallback
    assert computed >= 15
    assert not arr.fallback[(wp.i < 6) & (wp.j < 6) & (wp.i != 2) & (wp.j != 2)].any()
    _assert_matches_per_pair(data, "t")


def test_constant_column_is_nan_with_the_reason():
    wp = wide.pair_matrix(_table(40, seed=1))
    arr = wp.measures["pearson"]
    k = np.flatnonzero((wp.i == 0) & (wp.j == 2))[0]
    assert np.isnan(arr.estimate[k]) and np.isnan(arr.p_value[k])
    assert arr.notes[arr.note[k]] == "constant column: y"


def test_estimates_and_t_pvalues_match_scipy():
    rng = np.random.default_rng(11)
    data = rng.normal(size=(200, 6))
    data[:, 1] += 0.4 * data[:, 0]
    data[:, 3] = np.round(data[:, 3] * 2)
    wp = wide.pair_matrix(data, pearson_test="t")
    for k, (i, j) in enumerate(zip(wp.i, wp.j)):
        # Reference: scipy.stats.pearsonr (t-test with n-2 df) and scipy.stats.spearmanr (t approximation)
        r_ref = stats.pearsonr(data[:, i], data[:, j])
        np.testing.assert_allclose(wp.measures["pearson"].estimate[k], r_ref.statistic, rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(wp.measures["pearson"].p_value[k], r_ref.pvalue, rtol=1e-9)
        s_ref = stats.spearmanr(data[:, i], data[:, j])
        np.testing.assert_allclose(wp.measures["spearman"].estimate[k], s_ref.statistic, rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(wp.measures["spearman"].p_value[k], s_ref.pvalue, rtol=1e-9)


def test_exact_pvalue_of_four_rows_matches_full_enumeration():
    rng = np.random.default_rng(5)
    data = rng.normal(size=(4, 5))
    wp = wide.pair_matrix(data, measures=("pearson",))
    arr = wp.measures["pearson"]
    for k, (i, j) in enumerate(zip(wp.i, wp.j)):
        # Reference: scipy.stats.permutation_test over all 4! pairings, P(|r_pi| >= |r|)
        ref = stats.permutation_test((data[:, i], data[:, j]), lambda x, y: abs(stats.pearsonr(x, y).statistic),
                                     permutation_type="pairings", alternative="greater", n_resamples=np.inf,
                                     vectorized=False)
        np.testing.assert_allclose(arr.p_value[k], ref.pvalue, rtol=1e-9)


def _records_equal(a, b):
    assert len(a) == len(b)
    for x, y in zip(a, b):
        for f in x:
            if isinstance(y[f], float):
                np.testing.assert_allclose(x[f], y[f], rtol=1e-9, atol=1e-15, err_msg=f"{f} {x} {y}")
            else:
                assert x[f] == y[f], (f, x, y)


@pytest.mark.parametrize("missing", ["pairwise", "complete"])
def test_engine_matrix_path_equals_pairs_path(missing):
    data = _table(25, seed=3)
    names = [f"c{k}" for k in range(data.shape[1])]
    settings = AnalysisSettings(measures=("pearson", "spearman"), missing=missing)
    a = run_analysis(data, names, settings, workers=1, path="matrix")
    b = run_analysis(data, names, settings, workers=1, path="pairs")
    assert isinstance(a, WidePairTable) and not isinstance(b, WidePairTable)
    _records_equal(a.records(), b.records())
    np.testing.assert_allclose(a.matrix("spearman"), b.matrix("spearman"), rtol=1e-12, atol=1e-15)
    assert a.lookup("c1", "c0")["pearson"].q_value == pytest.approx(b.lookup("c0", "c1")["pearson"].q_value)


def test_auto_takes_the_matrix_path_for_wide_tables_only(monkeypatch):
    data = np.random.default_rng(2).normal(size=(10, 12))
    names = [f"c{k}" for k in range(12)]
    monkeypatch.setattr(config, "MATRIX_PATH_MIN_PAIRS", 60)
    wide_settings = AnalysisSettings(measures=("pearson", "spearman"))
    assert isinstance(run_analysis(data, names, wide_settings, workers=1), WidePairTable)          # 66 pairs
    assert not isinstance(run_analysis(data[:, :11], names[:11], wide_settings, workers=1), WidePairTable)
    with_kendall = AnalysisSettings(measures=("pearson", "kendall"))
    assert not isinstance(run_analysis(data, names, with_kendall, workers=1), WidePairTable)


def _spy_on_parts(monkeypatch) -> list:
    """Record the measures of every matrix part an analysis computes beside its tiles."""
    from pairlens import matrix_path

    seen = []
    real = matrix_path.run_part

    def spy(data, variables, settings, row_mask, measures, **kw):
        seen.append(tuple(measures))
        return real(data, variables, settings, row_mask, measures, **kw)

    monkeypatch.setattr(matrix_path, "run_part", spy)
    return seen


@pytest.mark.parametrize("n, missing, measures, workers", [
    (25, "pairwise", ("pearson", "spearman", "kendall", "dcor"), 1),
    (90, "pairwise", ("spearman", "xi", "pearson"), 2),
    (4, "pairwise", ("pearson", "spearman", "kendall", "dcor"), 1),
    (40, "complete", ("kendall", "pearson"), 2),
    (40, "pairwise", ("pearson", "spearman"), 1),          # verdicts only: nothing else left for the tiles
])
def test_matrix_part_beside_the_tiles_equals_the_pairs_path(n, missing, measures, workers, monkeypatch):
    # Oracle: the per-pair path (path="pairs"), the matrix path's reference (issue 19): same rows in
    # the same order, estimates to 1e-12 and p/q-values to 1e-9, notes, methods, n and verdicts equal.
    data = _table(n, seed=11)
    names = [f"c{k}" for k in range(data.shape[1])]
    settings = AnalysisSettings(measures=measures, missing=missing)
    seen = _spy_on_parts(monkeypatch)
    a = run_analysis(data, names, settings, workers=workers, path="matrix", verdicts=True)
    assert seen == [tuple(m for m in measures if m in wide.WIDE_MEASURES)]
    b = run_analysis(data, names, settings, workers=workers, path="pairs", verdicts=True)
    assert len(seen) == 1                                   # the pairs path computes no matrix part
    assert [(r.x, r.y, r.measure) for r in a.rows] == [(r.x, r.y, r.measure) for r in b.rows]
    for ra, rb in zip(a.rows, b.rows):
        where = f"{ra.measure} {ra.x} {ra.y} n={n}"
        assert (ra.n, ra.note, ra.method) == (rb.n, rb.note, rb.method), where
        np.testing.assert_allclose(ra.estimate, rb.estimate, rtol=1e-12, atol=1e-15, err_msg=where)
        np.testing.assert_allclose([ra.p_value, ra.q_value], [rb.p_value, rb.q_value], rtol=1e-9, atol=1e-15,
                                   err_msg=where)
        np.testing.assert_allclose([ra.ci_low, ra.ci_high], [rb.ci_low, rb.ci_high], rtol=1e-10, atol=1e-14,
                                   err_msg=where)
    assert a.verdicts == b.verdicts


def test_matrix_part_is_taken_for_wide_runs_only(monkeypatch):
    from pairlens.executors import SerialExecutor

    data = np.random.default_rng(4).normal(size=(30, 12))
    names = [f"c{k}" for k in range(12)]
    monkeypatch.setattr(config, "MATRIX_PATH_MIN_PAIRS", 60)
    seen = _spy_on_parts(monkeypatch)
    run_analysis(data, names, AnalysisSettings(measures=("pearson", "kendall")), workers=1)          # 66 pairs
    run_analysis(data, names, AnalysisSettings(), workers=1, verdicts=True)
    run_analysis(data, names, AnalysisSettings(), executor=SerialExecutor(), verdicts=True)  # a given executor too
    assert seen == [("pearson",), ("pearson", "spearman"), ("pearson", "spearman")]
    run_analysis(data[:, :11], names[:11], AnalysisSettings(measures=("pearson", "kendall")), workers=1)  # 55
    run_analysis(data, names, AnalysisSettings(measures=("kendall", "dcor")), workers=1)   # nothing to take
    run_analysis(data, names, AnalysisSettings(tests=(("pearson", "permutation"),), permutations=9), workers=1)
    assert len(seen) == 3


class _RemoteLikeExecutor:
    """Runs tiles in this process like Dask would: the initializer's arguments and every task go
    through pickle, so nothing the engine holds in memory reaches a tile any other way."""

    parallelism = 2

    def __init__(self):
        self.tasks = []

    def run(self, fn, tasks, initializer, initargs, cancel=None):
        import pickle

        initializer(*pickle.loads(pickle.dumps(initargs)))
        for index, task in enumerate(tasks):
            self.tasks.append(task)
            yield index, fn(pickle.loads(pickle.dumps(task)))

    def close(self):
        pass


def test_tiles_on_remote_workers_carry_their_share_of_the_matrix_part(monkeypatch):
    # Oracle: the same analysis with the whole part in the workers' memory (serial executor),
    # itself checked against the per-pair path above; here rows, p/q-values and labels are equal bit for bit.
    from pairlens.executors import SerialExecutor
    from pairlens.tiles import CarriedTile

    data = _table(40, seed=13)
    rng = np.random.default_rng(13)
    data = np.column_stack([data, rng.normal(size=(40, 11)) + data[:, :1]])   # 190 pairs: tiles of 6
    names = [f"c{k}" for k in range(data.shape[1])]
    settings = AnalysisSettings(measures=("pearson", "spearman", "kendall", "dcor"))
    seen = _spy_on_parts(monkeypatch)
    local = run_analysis(data, names, settings, executor=SerialExecutor(), path="matrix", verdicts=True)
    remote_like = _RemoteLikeExecutor()
    carried = run_analysis(data, names, settings, executor=remote_like, path="matrix", verdicts=True)
    assert len(seen) == 2 and len(remote_like.tasks) > 1
    assert all(isinstance(t, CarriedTile) for t in remote_like.tasks) and max(map(len, remote_like.tasks)) > 1
    # each tile carries its own pairs' results only
    assert [len(t.part.pairs.i) for t in remote_like.tasks] == [len(t.pairs) for t in remote_like.tasks]
    assert _bits(carried.rows) == _bits(local.rows)
    assert carried.verdicts == local.verdicts and len(carried.verdicts) == len(names) * (len(names) - 1) // 2


def _bits(rows) -> list:
    """Each row's fields, floats as their IEEE bits (NaN equal to NaN, -0.0 apart from 0.0)."""
    import struct

    return [tuple(struct.pack("<d", v) if isinstance(v, float) else v for v in dataclasses.astuple(r)) for r in rows]


def test_a_share_of_the_matrix_part_gives_the_same_rows_and_refuses_other_pairs():
    from pairlens import matrix_path
    from pairlens.plan import pair_indices, plan_variables

    data = _table(30, seed=2)
    names = [f"c{k}" for k in range(data.shape[1])]
    settings = AnalysisSettings(measures=("pearson", "spearman"))
    variables = plan_variables(names, settings)
    part = matrix_path.run_part(data, variables, settings, None, ("pearson", "spearman"))
    pairs = pair_indices(variables)
    tile = pairs[5:17]
    share = part.share(tile)

    def bits(found):
        return [{m: _bits([row]) for m, row in d.items()} for d in found]

    assert bits(share.rows(tile)) == bits(part.rows(tile)) and sum(map(len, part.rows(tile))) > 0
    assert bits(share.rows(tile[::-1])) == bits(part.rows(tile[::-1]))
    inner = share.share(tile[3:6])                      # a share of a share
    assert bits(inner.rows(tile[3:6])) == bits(part.rows(tile[3:6]))
    with pytest.raises(KeyError):
        share.rows(pairs[:1])


def test_matrix_part_reports_progress_and_cancels(monkeypatch):
    from pairlens.engine import AnalysisCancelled

    data = _table(30, seed=5)
    names = [f"c{k}" for k in range(data.shape[1])]
    settings = AnalysisSettings(measures=("pearson", "kendall"))
    seen = []
    run_analysis(data, names, settings, workers=1, path="matrix", progress=lambda f, s: seen.append(f))
    assert seen == sorted(seen) and seen[-1] == 1.0 and 0.0 < seen[0] < 1.0
    with pytest.raises(AnalysisCancelled):
        run_analysis(data, names, settings, workers=1, path="matrix", cancel=lambda: True)


def _wide_result():
    data = _table(30, seed=7)
    rng = np.random.default_rng(7)
    data = np.column_stack([data, rng.normal(size=(30, 20)) + data[:, :1]])
    names = [f"v{k}" for k in range(data.shape[1])]
    return run_analysis(data, names, AnalysisSettings(measures=("pearson", "spearman")), workers=1, path="matrix")


def test_streamed_csv_qvalues_equal_scipy_on_the_whole_column():
    result = _wide_result()
    buf = io.StringIO()
    write_pairs_stream(result, buf, "csv")
    rows = list(csv.DictReader(io.StringIO(buf.getvalue())))
    assert len(rows) == len(result)
    for m in ("pearson", "spearman"):
        p = np.array([float(r["p_value"]) if r["p_value"] else np.nan for r in rows if r["measure"] == m])
        q = np.array([float(r["q_value"]) if r["q_value"] else np.nan for r in rows if r["measure"] == m])
        ok = ~np.isnan(p)
        # Reference: scipy.stats.false_discovery_control (Benjamini-Hochberg) over the whole defined column
        np.testing.assert_allclose(q[ok], stats.false_discovery_control(p[ok], method="bh"), rtol=1e-12)
        assert np.isnan(q[~ok]).all()


def test_stream_of_a_per_pair_table_is_the_csv_export():
    data = _table(20, seed=9)
    names = [f"c{k}" for k in range(data.shape[1])]
    table = run_analysis(data, names, AnalysisSettings(measures=("pearson", "kendall")), workers=1)
    buf = io.StringIO()
    write_pairs_stream(table, buf, "csv")
    assert buf.getvalue() == pairs_to_csv(table.records())


def test_top_and_max_q_filters(tmp_path):
    result = _wide_result()
    full = io.StringIO()
    write_pairs_stream(result, full, "csv")
    rows = list(csv.DictReader(io.StringIO(full.getvalue())))
    top = io.StringIO()
    write_pairs_stream(result, top, "jsonl", top=5)
    lines = [json.loads(line) for line in top.getvalue().splitlines()]
    for m in ("pearson", "spearman"):
        mine = [r for r in lines if r["measure"] == m]
        assert len(mine) == 5
        qs = sorted(float(r["q_value"]) for r in rows if r["measure"] == m and r["q_value"])
        assert [r["q_value"] for r in mine] == pytest.approx(qs[:5], rel=1e-15)
    few = io.StringIO()
    write_pairs_stream(result, few, "csv", max_q=0.2)
    kept = list(csv.DictReader(io.StringIO(few.getvalue())))
    assert len(kept) == sum(1 for r in rows if r["q_value"] and float(r["q_value"]) <= 0.2) > 0


def test_parquet_stream_has_the_csv_values(tmp_path):
    pq = pytest.importorskip("pyarrow.parquet")
    result = _wide_result()
    write_pairs_stream(result, str(tmp_path / "t.parquet"), "parquet")
    table = pq.read_table(tmp_path / "t.parquet").to_pydict()
    records = result.records()
    assert table["x"] == [r["x"] for r in records]
    np.testing.assert_array_equal(np.array(table["p_value"], dtype=float),
                                  np.array([r["p_value"] for r in records], dtype=float))


def test_cli_pairs_streams_with_top(tmp_path, capsys):
    rng = np.random.default_rng(4)
    data = rng.normal(size=(12, 15))
    src = tmp_path / "wide.csv"
    src.write_text(",".join(f"c{k}" for k in range(15)) + "\n"
                   + "\n".join(",".join(repr(float(v)) for v in row) for row in data) + "\n")
    out = tmp_path / "top.csv"
    assert main(["pairs", str(src), "--measures", "pearson,spearman", "--path", "matrix", "--top", "3",
                 "-o", str(out)]) == 0
    rows = list(csv.DictReader(out.open()))
    assert [r["measure"] for r in rows] == ["pearson"] * 3 + ["spearman"] * 3
    assert main(["pairs", str(src), "--measures", "kendall", "--path", "matrix", "-o", str(out)]) != 0
    assert "matrix path" in capsys.readouterr().err


def test_library_analyze_takes_the_matrix_path():
    import pandas as pd

    import pairlens

    rng = np.random.default_rng(6)
    df = pd.DataFrame(rng.normal(size=(30, 8)), columns=[f"c{k}" for k in range(8)])
    df.iloc[::4, 2] = np.nan
    a = pairlens.analyze(df, measures="pearson,spearman", workers=1, progress=False, path="matrix")
    b = pairlens.analyze(df, measures="pearson,spearman", workers=1, progress=False, path="pairs")
    pd.testing.assert_frame_equal(a.pairs, b.pairs, rtol=1e-9, atol=1e-15)
    # Reference: pandas DataFrame.corr (pairwise-complete Pearson)
    np.testing.assert_allclose(a.matrix("pearson").to_numpy()[~np.eye(8, dtype=bool)],
                               df.corr().to_numpy()[~np.eye(8, dtype=bool)], rtol=1e-12, atol=1e-15)


# --- columns too long to hold: blocks, exact q-values of the kept rows, progress and cancel --------

@pytest.mark.parametrize("shape", ["uniform", "skewed", "rounded", "two_groups", "zeros"])
def test_head_qvalues_equal_scipy_on_the_whole_column(shape, monkeypatch):
    rng = np.random.default_rng(len(shape))
    m = 20_000
    p = {"uniform": rng.uniform(size=m), "skewed": rng.uniform(size=m) ** 6,
         "rounded": np.round(rng.uniform(size=m), 3),          # ties
         "two_groups": np.concatenate([rng.uniform(size=m // 2) * 1e-8, rng.uniform(size=m // 2)]),
         "zeros": np.concatenate([np.zeros(50), rng.uniform(size=m)])}[shape]
    rng.shuffle(p)
    chunks = lambda: iter(np.array_split(p, 7))
    # Reference: scipy.stats.false_discovery_control (BH) and the Holm step-down of
    # pairlens.core.testing.adjust_pvalues, each on the whole column
    bh = np.sort(stats.false_discovery_control(p, method="bh"))
    from pairlens.core.testing import adjust_pvalues
    holm = np.sort(adjust_pvalues(p, "holm"))
    # tiny gather and bin limits force every refinement level; the defaults gather at once
    for gather, sub in ((1, 16), (64, 256), (wide._GATHER_MAX, wide._SUB_BINS)):
        monkeypatch.setattr(wide, "_GATHER_MAX", gather)
        monkeypatch.setattr(wide, "_SUB_BINS", sub)
        for k in (1, 300, p.size - 1, p.size + 3):
            head = np.sort(p)[:k]
            np.testing.assert_allclose(wide.head_adjusted(head, p.size, chunks), bh[:k], rtol=1e-13, atol=0)
            np.testing.assert_array_equal(wide.head_adjusted(head, p.size, chunks, "holm"), holm[:k])


@pytest.mark.parametrize("n", [4, 30])
def test_top_run_in_blocks_equals_the_whole_table_filtered(n):
    data = _table(n, seed=11)
    rng = np.random.default_rng(11)
    data = np.column_stack([data, rng.normal(size=(n, 40)) + data[:, :1]])
    names = [f"v{k}" for k in range(data.shape[1])]
    settings = AnalysisSettings(measures=("pearson", "spearman"))
    whole = run_analysis(data, names, settings, workers=1, path="matrix", streamed=True)
    top = run_analysis(data, names, settings, workers=1, path="matrix", streamed=True, top=40)
    assert not isinstance(top, WidePairTable) and len(top) == 80
    for kw in ({"top": 40}, {"top": 40, "max_q": 0.5}):
        a, b = io.StringIO(), io.StringIO()
        write_pairs_stream(whole, a, "csv", **kw)
        write_pairs_stream(top, b, "csv", **kw)
        assert a.getvalue() == b.getvalue()
    rows = list(csv.DictReader(io.StringIO(b.getvalue())))
    all_rows = whole.records()
    for m in ("pearson", "spearman"):
        p = np.array([r["p_value"] for r in all_rows if r["measure"] == m], dtype=float)
        ref = np.sort(stats.false_discovery_control(p[~np.isnan(p)], method="bh"))
        shown = np.array([float(r["q_value"]) for r in rows if r["measure"] == m])
        # Reference: scipy.stats.false_discovery_control on the whole column of p-values
        np.testing.assert_allclose(np.sort(shown), ref[:shown.size], rtol=1e-12)


def test_blocks_report_progress_and_stop_on_cancel():
    data = np.random.default_rng(12).normal(size=(15, 60))
    seen = []
    wp = wide.pair_matrix(data, block_elements=200, progress=seen.append)
    assert len(seen) > 3 and seen == sorted(seen) and seen[-1] == 1.0
    ref = wide.pair_matrix(data)
    threaded = wide.pair_matrix(data, block_elements=200, threads=2)      # a thread per measure
    for m in ("pearson", "spearman"):
        for got in (wp, threaded):
            # other block shapes sum the products in another order: the oracle's tolerance
            for field in ("estimate", "p_value", "ci_low"):
                np.testing.assert_allclose(getattr(got.measures[m], field), getattr(ref.measures[m], field),
                                           rtol=1e-12, atol=1e-15)
    polls = []

    def cancel():
        polls.append(1)
        return len(polls) > 2
    with pytest.raises(wide.WideCancelled):
        wide.pair_matrix(data, block_elements=200, cancel=cancel)
    assert len(polls) == 3        # stopped before the third block


@pytest.mark.parametrize("top", [None, 10])
def test_engine_matrix_path_cancels_and_reports_progress(top):
    from pairlens.engine import AnalysisCancelled

    data = np.random.default_rng(13).normal(size=(12, 20))
    names = [f"c{k}" for k in range(20)]
    settings = AnalysisSettings(measures=("pearson", "spearman"))
    with pytest.raises(AnalysisCancelled):
        run_analysis(data, names, settings, workers=1, path="matrix", top=top, cancel=lambda: True)
    seen = []
    run_analysis(data, names, settings, workers=1, path="matrix", top=top,
                 progress=lambda frac, left: seen.append(frac))
    assert seen and seen[-1] == 1.0 and seen == sorted(seen)
