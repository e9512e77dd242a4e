"""The library face (pairlens.read / pairlens.analyze) agrees with the engine, the CLI and scipy."""

import json
import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats as ss

from pairlens import config, library
from pairlens.errors import SettingsError
from pairlens.export import PAIR_FIELDS
from pairlens.ingest import IngestError


@pytest.fixture(scope="module")
def frame():
    rng = np.random.default_rng(11)
    n = 120
    a = rng.normal(size=n)
    df = pd.DataFrame({"a": a, "b": a + 0.6 * rng.normal(size=n), "c": rng.uniform(-1, 1, size=n),
                       "label": [f"k{i}" for i in range(n)]})  # 120 levels: over the limit, left out
    df["d"] = df["c"] ** 2 + 0.05 * rng.normal(size=n)
    df.loc[::17, "b"] = np.nan
    return df


@pytest.fixture(scope="module")
def result(frame):
    return library.analyze(frame, measures="pearson,kendall,xi", workers=1, progress=False)


def test_pairs_frame_has_the_contract_columns_and_order(result):
    assert list(result.pairs.columns) == list(PAIR_FIELDS)
    assert result.variables == ["a", "b", "c", "d"]  # the text column is left out, as in a file
    # xi is asymmetric: both directions; the others once per pair (6 pairs of 4 variables)
    counts = result.pairs["measure"].value_counts().to_dict()
    assert counts == {"pearson": 6, "kendall": 6, "xi": 12}


def test_estimates_match_scipy(frame, result):
    both = frame[["a", "b"]].dropna()
    # reference: scipy.stats.pearsonr and scipy.stats.kendalltau (tau-b) on the complete rows of the pair
    assert result.matrix("pearson").loc["a", "b"] == pytest.approx(
        ss.pearsonr(both["a"], both["b"]).statistic, rel=1e-12)
    assert result.matrix("kendall").loc["b", "a"] == pytest.approx(
        ss.kendalltau(both["a"], both["b"]).statistic, rel=1e-12)
    row = result.pairs[(result.pairs.x == "a") & (result.pairs.y == "b") & (result.pairs.measure == "pearson")]
    assert int(row["n"].iloc[0]) == len(both)
    # reference: scipy.stats.chatterjeexi (scipy >= 1.15), x predicts y; no ties in continuous data
    xi = ss.chatterjeexi(frame["c"], frame["d"]).statistic
    assert result.matrix("xi").loc["c", "d"] == pytest.approx(xi, rel=1e-12)


def test_matrix_is_labelled_square_with_nan_diagonal(result):
    m = result.matrix("pearson", "q_value")
    assert list(m.index) == list(m.columns) == result.variables
    assert np.isnan(np.diag(m.to_numpy())).all()
    assert m.loc["a", "c"] == m.loc["c", "a"]
    with pytest.raises(SettingsError, match="not in this analysis"):
        result.matrix("dcor")


def test_same_numbers_as_the_engine_on_the_same_settings(frame, result):
    from pairlens.engine import AnalysisSettings, run_analysis

    numeric = frame[["a", "b", "c", "d"]].to_numpy(dtype=float)
    settings = AnalysisSettings.from_options(measures="pearson,kendall,xi")
    direct = run_analysis(numeric, ["a", "b", "c", "d"], settings, workers=1).records()
    assert json.loads(result.to_json()) == json.loads(json.dumps(
        [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()} for r in direct]))


def test_inspect_has_the_inspect_json_shape_and_draws_the_pair(result):
    view = result.inspect("c", "d")
    assert set(view.detail) >= {"x", "y", "n", "measures", "gaussian", "pattern"}
    assert set(view.detail["measures"]) == {"pearson", "kendall", "xi"}
    assert json.loads(view.to_json())["x"] == "c"
    page = view._repr_html_()
    assert "<svg" in page and page.count("<circle") == view.detail["n"]
    assert "not causation" in page


def test_notebook_view_has_one_map_per_measure_and_escapes_names():
    rng = np.random.default_rng(2)
    df = pd.DataFrame(rng.normal(size=(40, 3)), columns=["<b>x</b>", "y", "z"])
    out = library.analyze(df, measures=["spearman", "dcor"], workers=1, progress=False)
    page = out._repr_html_()
    assert page.count("data-measure='spearman'") == 1 and page.count("data-measure='dcor'") == 1
    assert "<b>x</b>" not in page and "&lt;b&gt;x&lt;/b&gt;" in page
    assert "<script" not in page  # inline output works offline and in saved notebooks


def test_report_is_written_whole(result, tmp_path):
    target = result.report(tmp_path / "r.html")
    text = target.read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html") and "pairlens report" in text
    assert not list(tmp_path.glob("*.partial"))


def test_read_keeps_the_file_identity_for_reports():
    df = library.read(config.DEMO_FILE)
    table = library._table_from_frame(df, None)
    assert table.name == "vineyard_blocks.csv" and table.columns == list(df.columns)
    # a changed frame is a new table, typed again from its values
    changed = df.iloc[:100]
    assert library._table_from_frame(changed, None).n_rows == 100


def test_bad_options_and_inputs_are_one_line_errors(frame, tmp_path):
    with pytest.raises(SettingsError, match="adjust must be one of"):
        library.analyze(frame, adjust="bonferroni", workers=1, progress=False)
    with pytest.raises(SettingsError, match="DataFrame"):
        library.analyze(frame.to_numpy(), progress=False)
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"\x00\x01\x02" * 10)
    with pytest.raises(IngestError):
        library.read(bad)
