"""What the workspace stores of a finished analysis, read back: the pair table's arrays
(pairlens.pairgrid.PairGrid) against pandas, and the pair rows (pairlens.pairrecords) against the
engine's own rows and the JSON records earlier versions stored.

The reference is pandas: the engine's long pair table (one row per pair, measure and
direction) pivoted to one row per unordered pair with ``DataFrame.pivot``, then
sorted with ``sort_values(kind="stable")`` and filtered with ``Series.str.contains``.
The grid builds the same table from arrays and sorts it with NumPy, so each check can
fail on a wrong column, direction, order or filter.
"""

from __future__ import annotations

import sqlite3

import numpy as np
import pandas as pd
import pytest

from pairlens.engine import run_analysis
from pairlens.pairgrid import GRID_FORMAT, PairGrid
from pairlens.payloads import pair_columns, pair_key
from pairlens.plan import AnalysisSettings

# Mixed case and a shared prefix so that the case-insensitive name sort and the text filter matter.
NAMES = ["b_load", "A_temp", "a_flow", "C_vib", "b_press", "noise", "Noise2"]
LABELS = ["linear", "monotone", "no evidence of dependence"]


@pytest.fixture(scope="module")
def analysis():
    rng = np.random.default_rng(17)
    n = 60
    base = rng.normal(size=n)
    data = np.column_stack([base + rng.normal(scale=s, size=n) for s in (0.3, 0.6, 1.0, 2.0, 0.5)]
                           + [rng.normal(size=n), np.round(rng.normal(size=n), 1)])
    data[rng.choice(n, 6, replace=False), 2] = np.nan   # n differs between pairs
    data[:, 3] = np.where(np.arange(n) < 3, np.nan, data[:, 3])
    settings = AnalysisSettings.from_dict({"measures": ["pearson", "spearman", "xi"], "seed": 3})
    table = run_analysis(data, NAMES, settings)
    # labels of our own on some pairs (the grid only carries them), several pairs without one
    labels = {}
    for i, (a, b) in enumerate((a, b) for ia, a in enumerate(NAMES) for b in NAMES[ia + 1:]):
        if i % 4:
            labels[pair_key(a, b)] = LABELS[i % 3]
    return table, labels


def _reference(table, labels) -> pd.DataFrame:
    """One row per unordered pair (x before y in variable order), a column per measure and direction."""
    position = {v: i for i, v in enumerate(table.variables)}
    long = pd.DataFrame([r.record() | {"measure": r.measure} for r in table.rows])
    forward = long["x"].map(position) < long["y"].map(position)
    long["a"] = np.where(forward, long["x"], long["y"])
    long["b"] = np.where(forward, long["y"], long["x"])
    symmetric = {c["measure"] for c in pair_columns(table.measures) if not c["direction"]}
    long["key"] = [m if m in symmetric else m + (">" if f else "<") for m, f in zip(long["measure"], forward)]
    est = long.pivot(index=["a", "b"], columns="key", values="estimate")
    q = long.pivot(index=["a", "b"], columns="key", values="q_value")
    n = long.groupby(["a", "b"])["n"].max()
    ref = pd.DataFrame(index=est.index)
    for c in pair_columns(table.measures):
        ref["est:" + c["key"]] = est[c["key"]] if c["key"] in est else np.nan
        ref["q:" + c["key"]] = q[c["key"]] if c["key"] in q else np.nan
    ref["n"] = n
    ref = ref.reset_index()
    ref["verdict"] = [labels.get(pair_key(a, b), "") for a, b in zip(ref["a"], ref["b"])]
    ref["order"] = [position[a] * len(position) + position[b] for a, b in zip(ref["a"], ref["b"])]
    return ref.sort_values("order", kind="stable").reset_index(drop=True)


def _grid_frame(grid: PairGrid, index) -> pd.DataFrame:
    rows = [grid.row(i) for i in index]
    return pd.DataFrame({"a": [r[0] for r in rows], "b": [r[1] for r in rows]})


