"""Faults around analyses: kill -9 of the server alone, dead owners, gone processes, damaged databases.

The kill test SIGKILLs only the server process (not its process group), the case where
analysis processes used to outlive their server. After each restart (the issue's bounds):
no process of the old server's tree is alive 5 s after the new server answers, SQLite's
``PRAGMA integrity_check`` returns the single row "ok" (https://www.sqlite.org/pragma.html#pragma_integrity_check)
and no analysis shows ``running`` without a live analysis process.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time

import httpx
import psutil
import pytest

from pairlens.jobs import JobManager, stop_proven_worker
from pairlens.store import Store, process_start_time
from pairlens.web.security import local_location
from live_server import ROOT, LiveServer, free_port, wait_for_analysis
from test_crash_recovery import _csv, _integrity


def _alive(proc: psutil.Process) -> bool:
    """The very process (same pid and start time), not a zombie."""
    try:
        return proc.is_running() and proc.status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def _kill_server_only(srv: LiveServer) -> list[psutil.Process]:
    """SIGKILL the server process alone; returns its descendants as they were just before."""
    try:
        tree = psutil.Process(srv.proc.pid).children(recursive=True)
    except psutil.NoSuchProcess:
        tree = []
    os.kill(srv.proc.pid, signal.SIGKILL)
    srv.proc.wait(10)
    srv._log.close()
    return tree


def _running_without_process(db_path) -> list[tuple]:
    con = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        rows = con.execute("SELECT id, worker_pid, worker_started FROM analyses WHERE status = 'running'").fetchall()
    finally:
        con.close()
    # a running analysis must name a live worker that is still the process that claimed it
    return [r for r in rows if not (r[1] and process_start_time(r[1]) == r[2])]


def _reached(status: dict, target: str) -> bool:
    """The analysis is at ``target`` (queued < running < pairs) or beyond it."""
    if status["status"] not in ("queued", "running"):
        return True
    if target == "queued":
        return True
    if target == "running":
        return status["status"] == "running"
    return status["status"] == "running" and status["phase"] == target


@pytest.mark.slow
def test_kill_9_of_the_server_alone_ten_rounds(tmp_path):
    data_dir = tmp_path / "workspace"
    db_path = data_dir / "pairlens.sqlite3"
    rng = random.Random(14)
    # minutes of work if left alone: dCor with permutations on 6 columns x 2000 rows
    settings = {"measures": ["dcor", "pearson"], "permutations": 20000}
    targets = ("queued", "running", "pairs", "pairs", "pairs")
    dataset_id = None
    report = []
    srv = LiveServer(data_dir)
    for round_ in range(10):
        with httpx.Client(base_url=srv.base, timeout=60) as c:
            if dataset_id is None:
                dataset_id = c.post("/api/datasets", files={"file": ("long.csv", _csv(2000, 6, seed=3),
                                                                      "text/csv")}).json()["id"]
            aid = c.post(f"/api/datasets/{dataset_id}/analyses", json=settings | {"seed": round_}).json()["id"]
            target = rng.choice(targets)
            # kill at a moment of the analysis's life chosen at random (waiting on its state, not a clock):
            # the first state seen at or past the target. A standby process can claim the analysis
            # before the first poll, so "queued" is the moment the analysis exists, not a state to wait
            # for (waiting for it once ran the whole 26 s analysis to its end).
            state = wait_for_analysis(c, aid, lambda s: _reached(s, target), timeout=120, poll=0.05)
        old_tree = _kill_server_only(srv)
        srv = LiveServer(data_dir)
        deadline = time.monotonic() + 5.0  # the bound, counted from when the new server answers
        while any(_alive(p) for p in old_tree) and time.monotonic() < deadline:
            time.sleep(0.05)
        survivors = [(p.pid, p.cmdline()) for p in old_tree if _alive(p)]
        assert not survivors, f"round {round_}: old processes alive 5 s after the restart: {survivors}"
        assert _integrity(db_path) == ["ok"], f"round {round_}"
        assert _running_without_process(db_path) == [], f"round {round_}"
        with httpx.Client(base_url=srv.base, timeout=60) as c:
            final = c.get(f"/api/analyses/{aid}").json()["status"]
        assert final in ("interrupted", "done"), f"round {round_}: {final}"
        report.append((target, state["status"], state["phase"], len(old_tree), final))
    srv.stop()
    print("rounds (target, status and phase at the kill, old processes, final):", report)


@pytest.fixture
def workspace(tmp_path):
    store = Store(tmp_path)
    sha = store.put_blob(b"a,b\n1,2\n2,3\n3,5\n")
    dataset = store.add_dataset(name="t.csv", sha256=sha, size=16, n_rows=3, n_columns=2, summary={})
    yield store, dataset
    store.close()


def _sleeper() -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", "import time; time.sleep(120)"], process_group=0)


def test_owner_death_is_seen_by_another_live_server_without_a_restart(workspace, tmp_path):
    store, dataset = workspace
    first = JobManager(store)
    first._owner_lock = store.hold_owner_lock(first.token)
    running = store.create_analysis(dataset.id, {}, owner_pid=os.getpid(), owner_token=first.token)
    queued = store.create_analysis(dataset.id, {}, owner_pid=os.getpid(), owner_token=first.token)
    worker = _sleeper()
    try:
        assert store.claim(running.id, worker.pid, process_start_time(worker.pid))
        second = JobManager(Store(tmp_path))
        second._owner_lock = second.store.hold_owner_lock(second.token)
        assert second.sweep() == []  # the first server holds its lock: alive
        first._owner_lock.close()    # what the kernel does when the first server dies by kill -9
        changed = second.sweep()
        assert sorted(changed) == sorted([running.id, queued.id])
        assert {store.get_analysis(a).status for a in changed} == {"interrupted"}
        worker.wait(10)              # the dead server's proven worker was stopped
        assert worker.returncode == -signal.SIGKILL
    finally:
        if worker.poll() is None:
            worker.kill()
            worker.wait()


def test_a_worker_is_stopped_only_when_its_start_time_proves_it():
    worker = _sleeper()
    try:
        started = process_start_time(worker.pid)
        assert started is not None
        assert not stop_proven_worker(worker.pid, started - 1)  # a reused pid: another process
        assert not stop_proven_worker(worker.pid, None)          # nothing recorded: cannot prove
        assert worker.poll() is None
        assert stop_proven_worker(worker.pid, started)
        assert worker.wait(10) == -signal.SIGKILL
    finally:
        if worker.poll() is None:
            worker.kill()
            worker.wait()


def test_cancel_and_delete_work_when_the_process_is_gone(workspace):
    store, dataset = workspace
    jobs = JobManager(store)
    jobs._owner_lock = store.hold_owner_lock(jobs.token)
    row = store.create_analysis(dataset.id, {}, owner_pid=os.getpid(), owner_token=jobs.token)
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()
    assert store.claim(row.id, gone.pid, 12345)  # its process ended without a final write
    assert jobs.cancel(row.id).status == "cancelled"
    assert store.delete_analysis(row.id) is True


def test_final_status_write_is_retried(workspace, monkeypatch):
    from pairlens import jobs as jobs_module

    store, _ = workspace
    calls = []

    def flaky():
        calls.append(1)
        if len(calls) < 3:
            raise sqlite3.OperationalError("database or disk is full")
        return "written"

    released = []
    monkeypatch.setattr(store, "release_reserve", lambda: released.append(1))
    assert jobs_module._retry_write(store, flaky, first_wait=0.01) == "written"
    assert len(calls) == 3 and released  # the reserve was given up for the retry


def _serve_exit(data_dir) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "pairlens.cli", "serve", "--port", str(free_port()), "--data-dir",
                           str(data_dir)], capture_output=True, text=True, env=env, timeout=120)


def test_foreign_database_file_is_refused_on_one_line(tmp_path):
    (tmp_path / "pairlens.sqlite3").write_bytes(b"this is not a database\n" * 400)
    done = _serve_exit(tmp_path)
    assert done.returncode == 2
    line = done.stderr.strip()
    assert "\n" not in line and str(tmp_path / "pairlens.sqlite3") in line and "backup" in line


def test_database_with_a_damaged_page_is_refused_at_start(tmp_path):
    store = Store(tmp_path)
    sha = store.put_blob(b"a,b\n1,2\n2,3\n3,5\n")
    for k in range(300):  # several pages of rows
        store.add_dataset(name=f"t{k}.csv" + "x" * 200, sha256=sha, size=16, n_rows=3, n_columns=2, summary={})
    store.close()
    db = tmp_path / "pairlens.sqlite3"
    con = sqlite3.connect(db)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")  # every page in the main file
    page = con.execute("PRAGMA page_size").fetchone()[0]
    root = con.execute("SELECT rootpage FROM sqlite_master WHERE name = 'datasets'").fetchone()[0]
    con.close()
    with open(db, "r+b") as f:
        f.seek(page * (root - 1) + 16)  # pages are numbered from 1
        f.write(os.urandom(page - 32))  # scramble the datasets table's root page
    try:
        verdict = _integrity(db)
    except sqlite3.DatabaseError as exc:  # "database disk image is malformed"
        verdict = [str(exc)]
    assert verdict != ["ok"]  # SQLite itself sees the damage
    done = _serve_exit(tmp_path)
    assert done.returncode == 2
    line = done.stderr.strip()
    assert "\n" not in line and str(db) in line and "damaged" in line


@pytest.mark.parametrize("path, expected", [
    ("/\\evil.example/", "/%5Cevil.example/"),
    ("//evil.example/", "/evil.example/"),
    ("/\t/evil.example", "/%09/evil.example"),
    ("/\n//evil.example", "/%0A//evil.example"),
    ("/analyses/abc", "/analyses/abc"),
])
def test_token_redirect_target_is_a_local_path(path, expected):
    # WHATWG URL parsing (https://url.spec.whatwg.org/#concept-basic-url-parser) treats "\" like "/" in
    # http URLs and strips tabs and newlines: each of those could turn "/x" into "//host"
    assert local_location(path) == expected


def test_token_redirect_on_a_live_server_stays_on_the_server(tmp_path):
    srv = LiveServer(tmp_path / "data", args=("--require-token",))
    try:
        link = srv.access_link()
        token = link.split("token=", 1)[1]
        for raw in ("/%5Cevil.example/", "/%09/evil.example/", "//evil.example/"):
            r = httpx.get(srv.base + raw + f"?token={token}", follow_redirects=False, timeout=30)
            location = r.headers.get("location", "")
            assert r.status_code == 303 and location.startswith("/") and not location.startswith("//"), location
            assert "\\" not in location and "\t" not in location
    finally:
        srv.stop()
