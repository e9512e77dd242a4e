"""With --missing complete, every face of a pair uses the same rows and says the same thing.

The reference for the rows is pandas: ``DataFrame.dropna()`` over the analysed
columns is the textbook complete-case (listwise) deletion. The faces: the pair
view (``/api/analyses/{id}/pair``), its quick first answer (``/pair-preview``),
the verdict column of the pair table (``/pair-table``, computed by the
background job) and the HTML report's pair card. Under the default pairwise
policy the same pair has more rows, so each check can fail.
"""

from __future__ import annotations

import functools
import html
import io
import math
import re

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient

from live_server import wait_for_analysis
from pairlens.config import ServerSettings
from pairlens.core.results import TestResult
from pairlens.core.verdict import classify_pair
from pairlens.web.app import create_app

COLUMNS = ["a", "b", "c", "d"]
X, Y = "a", "b"
_wait = functools.partial(wait_for_analysis, timeout=90.0)


def _frame(n: int = 200, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = 0.6 * a + rng.normal(scale=0.8, size=n)
    c = a ** 2 + rng.normal(scale=0.5, size=n)
    d = rng.normal(size=n)
    frame = pd.DataFrame({"a": a, "b": b, "c": c, "d": d})
    # missing cells in the other columns only: the pair (a, b) is complete on every row,
    # so the pairwise and the complete-case rows of (a, b) differ
    frame.loc[rng.choice(n, 30, replace=False), "c"] = np.nan
    frame.loc[rng.choice(n, 25, replace=False), "d"] = np.nan
    return frame


@pytest.fixture(scope="module")
def env(tmp_path_factory):
    frame = _frame()
    buf = io.StringIO()
    frame.to_csv(buf, index=False, float_format="%.17g")
    app = create_app(ServerSettings(data_dir=tmp_path_factory.mktemp("workspace"), max_upload_mb=1))
    with TestClient(app) as client:
        r = client.post("/api/datasets", files={"file": ("gaps.csv", buf.getvalue().encode(), "text/csv")})
        assert r.status_code == 201, r.text
        r = client.post(f"/api/datasets/{r.json()['id']}/analyses",
                        json={"measures": ["pearson", "spearman", "kendall", "dcor"], "missing": "complete",
                              "seed": 5})
        assert r.status_code == 202, r.text
        aid = r.json()["id"]
        assert _wait(client, aid)["status"] == "done"
        # the quick view first: the full detail is not cached yet
        preview = client.get(f"/api/analyses/{aid}/pair-preview", params={"x": X, "y": Y}).json()
        full = client.get(f"/api/analyses/{aid}/pair", params={"x": X, "y": Y}).json()
        grid = client.get(f"/api/analyses/{aid}/pair-table", params={"limit": 1000}).json()
        report = html.unescape(client.get(f"/api/analyses/{aid}/report.html").text)
        records = client.get(f"/api/analyses/{aid}/pairs").json()
        yield {"frame": frame, "preview": preview, "full": full, "grid": grid, "report": report,
               "records": records}


def _complete_rows(frame: pd.DataFrame) -> list[int]:
    # pandas' listwise deletion over every analysed column (the reference)
    return frame.dropna().index.tolist()


def test_the_reference_rows_differ_from_pairwise(env):
    frame = env["frame"]
    assert len(_complete_rows(frame)) < len(frame[[X, Y]].dropna())  # the check below can fail


def test_pair_view_uses_the_complete_rows(env):
    full = env["full"]
    expected = _complete_rows(env["frame"])
    assert full["points"]["rows"] == expected
    assert full["n"] == len(expected)
    assert all(m["n"] == len(expected) for m in full["measures"].values())
    assert f"use the {len(expected)} rows complete in every analysed variable" in full["rows_used"]


def test_quick_view_uses_the_same_rows_and_says_the_same(env):
    preview, full = env["preview"], env["full"]
    assert preview["complete"] is False  # it was the quick answer, before the full detail
    assert preview["points"]["rows"] == full["points"]["rows"]
    assert preview["n"] == full["n"]
    assert preview["rows_used"] == full["rows_used"]
    # the Gaussian moments of the quick answer are those of the full fit, on the same rows
    sub = env["frame"].loc[_complete_rows(env["frame"]), [X, Y]].to_numpy()
    cov = np.cov(sub, rowvar=False, ddof=1)  # numpy.cov, ddof=1 as the contract says
    assert np.allclose(preview["gaussian"]["cov"], cov, rtol=1e-12)
    assert preview["gaussian"]["cov"] == full["gaussian"]["cov"]


def test_verdict_column_uses_the_same_rows(env):
    frame, full = env["frame"], env["full"]
    # every pair has its verdict, computed with the pair table (no time budget)
    assert len(env["grid"]["rows"]) == 6 and all(r[5] for r in env["grid"]["rows"])
    row = next(r for r in env["grid"]["rows"] if (r[0], r[1]) == (X, Y))
    assert row[5] == full["pattern"]["label"] and row[5]
    # classify_pair on pandas' complete rows, with the analysis's own results, gives that label
    sub = frame.loc[_complete_rows(frame), [X, Y]].to_numpy()
    recs = {r["measure"]: r for r in env["records"] if (r["x"], r["y"]) == (X, Y)}
    nan = lambda v: math.nan if v is None else v  # noqa: E731
    results = {m: TestResult(nan(r["estimate"]), nan(r["p_value"]), r.get("method", ""), nan(r["ci_low"]),
                             nan(r["ci_high"]), r["n"], r["note"]) for m, r in recs.items()}
    q_values = {m: nan(r["q_value"]) for m, r in recs.items()}
    assert classify_pair(sub[:, 0], sub[:, 1], results, q_values, alpha=0.05).label == row[5]


def test_report_card_uses_the_same_rows_and_says_the_same(env):
    text, full = env["report"], env["full"]
    assert full["rows_used"] in text
    assert "every row where both of these values are present" not in text
    # every pair card of a complete-case report names the one complete-row count
    counts = set(re.findall(r"use the (\d+) rows complete in every analysed variable", text))
    assert counts == {str(full["n"])}