def test_stored_grid_holds_the_pivoted_pair_table(analysis):
    table, labels = analysis
    grid = PairGrid.from_bytes(PairGrid.from_table(table, labels).to_bytes())
    ref = _reference(table, labels)
    assert len(grid) == len(ref) == len(NAMES) * (len(NAMES) - 1) // 2
    assert [c["key"] for c in grid.columns] == ["pearson", "spearman", "xi>", "xi<"]
    for i in range(len(grid)):
        x, y, n, est, q, verdict = grid.row(i)
        r = ref.iloc[i]
        assert (x, y, n, verdict or "") == (r["a"], r["b"], r["n"], r["verdict"])
        for k, c in enumerate(grid.columns):
            for got, want in ((est[k], r["est:" + c["key"]]), (q[k], r["q:" + c["key"]])):
                assert (got is None and np.isnan(want)) or got == want  # the same bits: stored, not recomputed


@pytest.mark.parametrize("descending", [False, True])
@pytest.mark.parametrize("sort", ["x", "y", "n", "verdict", "est:0", "q:1", "est:2", "q:3"])
def test_sorts_are_pandas_stable_sorts(analysis, sort, descending):
    table, labels = analysis
    grid = PairGrid.from_bytes(PairGrid.from_table(table, labels).to_bytes())
    ref = _reference(table, labels)
    kind, _, k = sort.partition(":")
    if kind in ("est", "q"):
        key = f"{kind}:{grid.columns[int(k)]['key']}"
        values = ref[key].abs() if kind == "est" else ref[key]
        want = ref.assign(v=values).sort_values("v", ascending=not descending, kind="stable", na_position="last")
    else:
        column = {"x": "a", "y": "b", "n": "n", "verdict": "verdict"}[kind]
        lowered = ref[column].str.lower() if column != "n" else ref[column]
        want = ref.assign(v=lowered).sort_values("v", ascending=not descending, kind="stable")
    got = _grid_frame(grid, grid.query(sort=sort, descending=descending))
    if kind in ("est", "q"):  # ties broken by variable order either way in the grid; compare the values
        got_values = [values[ref.index[(ref["a"] == a) & (ref["b"] == b)][0]] for a, b in zip(got["a"], got["b"])]
        np.testing.assert_array_equal(np.array(got_values, dtype=float), want["v"].to_numpy(dtype=float))
    else:
        assert list(zip(got["a"], got["b"])) == list(zip(want["a"], want["b"]))


def test_filters_match_pandas(analysis):
    table, labels = analysis
    grid = PairGrid.from_bytes(PairGrid.from_table(table, labels).to_bytes())
    ref = _reference(table, labels)
    named = ref[ref["a"].str.contains("NOISE", case=False, regex=False)
                | ref["b"].str.contains("NOISE", case=False, regex=False)]
    got = _grid_frame(grid, grid.query(sort="x", text=" NOISE "))
    assert sorted(zip(got["a"], got["b"])) == sorted(zip(named["a"], named["b"])) and len(named) == 11
    below = ref[ref["q:spearman"] < 0.05]
    got = _grid_frame(grid, grid.query(column=1, q_below=0.05))
    assert sorted(zip(got["a"], got["b"])) == sorted(zip(below["a"], below["b"]))
    for label in LABELS:
        want = ref[ref["verdict"] == label]
        got = _grid_frame(grid, grid.query(verdict=label))
        assert sorted(zip(got["a"], got["b"])) == sorted(zip(want["a"], want["b"])) and len(want) > 0
    assert grid.verdicts() == sorted(LABELS)


def test_a_verdict_learnt_later_is_written_in(analysis):
    table, labels = analysis
    grid = PairGrid.from_bytes(PairGrid.from_table(table, labels).to_bytes())
    unlabelled = [i for i in range(len(grid)) if grid.row(i)[5] is None]
    x, y = grid.row(unlabelled[0])[:2]
    grid.set_verdict(y, x, "curved")  # either order names the pair
    assert grid.row(unlabelled[0])[5] == "curved" and "curved" in grid.verdicts()
    assert [grid.row(i)[:2] for i in grid.query(verdict="curved")] == [[x, y]]
    assert grid.index_of("b_load", "not a column") is None


