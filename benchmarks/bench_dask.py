"""Workload W1 on a Dask cluster against the local executors.

W1: n = 10,000 rows by 60 columns (1,770 pairs) with 5% of the cells missing,
measures pearson, spearman, kendall and dcor, each with its default p-value.

The script starts a loopback cluster itself (``dask scheduler`` and
``dask worker ... --nworkers 1 --nthreads 1`` subprocesses on 127.0.0.1, torn
down at the end), times the analysis with 1 and then 2 Dask workers, and the
same analysis on the local executors (1 process and all cores), then 2 workers
started without Dask's default ``MALLOC_TRIM_THRESHOLD_=65536``, and prints the
median of the repeated runs and the ratios. It also checks that every run
gives the same pair table bit for bit. Not a timed test; run it by hand:

    python benchmarks/bench_dask.py                 # W1, 3 repeats
    python benchmarks/bench_dask.py --rows 2000 --columns 20 --repeats 1   # quick look
    python benchmarks/bench_dask.py --cluster tcp://HOST:8786   # an existing cluster instead

Timings on a shared machine vary; compare ratios measured in the same run.
"""

from __future__ import annotations

import argparse
import math
import os
import shutil
import signal
import socket
import statistics
import struct
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
# Run this process and the cluster from one copy of the package taken now, so that edits to the
# working tree during a long benchmark cannot give the client and the workers different code.
SOURCE_COPY = Path(tempfile.mkdtemp(prefix="pairlens-bench-src-"))
shutil.copytree(REPO / "app", SOURCE_COPY / "pairlens", ignore=shutil.ignore_patterns("__pycache__"))
sys.path.insert(0, str(SOURCE_COPY))

from pairlens.dask_executor import DaskExecutor  # noqa: E402
from pairlens.engine import AnalysisSettings, run_analysis  # noqa: E402

MEASURES = "pearson,spearman,kendall,dcor"


