"""Analyses on a real Dask cluster: a scheduler and two nanny workers started here on 127.0.0.1.

The reference for every check is the same analysis run locally (the engine's
serial executor in this process): a cluster run must give the same pair table
bit for bit, permutation p-values included, also when a worker is killed in the
middle of the run. One estimate per measure is also checked against
scipy.stats / dcor so the tables compared are not both wrong in the same way.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import signal
import socket
import struct
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

distributed = pytest.importorskip(
    "distributed", reason='dask.distributed is not installed (pip install ".[cluster]")')

import dcor  # noqa: E402
import scipy.stats as ss  # noqa: E402

from pairlens import config  # noqa: E402
from pairlens.cli import main  # noqa: E402
from pairlens.dask_executor import ClusterUnavailable, DaskExecutor, worker_tile_counts  # noqa: E402
from pairlens.engine import AnalysisCancelled, AnalysisSettings, PairRow, _pairs, _tiles, plan_variables, run_analysis  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
MEASURES = "pearson,spearman,kendall,dcor"
START_TIMEOUT = 90.0   # a loaded 2-core machine can take a while to import distributed twice


# Cluster ---------------------------------------------------------------------

def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class _Cluster:
    """`dask scheduler` and `dask worker` subprocesses, every listener on 127.0.0.1."""

    def __init__(self, workdir: Path) -> None:
        self.workdir = workdir
        self.port = _free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        self.procs: list[subprocess.Popen] = []
        self.env = dict(os.environ)
        # The scheduler unpickles the task graph and the workers run the engine: both need `app`.
        self.env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), os.environ.get("PYTHONPATH")) if p)

    def _spawn(self, name: str, args: list[str]) -> subprocess.Popen:
        log = open(self.workdir / f"{name}.log", "wb")
        proc = subprocess.Popen([sys.executable, "-m", "dask", *args], cwd=self.workdir, env=self.env,
                                stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
        log.close()
        self.procs.append(proc)
        return proc

    def start_scheduler(self) -> None:
        # --dashboard-address too: without it the HTTP endpoints bind every interface.
        self._spawn("scheduler", ["scheduler", "--host", "127.0.0.1", "--port", str(self.port),
                                  "--no-dashboard", "--dashboard-address", "127.0.0.1:0"])

    def start_worker(self, name: str) -> None:
        self._spawn(name, ["worker", self.address, "--nworkers", "1", "--nthreads", "1",
                           "--host", "127.0.0.1", "--no-dashboard", "--dashboard-address", "127.0.0.1:0",
                           "--local-directory", str(self.workdir / name), "--name", name])

    def logs(self) -> str:
        return "\n".join(f"--- {p.name}\n{p.read_text(errors='replace')[-2000:]}"
                         for p in sorted(self.workdir.glob("*.log")))

    def stop(self) -> None:
        # Each subprocess leads its own process group (nanny + worker process): end the groups we made.
        for proc in reversed(self.procs):
            try:
                os.killpg(proc.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
        deadline = time.monotonic() + 15
        for proc in reversed(self.procs):
            try:
                proc.wait(timeout=max(0.1, deadline - time.monotonic()))
            except subprocess.TimeoutExpired:
                pass
            try:
                os.killpg(proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
            proc.wait(timeout=5)


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    c = _Cluster(tmp_path_factory.mktemp("dask"))
    try:
        c.start_scheduler()
        c.start_worker("worker-a")
        c.start_worker("worker-b")
        try:
            with distributed.Client(c.address, timeout=START_TIMEOUT, set_as_default=False) as client:
                client.wait_for_workers(2, timeout=START_TIMEOUT)
        except Exception as exc:  # pragma: no cover - a failed start should say why
            pytest.fail(f"test cluster did not start: {exc}\n{c.logs()}")
        yield c
    finally:
        c.stop()


def _wait_for_two_workers(cluster) -> None:
    with distributed.Client(cluster.address, timeout=START_TIMEOUT, set_as_default=False) as client:
        client.wait_for_workers(2, timeout=START_TIMEOUT)


# Data and comparisons ----------------------------------------------------------

def _vineyard_table(n: int, seed: int, extra_noise_columns: int = 0):
    """Invented vineyard-like columns: linear, curved, U-shaped, tied, constant, missing, noise."""
    rng = np.random.default_rng(seed)
    moisture = rng.normal(30, 5, size=n)
    cols = {
        "soil_moisture_20cm": moisture,
        "soil_moisture_60cm": 0.8 * moisture + rng.normal(0, 2, size=n),
        "sugar_brix": np.exp(moisture / 15) + rng.normal(0, 0.3, size=n),
        "canopy_temp": (moisture - 30) ** 2 / 10 + rng.normal(0, 1, size=n),
        "disease_score": np.round(rng.uniform(0, 4, size=n)),        # heavy ties
        "slope_aspect": np.full(n, 180.0),                            # constant: undefined rows
        "berry_weight": rng.normal(1.5, 0.2, size=n),
    }
    for k in range(extra_noise_columns):
        cols[f"noise_{k}"] = rng.normal(size=n)
    data = np.column_stack(list(cols.values()))
    holes = rng.uniform(size=data.shape) < 0.05
    holes[:, list(cols).index("slope_aspect")] = False
    data[holes] = np.nan
    return data, list(cols)


def _same_value(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, float):
        if math.isnan(a) and math.isnan(b):
            return True
        return struct.pack("<d", a) == struct.pack("<d", b)    # bit for bit, also the sign of zero
    return type(a) is type(b) and a == b


def _assert_same_tables(local, remote) -> None:
    assert len(local.rows) == len(remote.rows) > 0
    names = [f.name for f in dataclasses.fields(PairRow)]
    for r_local, r_remote in zip(local.rows, remote.rows):
        for name in names:
            u, v = getattr(r_local, name), getattr(r_remote, name)
            assert _same_value(u, v), f"{r_local.x}/{r_local.y}/{r_local.measure}.{name}: {u!r} != {v!r}"


def _n_tiles(names, settings, parallelism):
    return len(_tiles(_pairs(plan_variables(names, settings)), parallelism))


# Tests ---------------------------------------------------------------------------

def test_cluster_run_equals_local_run_bit_for_bit(cluster):
    _wait_for_two_workers(cluster)
    data, names = _vineyard_table(n=120, seed=11)
    settings = AnalysisSettings.from_options(measures=MEASURES, permutations=99, seed=7)
    local = run_analysis(data, names, settings, workers=1)

    with DaskExecutor(cluster.address) as ex:
        assert ex.parallelism == 2
        with distributed.get_task_stream(client=ex.client) as stream:
            remote = run_analysis(data, names, settings, executor=ex)
        counts = ex.client.run(worker_tile_counts)
        run_id = ex.last_run_id

    _assert_same_tables(local, remote)
    dcor_rows = [r for r in remote.rows if r.measure == "dcor" and math.isfinite(r.p_value)]
    assert dcor_rows and all(r.method.startswith("permutation") for r in dcor_rows)
    # B = 99 permutations: p = (1 + #{T_b >= T}) / (B + 1) (Phipson & Smyth 2010, Stat. Appl. Genet.
    # Mol. Biol. 9:39; the rule app/core/distance.py documents), so every p-value sits on a 1/100 grid.
    assert all(abs(r.p_value * 100 - round(r.p_value * 100)) < 1e-9 for r in dcor_rows)
    assert any(r.note for r in remote.rows if r.x == "slope_aspect" or r.y == "slope_aspect")

    # Independent references for one pair, so the two tables are not equal and wrong.
    x, y = data[:, 0], data[:, 2]
    keep = ~np.isnan(x) & ~np.isnan(y)
    row = remote.lookup(names[0], names[2])
    assert row["pearson"].estimate == pytest.approx(ss.pearsonr(x[keep], y[keep])[0], abs=1e-12)   # scipy.stats.pearsonr
    assert row["kendall"].estimate == pytest.approx(ss.kendalltau(x[keep], y[keep])[0], abs=1e-12)  # scipy.stats.kendalltau (tau-b)
    assert row["dcor"].estimate == pytest.approx(dcor.distance_correlation(x[keep], y[keep]), abs=1e-9)  # dcor package

    # The scheduler's task stream: every tile ran once, as a task on the workers, on both of them.
    n_tiles = _n_tiles(names, settings, 2)
    tile_tasks = [t for t in stream.data if str(t["key"]).startswith(f"pairlens-tile-{run_id}-")]
    assert sorted(str(t["key"]) for t in tile_tasks) == sorted(f"pairlens-tile-{run_id}-{i}" for i in range(n_tiles))
    assert len({t["worker"] for t in tile_tasks}) == 2
    # The workers' own counters agree with the scheduler, and this process did none of it.
    per_worker = {addr: c["tiles"].get(run_id, 0) for addr, c in counts.items()}
    assert sum(per_worker.values()) == n_tiles and all(v > 0 for v in per_worker.values()), per_worker
    assert all(c["pid"] != os.getpid() for c in counts.values())


def test_wide_table_with_verdicts_takes_the_matrix_part_and_spreads_its_tiles(cluster, monkeypatch):
    # A wide table's Pearson and Spearman come from the matrix products in this process (issue 19);
    # each tile sent to the cluster carries its pairs' share of them. Reference: the same analysis
    # run locally (whole part in memory), whose matrix part tests/core/test_wide.py checks against
    # the per-pair path; one estimate against scipy.stats.
    from pairlens import matrix_path

    _wait_for_two_workers(cluster)
    data, names = _vineyard_table(n=80, seed=17, extra_noise_columns=33)        # 40 columns, 780 pairs
    settings = AnalysisSettings.from_options(measures="pearson,spearman,kendall,dcor", seed=3)
    monkeypatch.setattr(config, "MATRIX_PATH_MIN_PAIRS", 700)                     # auto takes the part here
    parts = []
    real = matrix_path.run_part
    monkeypatch.setattr(matrix_path, "run_part", lambda *a, **k: parts.append(a[4]) or real(*a, **k))
    local = run_analysis(data, names, settings, workers=1, verdicts=True)
    with DaskExecutor(cluster.address) as ex:
        remote = run_analysis(data, names, settings, executor=ex, verdicts=True)
        counts = ex.client.run(worker_tile_counts)
        run_id = ex.last_run_id
    assert parts == [("pearson", "spearman")] * 2
    _assert_same_tables(local, remote)
    assert remote.verdicts == local.verdicts and len(remote.verdicts) == 780
    per_worker = [c["tiles"].get(run_id, 0) for c in counts.values()]
    assert sum(per_worker) == _n_tiles(names, settings, 2) and all(v > 0 for v in per_worker), per_worker
    x, y = data[:, 0], data[:, 1]
    keep = ~np.isnan(x) & ~np.isnan(y)
    assert remote.lookup(names[0], names[1])["spearman"].estimate == pytest.approx(
        ss.spearmanr(x[keep], y[keep])[0], abs=1e-12)                                 # scipy.stats.spearmanr


def test_two_analyses_at_once_on_one_cluster_each_match_local(cluster):
    # One worker process holds one analysis' state at a time; overlapping runs must not mix data.
    _wait_for_two_workers(cluster)
    jobs = []
    for seed in (21, 22):
        data, names = _vineyard_table(n=300, seed=seed, extra_noise_columns=3)
        settings = AnalysisSettings.from_options(measures=MEASURES, permutations=199, seed=seed)
        jobs.append({"data": data, "names": names, "settings": settings})
    for job in jobs:
        job["local"] = run_analysis(job["data"], job["names"], job["settings"], workers=1)

    def remote(job):
        try:
            with DaskExecutor(cluster.address) as ex:
                job["remote"] = run_analysis(job["data"], job["names"], job["settings"], executor=ex)
        except BaseException as exc:  # reported below, in the test thread
            job["error"] = exc

    threads = [threading.Thread(target=remote, args=(job,)) for job in jobs]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    for job in jobs:
        assert "error" not in job, job.get("error")
        _assert_same_tables(job["local"], job["remote"])


def test_cancel_stops_the_tiles_on_the_cluster(cluster):
    _wait_for_two_workers(cluster)
    data, names = _vineyard_table(n=600, seed=31, extra_noise_columns=9)
    settings = AnalysisSettings.from_options(measures=MEASURES, permutations=999, seed=3)
    tiles_seen = []

    def cancel():
        return len(tiles_seen) >= 1

    with DaskExecutor(cluster.address) as ex:
        n_tiles = _n_tiles(names, settings, ex.parallelism)
        with pytest.raises(AnalysisCancelled):
            run_analysis(data, names, settings, executor=ex, cancel=cancel,
                         progress=lambda frac, left: tiles_seen.append(frac))
        run_id = ex.last_run_id

        def tasks_of_run(dask_scheduler, run_id=run_id):
            return [str(k) for k in dask_scheduler.tasks if run_id in str(k)]

        def plugin_registered(dask_scheduler, run_id=run_id):
            return any(run_id in name for name in dask_scheduler.worker_plugins)

        deadline = time.monotonic() + 120  # a hang guard
        while ex.client.run_on_scheduler(tasks_of_run) and time.monotonic() < deadline:
            time.sleep(0.1)
        assert ex.client.run_on_scheduler(tasks_of_run) == []          # nothing left queued or running
        assert ex.client.run_on_scheduler(plugin_registered) is False  # the data was withdrawn too
        ran = sum(c["tiles"].get(run_id, 0) for c in ex.client.run(worker_tile_counts).values())
    assert 1 <= ran < n_tiles, (ran, n_tiles)


def test_data_left_by_a_dead_client_is_withdrawn_by_the_next_run(cluster):
    # A pairlens process killed mid-run cannot unregister its data plugin; the next run does.
    from pairlens.dask_executor import _AnalysisData
    from pairlens.engine import _init_worker

    _wait_for_two_workers(cluster)
    data, names = _vineyard_table(n=50, seed=61)
    settings = AnalysisSettings.from_options(measures="pearson")
    with distributed.Client(cluster.address, timeout=30, set_as_default=False) as gone:
        orphan = f"pairlens-data-0123456789abcdef@{gone.id}"
        gone.register_plugin(_AnalysisData("0123456789abcdef", _init_worker, (data, [], settings, None)),
                             name=orphan)

    def plugin_names(dask_scheduler):
        return sorted(dask_scheduler.worker_plugins)

    with DaskExecutor(cluster.address) as ex:
        assert orphan in ex.client.run_on_scheduler(plugin_names)
        table = run_analysis(data, names, settings, executor=ex)
        left = ex.client.run_on_scheduler(plugin_names)
    assert orphan not in left and not any(n.startswith("pairlens-data-") for n in left), left
    _assert_same_tables(run_analysis(data, names, settings, workers=1), table)


def test_worker_killed_mid_run_still_gives_the_local_result(cluster):
    _wait_for_two_workers(cluster)
    data, names = _vineyard_table(n=1000, seed=41, extra_noise_columns=9)
    # Long enough that the nanny's replacement worker joins well before the end (on a 2-core
    # machine the run went on for 4-5 s after the kill and the replacement ran 12 of 32 tiles).
    settings = AnalysisSettings.from_options(measures=MEASURES, permutations=1999, seed=5)
    local = run_analysis(data, names, settings, workers=1)

    with DaskExecutor(cluster.address) as ex:
        before = ex.client.run(worker_tile_counts)           # address -> worker process id
        started = threading.Event()
        outcome: dict = {}

        def progress(frac, left):
            started.set()      # the first tile is back: every worker has its data and is busy

        def remote():
            try:
                with distributed.get_task_stream(client=ex.client) as stream:
                    outcome["table"] = run_analysis(data, names, settings, executor=ex, progress=progress)
                outcome["stream"] = stream.data
            except BaseException as exc:
                outcome["error"] = exc

        runner = threading.Thread(target=remote)
        runner.start()
        assert started.wait(timeout=120), "the run did not get going"

        def processing(dask_scheduler):
            return {addr: [str(t.key) for t in ws.processing] for addr, ws in dask_scheduler.workers.items()}

        busy = {addr: keys for addr, keys in ex.client.run_on_scheduler(processing).items() if keys}
        assert busy, "no tile was running when the worker was to be killed"
        victim = sorted(busy)[0]
        os.kill(before[victim]["pid"], signal.SIGKILL)
        killed_at = time.monotonic()

        runner.join(timeout=180)
        assert not runner.is_alive()
        assert "error" not in outcome, outcome.get("error")
        seconds_after_kill = time.monotonic() - killed_at
        after = ex.client.run(worker_tile_counts)
        run_id = ex.last_run_id

    _assert_same_tables(local, outcome["table"])
    assert victim not in after                                 # the scheduler saw the worker go
    finished_on = {str(t["key"]): t["worker"] for t in outcome["stream"]}
    moved = [k for k in busy[victim] if k in finished_on and finished_on[k] != victim]
    assert moved, (busy[victim], finished_on)                  # its tile was run again elsewhere
    # The nanny's replacement worker joined; the data plugin reached it and it ran tiles.
    new_workers = {addr: c for addr, c in after.items() if addr not in before}
    print(f"killed {victim} (pid {before[victim]['pid']}); run finished {seconds_after_kill:.1f} s later; "
          f"tiles per worker after: { {a: c['tiles'].get(run_id, 0) for a, c in after.items()} }; "
          f"re-run elsewhere: {moved}")
    assert new_workers and sum(c["tiles"].get(run_id, 0) for c in new_workers.values()) > 0


def test_unreachable_scheduler_is_one_clear_error(monkeypatch, tmp_path, capsys):
    port = _free_port()        # nothing listens here
    t0 = time.monotonic()
    with pytest.raises(ClusterUnavailable) as info:
        DaskExecutor(f"127.0.0.1:{port}", timeout=1.0)
    assert time.monotonic() - t0 < 120  # a hang guard for a 1 s timeout, not a latency check
    message = str(info.value)
    assert f"tcp://127.0.0.1:{port}" in message and "\n" not in message

    # The same through the command line: exit status 2 and one line on stderr.
    monkeypatch.setattr(config, "DASK_CONNECT_TIMEOUT_SECONDS", 1.0)
    data, names = _vineyard_table(n=40, seed=1)
    csv = tmp_path / "blocks.csv"
    np.savetxt(csv, data, delimiter=",", header=",".join(names), comments="", fmt="%.6g")
    status = main(["pairs", str(csv), "--cluster", f"tcp://127.0.0.1:{port}"])
    err = capsys.readouterr().err
    assert status == 2
    assert err.count("\n") == 1 and "Dask scheduler" in err and "Traceback" not in err


def test_a_cluster_running_other_pairlens_code_is_refused(cluster, monkeypatch):
    import pairlens.dask_executor as dx

    _wait_for_two_workers(cluster)
    monkeypatch.setattr(dx, "_SOURCE_FINGERPRINT", "0" * 16)    # as if this machine had other sources
    with pytest.raises(ClusterUnavailable, match="not the same code") as info:
        DaskExecutor(cluster.address)
    assert "scheduler" in str(info.value) and "\n" not in str(info.value)


def test_command_line_with_cluster_writes_the_same_file(cluster, tmp_path, capsys):
    _wait_for_two_workers(cluster)
    data, names = _vineyard_table(n=150, seed=51)
    csv = tmp_path / "blocks.csv"
    np.savetxt(csv, data, delimiter=",", header=",".join(names), comments="", fmt="%.6g")
    common = ["pairs", str(csv), "--measures", MEASURES, "--permutations", "99"]
    assert main([*common, "-o", str(tmp_path / "local.json"), "--workers", "1"]) == 0, capsys.readouterr().err
    assert main([*common, "-o", str(tmp_path / "cluster.json"), "--cluster", cluster.address]) == 0, \
        capsys.readouterr().err
    local_text = (tmp_path / "local.json").read_text()
    assert local_text == (tmp_path / "cluster.json").read_text()
    # every pair is in the table (a few-valued column is categorical and takes the measures that apply)
    assert len({(r["x"], r["y"]) for r in json.loads(local_text)}) == len(names) * (len(names) - 1) // 2


def test_scheduler_lost_mid_run_is_one_clear_error(tmp_path):
    # A cluster of its own: this test kills the scheduler.
    own = _Cluster(tmp_path)
    try:
        own.start_scheduler()
        own.start_worker("worker-solo")
        with distributed.Client(own.address, timeout=START_TIMEOUT, set_as_default=False) as client:
            client.wait_for_workers(1, timeout=START_TIMEOUT)
        data, names = _vineyard_table(n=1000, seed=71, extra_noise_columns=9)
        settings = AnalysisSettings.from_options(measures=MEASURES, permutations=999, seed=9)
        started = threading.Event()

        def progress(frac, left):
            started.set()

        with DaskExecutor(own.address, timeout=3.0) as ex:
            outcome: dict = {}

            def remote():
                try:
                    run_analysis(data, names, settings, executor=ex, progress=progress)
                except BaseException as exc:
                    outcome["error"] = exc

            runner = threading.Thread(target=remote)
            runner.start()
            assert started.wait(timeout=120)
            os.killpg(own.procs[0].pid, signal.SIGKILL)        # the scheduler's process group
            runner.join(timeout=60)
            assert not runner.is_alive()
        error = outcome.get("error")
        assert isinstance(error, ClusterUnavailable), repr(error)
        assert "lost the Dask scheduler" in str(error) and "\n" not in str(error)
    finally:
        own.stop()