def test_a_grid_of_another_format_is_not_read(analysis):
    table, labels = analysis
    blob = PairGrid.from_table(table, labels).to_bytes()
    import io
    import json

    with np.load(io.BytesIO(blob)) as z:
        arrays = dict(z)
    meta = json.loads(arrays["meta"].tobytes())
    meta["format"] = GRID_FORMAT + 1
    arrays["meta"] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    assert PairGrid.from_bytes(buf.getvalue()) is None


def test_server_reads_analyses_stored_without_a_grid(tmp_path):
    """An analysis saved before grids were stored: the server builds the grid from the stored rows."""
    from fastapi.testclient import TestClient

    from live_server import wait_for_analysis
    from pairlens.config import ServerSettings
    from pairlens.web.app import create_app

    rng = np.random.default_rng(5)
    frame = pd.DataFrame(rng.normal(size=(40, 5)), columns=["p", "Q", "r", "s", "T"])
    frame["r"] = frame["p"] * 2 + rng.normal(scale=0.1, size=40)
    content = frame.to_csv(index=False).encode()
    pages = {}
    for stored in (True, False):
        data_dir = tmp_path / f"ws-{stored}"
        with TestClient(create_app(ServerSettings(data_dir=data_dir, max_upload_mb=1))) as client:
            ds = client.post("/api/datasets", files={"file": ("t.csv", content, "text/csv")}).json()
            aid = client.post(f"/api/datasets/{ds['id']}/analyses",
                              json={"measures": ["pearson", "kendall"], "seed": 2}).json()["id"]
            assert wait_for_analysis(client, aid, timeout=90.0)["status"] == "done"
        with sqlite3.connect(data_dir / "pairlens.sqlite3") as con:
            assert con.execute("SELECT grid IS NOT NULL FROM results").fetchone() == (1,)
            if not stored:
                con.execute("UPDATE results SET grid = NULL")
        with TestClient(create_app(ServerSettings(data_dir=data_dir, max_upload_mb=1))) as client:
            pages[stored] = [client.get(f"/api/analyses/{aid}/pair-table", params=params).json()
                             for params in ({}, {"sort": "x", "desc": "true"}, {"text": "q"})]
    assert pages[True] == pages[False]
    assert pages[True][0]["total"] == 10 and pages[True][2]["filtered"] == 4
    assert len(pages[True][0]["verdicts"]) >= 2  # the verdict column came through (the p-r pair is dependent)


def test_packed_rows_give_back_every_field(analysis):
    """pack_rows / unpack_rows against the engine's rows: names, measures, notes and methods equal,
    numbers bit for bit; non-finite numbers come back as NaN, as the JSON records stored them (null)."""
    import math

    from pairlens.pairrecords import is_packed_rows, pack_rows, unpack_rows
    from pairlens.pairtable import PairRow

    table, _ = analysis
    odd = [PairRow("x\u0000</script>", "y é", "pearson", math.inf, -math.inf, math.nan, 0.5, 0.25, 7,
                   "a note, with \"quotes\"", "t")]
    rows = table.rows + odd
    blob = pack_rows(rows)
    assert is_packed_rows(blob)
    back = unpack_rows(blob)
    assert len(back) == len(rows)
    for a, b in zip(rows, back):
        assert (a.x, a.y, a.measure, a.n, a.note, a.method) == (b.x, b.y, b.measure, b.n, b.note, b.method)
        for f in ("estimate", "ci_low", "ci_high", "p_value", "q_value"):
            want = getattr(a, f)
            got = getattr(b, f)
            assert (math.isnan(got) and not math.isfinite(want)) or got == want, (a, f)
    assert type(back[0].n) is int and type(back[0].estimate) is float


