"""kill -9 of the server in the middle of a long analysis loses nothing and leaves nothing 'running'.

A real ``pairlens serve`` (its own process group, 127.0.0.1, free port) gets a
finished analysis and a long one; the whole group (server, analysis child,
its worker pool) is SIGKILLed while the long one runs; then the server starts
again on the same data directory. The database is checked with SQLite's own
``PRAGMA integrity_check`` (https://www.sqlite.org/pragma.html#pragma_integrity_check:
it returns the single row "ok" when no problem is found) and every stored row
and blob is compared byte for byte with a copy taken before the kill.
"""

from __future__ import annotations

import functools
import hashlib
import io
import os
import sqlite3
import time

import httpx
import numpy as np
import pytest

from live_server import READ_SECONDS, LiveServer, wait_for_analysis


def _csv(n: int, k: int, seed: int) -> bytes:
    rng = np.random.default_rng(seed)
    data = rng.normal(size=(n, k))
    data[:, 1] += 0.8 * data[:, 0]
    buf = io.StringIO()
    buf.write(",".join(f"c{j}" for j in range(k)) + "\n")
    for row in data:
        buf.write(",".join(f"{v:.5f}" for v in row) + "\n")
    return buf.getvalue().encode()


_wait = functools.partial(wait_for_analysis, poll=0.1)


def _start_long_analysis(client: httpx.Client, seed: int) -> str:
    """Upload 6 columns x 3000 rows and start dCor with 50000 permutations per pair (minutes of work)."""
    ds = client.post("/api/datasets", files={"file": ("long.csv", _csv(3000, 6, seed=seed), "text/csv")}).json()
    return client.post(f"/api/datasets/{ds['id']}/analyses",
                       json={"measures": ["dcor"], "permutations": 50000}).json()["id"]


def _snapshot(db_path) -> dict:
    """Every dataset row and every stored result, read straight from SQLite."""
    con = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        datasets = con.execute("SELECT id, name, sha256, size, n_rows, n_columns, created, summary "
                               "FROM datasets ORDER BY id").fetchall()
        results = con.execute("SELECT analysis_id, variables, records, verdicts, seconds, created "
                              "FROM results ORDER BY analysis_id").fetchall()
        done = con.execute("SELECT id, settings, status, finished FROM analyses WHERE status = 'done' "
                           "ORDER BY id").fetchall()
        statuses = dict(con.execute("SELECT id, status FROM analyses").fetchall())
    finally:
        con.close()
    return {"datasets": datasets, "results": results, "done": done, "statuses": statuses}


def _integrity(db_path) -> list[str]:
    con = sqlite3.connect(db_path)
    try:
        return [r[0] for r in con.execute("PRAGMA integrity_check").fetchall()]
    finally:
        con.close()


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:  # a zombie waiting for its new parent to reap it counts as gone
        with open(f"/proc/{pid}/stat") as f:
            return f.read().split(")")[-1].split()[0] != "Z"
    except OSError:
        return False