def w1_table(rows: int, columns: int, missing: float, seed: int = 1):
    """Columns with a mix of linear, monotone and no dependence; ``missing`` of the cells NaN."""
    rng = np.random.default_rng(seed)
    base = rng.normal(size=(rows, 4))
    data = np.empty((rows, columns))
    for j in range(columns):
        a = base[:, j % 4]
        kind = j % 3
        if kind == 0:
            data[:, j] = a + rng.normal(size=rows)
        elif kind == 1:
            data[:, j] = np.exp(a / 2) + rng.normal(size=rows)
        else:
            data[:, j] = rng.normal(size=rows)
    data[rng.uniform(size=data.shape) < missing] = np.nan
    return data, [f"c{j:02d}" for j in range(columns)]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class LoopbackCluster:
    def __init__(self, workdir: Path, malloc_trim: bool = True) -> None:
        self.workdir = workdir
        self.address = f"tcp://127.0.0.1:{_free_port()}"
        self.procs: list[subprocess.Popen] = []
        self.env = dict(os.environ, PYTHONPATH=os.pathsep.join(
            p for p in (str(SOURCE_COPY), os.environ.get("PYTHONPATH")) if p))
        if not malloc_trim:
            # A null value removes the variable from what the nanny sets (dask config, not env:
            # DASK_* variables are lower-cased and would not match the key).
            config_dir = workdir / "dask-config"
            config_dir.mkdir()
            (config_dir / "pairlens.yaml").write_text(
                "distributed:\n  nanny:\n    pre-spawn-environ:\n      MALLOC_TRIM_THRESHOLD_: null\n")
            self.env["DASK_CONFIG"] = str(config_dir)

    def _spawn(self, name: str, args: list[str]) -> None:
        with open(self.workdir / f"{name}.log", "wb") as log:
            self.procs.append(subprocess.Popen([sys.executable, "-m", "dask", *args], cwd=self.workdir,
                                               env=self.env, stdout=log, stderr=subprocess.STDOUT,
                                               start_new_session=True))

    def start_scheduler(self) -> None:
        port = self.address.rsplit(":", 1)[1]
        self._spawn("scheduler", ["scheduler", "--host", "127.0.0.1", "--port", port, "--no-dashboard",
                                  "--dashboard-address", "127.0.0.1:0"])

    def add_worker(self) -> None:
        name = f"worker-{len(self.procs)}"
        self._spawn(name, ["worker", self.address, "--nworkers", "1", "--nthreads", "1", "--host", "127.0.0.1",
                           "--no-dashboard", "--dashboard-address", "127.0.0.1:0",
                           "--local-directory", str(self.workdir / name)])

    def stop(self) -> None:
        for p in reversed(self.procs):
            try:
                os.killpg(p.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
        for p in reversed(self.procs):
            try:
                p.wait(timeout=15)
            except subprocess.TimeoutExpired:
                pass
            try:
                os.killpg(p.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
            p.wait(timeout=5)


def _trim_setting() -> str | None:
    return os.environ.get("MALLOC_TRIM_THRESHOLD_")


def _wait_for_workers(address: str, n: int, malloc_trim: bool) -> None:
    import distributed

    with distributed.Client(address, timeout=120, set_as_default=False) as client:
        client.wait_for_workers(n, timeout=120)
        settings = set(client.run(_trim_setting).values())
    if (None in settings) == malloc_trim:
        raise SystemExit(f"workers have MALLOC_TRIM_THRESHOLD_ {settings}, expected it "
                         f"{'set' if malloc_trim else 'unset'}")


def _bits(table) -> list[tuple]:
    def key(v):
        if isinstance(v, float):
            return "nan" if math.isnan(v) else struct.pack("<d", v)
        return v
    return [tuple(key(getattr(r, f)) for f in ("x", "y", "measure", "estimate", "ci_low", "ci_high",
                                                "p_value", "q_value", "n", "note", "method"))
            for r in table.rows]


def _time(label: str, repeats: int, run) -> tuple[float, list]:
    run(warm_up=True)  # numba kernels load or compile once per process; not part of the timing
    seconds, bits = [], None
    for k in range(repeats):
        t0 = time.perf_counter()
        table = run(warm_up=False)
        seconds.append(time.perf_counter() - t0)
        b = _bits(table)
        if bits is not None and b != bits:
            raise SystemExit(f"{label}: repeat {k} differs from repeat 0")
        bits = b
    med = statistics.median(seconds)
    print(f"  {label:<44} median {med:7.2f} s  runs {', '.join(f'{s:.2f}' for s in seconds)}", flush=True)
    return med, bits


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, default=10_000)
    ap.add_argument("--columns", type=int, default=60)
    ap.add_argument("--missing", type=float, default=0.05)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--cluster", default=None, help="use this existing scheduler (all its workers) instead")
    args = ap.parse_args(argv)

    data, names = w1_table(args.rows, args.columns, args.missing)
    small = data[:300]
    settings = AnalysisSettings.from_options(measures=MEASURES)
    pairs = len(names) * (len(names) - 1) // 2
    print(f"W1: {args.rows} rows x {args.columns} columns ({pairs} pairs), {args.missing:.0%} missing, "
          f"measures {MEASURES}, default p-values; {args.repeats} repeats; {os.cpu_count()} cores; "
          f"load average {os.getloadavg()[0]:.1f}", flush=True)

    def local(workers):
        return lambda warm_up: run_analysis(small if warm_up else data, names, settings, workers=workers)

    def on_cluster(address):
        def run(warm_up):
            with DaskExecutor(address) as ex:  # connecting is part of what a user pays per run
                return run_analysis(small if warm_up else data, names, settings, executor=ex)
        return run

    results: dict[str, float] = {}
    reference = None
    all_cores = os.cpu_count() or 1
    for label, runner in (("local, --workers 1", local(1)), (f"local, --workers {all_cores}", local(all_cores))):
        results[label], bits = _time(label, args.repeats, runner)
        reference = reference or bits
        if bits != reference:
            raise SystemExit(f"{label}: pair table differs from the --workers 1 run")

    def check(label, bits):
        if bits != reference:
            raise SystemExit(f"{label}: pair table differs from the local run")

    if args.cluster:
        label = f"dask, {args.cluster}"
        results[label], bits = _time(label, args.repeats, on_cluster(args.cluster))
        check(label, bits)
    for malloc_trim in (True, False):
        if args.cluster:
            break
        # Dask's nanny starts workers with MALLOC_TRIM_THRESHOLD_=65536; the second pass unsets
        # it through the workers' Dask config to show what that setting costs these kernels.
        cluster = LoopbackCluster(Path(tempfile.mkdtemp(prefix="pairlens-bench-")), malloc_trim=malloc_trim)
        try:
            cluster.start_scheduler()
            for n_workers in ((1, 2) if malloc_trim else (2,)):
                while len(cluster.procs) - 1 < n_workers:
                    cluster.add_worker()
                _wait_for_workers(cluster.address, n_workers, malloc_trim)
                label = (f"dask, {n_workers} worker{'s' if n_workers > 1 else ''} x 1 thread"
                         + ("" if malloc_trim else ", no malloc trim"))
                results[label], bits = _time(label, args.repeats, on_cluster(cluster.address))
                check(label, bits)
        finally:
            cluster.stop()
            shutil.rmtree(cluster.workdir, ignore_errors=True)

    base1, baseall = results["local, --workers 1"], results[f"local, --workers {all_cores}"]
    print("\nratios (time / local time; below 1 is faster):")
    for label, sec in results.items():
        print(f"  {label:<44} {sec / base1:5.2f} x local --workers 1   {sec / baseall:5.2f} x local --workers {all_cores}")
    print(f"every run gave the same pair table bit for bit; load average now {os.getloadavg()[0]:.1f} "
          "(other work on the machine skews the times)")
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main())
    finally:
        shutil.rmtree(SOURCE_COPY, ignore_errors=True)