def test_server_reads_rows_stored_as_json_records(tmp_path):
    """An analysis whose rows an earlier version stored as JSON records: the server reads them, and
    every API answer equals the one from the packed rows (the same analysis, its rows re-stored)."""
    from fastapi.testclient import TestClient

    from live_server import wait_for_analysis
    from pairlens.config import ServerSettings
    from pairlens.export import json_records
    from pairlens.pairrecords import unpack_rows
    from pairlens.store import _pack
    from pairlens.web.app import create_app

    rng = np.random.default_rng(8)
    frame = pd.DataFrame(rng.normal(size=(50, 4)), columns=["u", "V", "w", "x"])
    frame["w"] = np.exp(frame["u"]) + rng.normal(scale=0.1, size=50)
    data_dir = tmp_path / "ws"
    with TestClient(create_app(ServerSettings(data_dir=data_dir, max_upload_mb=1))) as client:
        ds = client.post("/api/datasets", files={"file": ("t.csv", frame.to_csv(index=False).encode(), "text/csv")})
        aid = client.post(f"/api/datasets/{ds.json()['id']}/analyses",
                          json={"measures": ["pearson", "spearman", "xi"], "seed": 4}).json()["id"]
        assert wait_for_analysis(client, aid, timeout=90.0)["status"] == "done"

    def answers():
        with TestClient(create_app(ServerSettings(data_dir=data_dir, max_upload_mb=1))) as client:
            return [client.get(f"/api/analyses/{aid}/pairs").json(),
                    client.get(f"/api/analyses/{aid}/pair-table").json(),
                    client.get(f"/api/analyses/{aid}/pair", params={"x": "u", "y": "w"}).json()["measures"]]

    packed = answers()
    with sqlite3.connect(data_dir / "pairlens.sqlite3") as con:
        blob = con.execute("SELECT records FROM results").fetchone()[0]
        rows = unpack_rows(blob)
        records = [r | {"method": row.method} for r, row in zip(json_records(x.record() for x in rows), rows)]
        con.execute("DROP TRIGGER results_are_final")  # the server creates it again on start
        con.execute("UPDATE results SET records = ?", (_pack(records),))
    assert answers() == packed
    assert len(packed[0]) == 6 * 4 and {r["measure"] for r in packed[0]} == {"pearson", "spearman", "xi"}


def test_a_verdict_the_pair_view_learns_reaches_the_pair_table(tmp_path):
    """When the full pair view's verdict differs from the stored label, the pair table shows the pair
    view's (the workspace writes it into the loaded grid). Here the stored label is made stale on
    purpose; the reference is the label /pair returns, classify_pair's."""
    from fastapi.testclient import TestClient

    from live_server import wait_for_analysis
    from pairlens.config import ServerSettings
    from pairlens.web.app import create_app

    rng = np.random.default_rng(12)
    frame = pd.DataFrame(rng.normal(size=(80, 3)), columns=["a", "b", "c"])
    frame["b"] = frame["a"] + rng.normal(scale=0.5, size=80)
    app = create_app(ServerSettings(data_dir=tmp_path / "ws", max_upload_mb=1))
    with TestClient(app) as client:
        ds = client.post("/api/datasets", files={"file": ("t.csv", frame.to_csv(index=False).encode(), "text/csv")})
        aid = client.post(f"/api/datasets/{ds.json()['id']}/analyses", json={"seed": 1}).json()["id"]
        assert wait_for_analysis(client, aid, timeout=90.0)["status"] == "done"

        def shown():
            rows = client.get(f"/api/analyses/{aid}/pair-table", params={"text": "b"}).json()["rows"]
            return {(r[0], r[1]): r[5] for r in rows}

        assert shown()[("a", "b")] == "linear"
        ws = app.state.workspace
        row = ws.analysis(aid)
        ws.pair_grid(row).set_verdict("a", "b", "stale label")   # as if stored by an older rule table
        ws.verdicts(row)["labels"].pop(pair_key("a", "b"))
        assert shown()[("a", "b")] == "stale label"
        label = client.get(f"/api/analyses/{aid}/pair", params={"x": "b", "y": "a"}).json()["pattern"]["label"]
        assert label == "linear" and shown()[("a", "b")] == label