def test_kill_9_during_a_long_analysis(tmp_path):
    data_dir = tmp_path / "workspace"
    db_path = data_dir / "pairlens.sqlite3"
    srv = LiveServer(data_dir)
    try:
        with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as c:
            # A finished analysis whose results must survive untouched.
            small = _csv(200, 4, seed=1)
            ds_small = c.post("/api/datasets", files={"file": ("small.csv", small, "text/csv")}).json()
            done = c.post(f"/api/datasets/{ds_small['id']}/analyses",
                          json={"measures": ["pearson", "spearman", "dcor"], "seed": 3}).json()["id"]
            assert _wait(c, done)["status"] == "done"
            pairs_before = c.get(f"/api/analyses/{done}/pairs").json()
            # A long one: 6 columns, 3000 rows, dCor with 50000 permutations per pair.
            big = _csv(3000, 6, seed=2)
            ds_big = c.post("/api/datasets", files={"file": ("long.csv", big, "text/csv")}).json()
            settings = {"measures": ["dcor"], "permutations": 50000, "seed": 9}
            long_id = c.post(f"/api/datasets/{ds_big['id']}/analyses", json=settings).json()["id"]
            running = _wait(c, long_id, lambda s: s["status"] == "running" and s["phase"] == "pairs")
            assert running["progress"] < 0.9
            datasets_before = c.get("/api/datasets").json()
            # let it write progress again, so the kill lands among writes
            _wait(c, long_id, lambda s: s["progress"] > running["progress"])
        before = _snapshot(db_path)
        con = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
        worker_pid = con.execute("SELECT worker_pid FROM analyses WHERE id = ?", (long_id,)).fetchone()[0]
        con.close()
        assert worker_pid and _pid_alive(worker_pid)
        assert before["statuses"][long_id] == "running"
    finally:
        srv.kill()

    # The analysis child died with the group; the database is whole and still says 'running'.
    deadline = time.monotonic() + 10
    while _pid_alive(worker_pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not _pid_alive(worker_pid)
    check = _integrity(db_path)
    print(f"PRAGMA integrity_check after kill -9: {check}")
    assert check == ["ok"]
    after_kill = _snapshot(db_path)
    assert after_kill["datasets"] == before["datasets"]
    assert after_kill["results"] == before["results"]

    srv2 = LiveServer(data_dir)
    try:
        with httpx.Client(base_url=srv2.base, timeout=READ_SECONDS) as c:
            status = c.get(f"/api/analyses/{long_id}").json()
            assert status["status"] == "interrupted", status
            assert "run it again" in status["error"]
            # Nothing else changed state, nothing is left 'running'.
            assert all(a["status"] != "running" for d in c.get("/api/datasets").json()
                       for a in c.get(f"/api/datasets/{d['id']}").json()["analyses"])
            assert c.get(f"/api/analyses/{done}").json()["status"] == "done"
            assert c.get(f"/api/analyses/{done}/pairs").json() == pairs_before
            assert c.get("/api/datasets").json() == datasets_before
            for d, content in ((ds_small, small), (ds_big, big)):
                blob = data_dir / "blobs" / d["sha256"]
                assert hashlib.sha256(blob.read_bytes()).hexdigest() == d["sha256"]  # hashlib as reference
                assert blob.read_bytes() == content
            # The page offers to run it again; the API does it with the same settings.
            page = c.get(f"/analyses/{long_id}")
            assert page.status_code == 200 and 'data-testid="rerun-analysis"' in page.text
            r = c.post(f"/api/analyses/{long_id}/rerun")
            assert r.status_code == 202
            new_id = r.json()["id"]
            assert new_id != long_id
            again = _wait(c, new_id, lambda s: s["status"] == "running")
            assert again["settings"] == status["settings"] and again["dataset_id"] == ds_big["id"]
            assert c.post(f"/api/analyses/{new_id}/cancel").status_code == 202
            assert _wait(c, new_id)["status"] == "cancelled"
            # The interrupted one stays interrupted: the rerun is a new analysis.
            assert c.get(f"/api/analyses/{long_id}").json()["status"] == "interrupted"
        after = _snapshot(db_path)
        assert after["datasets"] == before["datasets"]
        assert after["results"] == before["results"]
        assert after["done"] == before["done"]
    finally:
        srv2.stop()
    check = _integrity(db_path)
    print(f"PRAGMA integrity_check after restart and stop: {check}")
    assert check == ["ok"]


def test_orphaned_analysis_child_stops_by_itself(tmp_path):
    # Only the server is killed (not its group): the analysis child notices it was
    # orphaned, stops at its next check and records 'interrupted' itself.
    import signal

    data_dir = tmp_path / "workspace"
    srv = LiveServer(data_dir)
    try:
        with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as c:
            aid = _start_long_analysis(c, seed=4)
            _wait(c, aid, lambda s: s["status"] == "running" and s["phase"] == "pairs")
        con = sqlite3.connect(f"file:{data_dir / 'pairlens.sqlite3'}?mode=ro", uri=True)
        worker_pid = con.execute("SELECT worker_pid FROM analyses WHERE id = ?", (aid,)).fetchone()[0]
        con.close()
        os.kill(srv.proc.pid, signal.SIGKILL)
        srv.proc.wait(10)
        deadline = time.monotonic() + 60
        while _pid_alive(worker_pid) and time.monotonic() < deadline:
            time.sleep(0.2)
        assert not _pid_alive(worker_pid), "the orphaned analysis child kept running"
        con = sqlite3.connect(data_dir / "pairlens.sqlite3")
        status, error = con.execute("SELECT status, error FROM analyses WHERE id = ?", (aid,)).fetchone()
        con.close()
        assert status == "interrupted" and "run it again" in error
    finally:
        srv.kill()


def test_finished_results_cannot_be_rewritten(tmp_path):
    from pairlens.store import Store

    store = Store(tmp_path)
    sha = store.put_blob(b"a,b\n1,2\n2,3\n3,5\n")
    ds = store.add_dataset(name="t.csv", sha256=sha, size=16, n_rows=3, n_columns=2, summary={})
    row = store.create_analysis(ds.id, {"measures": ["pearson"]})
    assert store.claim(row.id)
    assert store.save_results(row.id, variables=["a", "b"], records=[{"x": "a"}], verdicts={}, seconds=0.1)
    con = sqlite3.connect(tmp_path / "pairlens.sqlite3")
    try:
        with pytest.raises(sqlite3.IntegrityError, match="never change"):
            con.execute("UPDATE results SET seconds = 9 WHERE analysis_id = ?", (row.id,))
        with pytest.raises(sqlite3.IntegrityError, match="stays done"):
            con.execute("UPDATE analyses SET status = 'running' WHERE id = ?", (row.id,))
    finally:
        con.close()
    assert not store.finish(row.id, "interrupted")
    assert store.mark_interrupted("someone-else", alive_pids=set()) == []
    assert store.get_results(row.id)["records"] == [{"x": "a"}]
    assert store.get_analysis(row.id).status == "done"


def test_owner_liveness_comes_from_its_lock_not_its_pid(tmp_path):
    # A pid can be taken over by an unrelated process after a crash; the owner's flock
    # cannot outlive the owner (flock(2): the lock is released when the process's
    # descriptors close, as they do when it dies).
    import subprocess
    import sys

    from pairlens.store import Store

    store = Store(tmp_path)
    sha = store.put_blob(b"a,b\n1,2\n2,3\n3,5\n")
    ds = store.add_dataset(name="t.csv", sha256=sha, size=16, n_rows=3, n_columns=2, summary={})
    reused_pid = os.getppid()  # alive, but not the owner any more
    dead_owner = "aa" * 8
    stale = store.create_analysis(ds.id, {}, owner_pid=reused_pid, owner_token=dead_owner)
    assert store.claim(stale.id, worker_pid=reused_pid)
    lock_dir = tmp_path / "owners"
    lock_dir.mkdir(exist_ok=True)
    (lock_dir / f"{dead_owner}.lock").touch()  # left behind by a killed server
    live_owner = "bb" * 8
    holder = subprocess.Popen(
        [sys.executable, "-c", "import fcntl, sys, time; f = open(sys.argv[1], 'a+b'); "
         "fcntl.flock(f.fileno(), fcntl.LOCK_EX); print('locked', flush=True); time.sleep(60)",
         str(lock_dir / f"{live_owner}.lock")], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        live = store.create_analysis(ds.id, {}, owner_pid=holder.pid, owner_token=live_owner)
        assert store.owner_state(dead_owner) == "dead" and store.owner_state(live_owner) == "alive"
        changed = store.mark_interrupted("cc" * 8)
        assert changed == [stale.id]
        assert store.get_analysis(stale.id).status == "interrupted"
        assert store.get_analysis(live.id).status == "queued"
    finally:
        holder.kill()
        holder.wait()
    assert store.owner_state(live_owner) == "dead"
    assert store.mark_interrupted("cc" * 8) == [live.id]
    store.remove_dead_owner_locks()
    assert list(lock_dir.iterdir()) == []


def test_graceful_stop_marks_running_analyses_interrupted(tmp_path):
    data_dir = tmp_path / "workspace"
    srv = LiveServer(data_dir)
    try:
        with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as c:
            aid = _start_long_analysis(c, seed=5)
            _wait(c, aid, lambda s: s["status"] == "running")
        owners = list((data_dir / "owners").glob("*.lock"))
        assert len(owners) == 1
    finally:
        srv.stop()  # SIGTERM: uvicorn's shutdown runs the job manager's
    # uvicorn re-raises the signal after its graceful shutdown, so -15 (SIGTERM) is a clean end here.
    assert srv.proc.returncode in (0, -15)
    con = sqlite3.connect(data_dir / "pairlens.sqlite3")
    status, error = con.execute("SELECT status, error FROM analyses WHERE id = ?", (aid,)).fetchone()
    con.close()
    assert status == "interrupted" and "run it again" in error
    assert list((data_dir / "owners").glob("*.lock")) == []  # the lock went with its owner
    assert _integrity(data_dir / "pairlens.sqlite3") == ["ok"]


def test_kills_at_random_moments_never_corrupt_or_leave_running(tmp_path):
    # Seeded random kill times spread over an analysis's whole life (reading data,
    # pairs, verdicts, figures, the final write): after each kill the database is
    # whole, and every analysis is either done with its full pair table or interrupted.
    import random

    data_dir = tmp_path / "workspace"
    db_path = data_dir / "pairlens.sqlite3"
    content = _csv(600, 5, seed=6)
    settings = {"measures": ["pearson", "spearman", "kendall", "dcor"], "permutations": 300}
    n_rows = 10 * 4  # 5 columns: 10 pairs, 4 measures
    srv = LiveServer(data_dir)
    try:
        with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as c:
            ds = c.post("/api/datasets", files={"file": ("k.csv", content, "text/csv")}).json()
            t0 = time.monotonic()
            first = c.post(f"/api/datasets/{ds['id']}/analyses", json=settings).json()["id"]
            assert _wait(c, first)["status"] == "done"
            duration = time.monotonic() - t0
            reference = c.get(f"/api/analyses/{first}/pairs").json()
            assert len(reference) == n_rows
    finally:
        srv.kill()
    rng = random.Random(20261201)
    outcomes = []
    for cycle in range(4):
        srv = LiveServer(data_dir)
        try:
            with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as c:
                aid = c.post(f"/api/datasets/{ds['id']}/analyses", json=settings).json()["id"]
                time.sleep(rng.uniform(0.0, 1.3 * duration))
        finally:
            srv.kill()
        assert _integrity(db_path) == ["ok"], f"cycle {cycle}"
        outcomes.append(aid)
    srv = LiveServer(data_dir)
    try:
        with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as c:
            seen = {}
            for aid in [first, *outcomes]:
                s = c.get(f"/api/analyses/{aid}").json()
                seen[aid] = s["status"]
                assert s["status"] in ("done", "interrupted"), s
                if s["status"] == "done":
                    # Same settings and seed: the same numbers as the reference run (or nothing at all).
                    assert c.get(f"/api/analyses/{aid}/pairs").json() == reference
            print(f"after random kills (first run {duration:.1f} s): {seen}")
    finally:
        srv.stop()
    assert _integrity(db_path) == ["ok"]
