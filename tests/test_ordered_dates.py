"""--ordered COL where COL holds dates or times: the rows are sorted by time (CLI and library), with
counts of the rows left out or sharing a time, and clear refusals."""

from __future__ import annotations

import contextlib
import csv
import io

import numpy as np
import pandas as pd
import pytest

from pairlens import analyze, cli
from pairlens.errors import SettingsError
from pairlens.ingest import load_bytes

N = 90


def _frame(seed=5):
    """Weekly AR(1) rows (so the order matters to the --ordered tests) with their dates, then shuffled."""
    rng = np.random.default_rng(seed)
    e = rng.normal(size=(3, N))
    x = np.zeros((3, N))
    for t in range(1, N):
        x[:, t] = 0.5 * x[:, t - 1] + e[:, t]
    df = pd.DataFrame({"when": pd.date_range("2023-01-02 06:00", periods=N, freq="W"),
                       "a": x[0], "b": 0.6 * x[0] + x[1], "c": x[2]})
    return df.sample(frac=1.0, random_state=seed).reset_index(drop=True)


def _pairs_csv(path, *extra):
    out = path.parent / "pairs.csv"
    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        assert cli.main(["pairs", str(path), "-o", str(out), "--workers", "1", "--measures", "pearson,kendall",
                         *extra]) == 0
    rows = {(r["x"], r["y"], r["measure"]): r for r in csv.DictReader(out.open())}
    return rows, err.getvalue()


def _reference(df, time_column, fmt=None):
    """The same table put in time order by pandas (source: pandas.to_datetime with the format the
    file was written in, and DataFrame.sort_values, stable), analysed as rows in file order."""
    order = pd.to_datetime(df[time_column], format=fmt).sort_values(kind="stable").index
    ref = analyze(df.loc[order].drop(columns=time_column).reset_index(drop=True), measures="pearson,kendall",
                  ordered=True, workers=1, progress=False).pairs
    return {(r.x, r.y, r.measure): r for r in ref.itertuples()}


@pytest.mark.parametrize("fmt", ["%Y-%m-%d", "%Y-%m-%dT%H:%M:%S", "%d.%m.%Y", "%d %b %Y"])
def test_cli_sorts_rows_by_a_date_column(tmp_path, fmt):
    df = _frame()
    df["when"] = df["when"].dt.strftime(fmt)
    path = tmp_path / "log.csv"
    df.to_csv(path, index=False)
    rows, err = _pairs_csv(path, "--ordered", "when")
    ref = _reference(df, "when", fmt)
    assert set(rows) == set(ref)
    for key, r in rows.items():
        assert float(r["p_value"] or "nan") == pytest.approx(ref[key].p_value, rel=1e-9, nan_ok=True), key
        assert r["n"] == str(N)
    # the shuffled file taken as it is gives other p-values: the sort did something
    plain, _ = _pairs_csv(path, "--ordered")
    assert any(abs(float(plain[k]["p_value"] or "nan") - ref[k].p_value) > 1e-6 for k in ref)


def test_library_sorts_by_datetime_values_and_time_zones():
    df = _frame()
    ref = _reference(df, "when")
    got = analyze(df, measures="pearson,kendall", ordered="when", workers=1, progress=False).pairs
    for r in got.itertuples():
        assert r.p_value == pytest.approx(ref[(r.x, r.y, r.measure)].p_value, rel=1e-9, nan_ok=True)
    zoned = df.assign(when=df["when"].dt.tz_localize("Europe/Berlin"))
    again = analyze(zoned, measures="pearson,kendall", ordered="when", workers=1, progress=False).pairs
    assert np.allclose(again.p_value, got.p_value, rtol=1e-12, equal_nan=True)


def test_missing_unreadable_and_repeated_times_are_counted(tmp_path):
    df = _frame()
    df["when"] = df["when"].dt.strftime("%Y-%m-%d")
    df.loc[0, "when"] = ""                # missing
    df.loc[1, "when"] = "2023-13-45"      # looks like a date, is none
    df.loc[2, "when"] = df.loc[3, "when"]  # two rows in the same week
    path = tmp_path / "log.csv"
    df.to_csv(path, index=False)
    rows, err = _pairs_csv(path, "--ordered", "when")
    assert "1 cell could not be read as dates or times; their rows are left out" in err
    assert "2 rows without a value of when left out" in err
    assert "when has repeated values (1 row shares a value with an earlier one)" in err
    assert {r["n"] for r in rows.values()} == {str(N - 2)}


def test_refusals_name_the_problem(tmp_path):
    table = load_bytes(("when,a,b\n" + "".join(f"2024-02-3{k % 2},{k},{k * k % 7}\n" for k in range(6))).encode(),
                       "t.csv")
    assert set(table.times) == {"when"} and np.isnan(table.times["when"]).all()  # February has no 30th or 31st
    from pairlens.ordering import with_time_column

    with pytest.raises(SettingsError, match="none of its cells could be read as a date or time"):
        with_time_column(table, "when")
    path = tmp_path / "t.csv"
    path.write_text("label,a,b\n" + "".join(f"w{k},{k},{k * k % 7}\n" for k in range(6)))
    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        assert cli.main(["pairs", str(path), "-o", str(tmp_path / "o.csv"), "--ordered", "label"]) != 0
    assert "no numeric or date/time column" in err.getvalue()


def test_the_api_refuses_a_date_column_with_the_way_out(tmp_path):
    from fastapi.testclient import TestClient

    from live_server import WAIT_SECONDS, wait_for_analysis
    from pairlens.config import ServerSettings
    from pairlens.web.app import create_app

    df = _frame()
    content = df.assign(when=df["when"].dt.strftime("%Y-%m-%d")).to_csv(index=False).encode()
    with TestClient(create_app(ServerSettings(data_dir=tmp_path))) as client:
        dataset = client.post("/api/datasets", files={"file": ("log.csv", content, "text/csv")}).json()
        # refused at submit (422, one line with the way out), not queued to fail in the job
        r = client.post(f"/api/datasets/{dataset['id']}/analyses", json={"measures": ["pearson"], "ordered": "when"})
        assert r.status_code == 422, r.text
        assert "holds dates" in r.json()["detail"] and "numeric time column" in r.json()["detail"]
        assert client.get(f"/api/datasets/{dataset['id']}").json()["analyses"] == []      # nothing queued
        # rows in file order are still taken
        ok = client.post(f"/api/datasets/{dataset['id']}/analyses", json={"measures": ["pearson"], "ordered": True})
        assert ok.status_code == 202, ok.text
        status = wait_for_analysis(client, ok.json()["id"], timeout=WAIT_SECONDS)
    assert status["status"] == "done", status
