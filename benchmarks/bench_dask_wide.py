"""A wide table with verdicts on a loopback Dask cluster: the matrix part against tiles alone.

Invented table: ``--rows`` rows by ``--columns`` columns (blocks of related columns and noise,
generated with a fixed seed), the default measures, verdicts (as every dashboard analysis asks).
Timed, medians of ``--repeats`` whole analyses each (connecting to the cluster included):

- local, all cores, ``--path auto`` (the matrix part in memory);
- Dask, 2 workers x 1 thread, ``path="pairs"``: every measure pair by pair in the tiles;
- Dask, 2 workers x 1 thread, ``path="auto"``: Pearson and Spearman by matrix products in this
  process, each tile carrying its pairs' share to the workers.

The Dask ``auto`` run must give the local run's pair table and labels bit for bit. Not a timed
test; run it by hand (about 5 minutes on a 2-core machine):

    python benchmarks/bench_dask_wide.py
    python benchmarks/bench_dask_wide.py --rows 200 --columns 80 --repeats 1     # quick look
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import bench_dask  # noqa: E402  (copies the package once, so client and workers run the same code)
from bench_dask import LoopbackCluster, _time  # noqa: E402

from pairlens.dask_executor import DaskExecutor  # noqa: E402
from pairlens.engine import AnalysisSettings, run_analysis  # noqa: E402


def wide_table(rows: int, columns: int, seed: int = 5):
    """Invented: blocks of ten columns around a shared factor (linear, curved, noisy), 2% missing."""
    rng = np.random.default_rng(seed)
    data = np.empty((rows, columns))
    for start in range(0, columns, 10):
        factor = rng.normal(size=rows)
        for j in range(start, min(start + 10, columns)):
            kind = j % 4
            noise = rng.normal(size=rows)
            data[:, j] = (factor + noise if kind == 0 else np.exp(factor / 2) + noise if kind == 1
                          else factor ** 2 + noise if kind == 2 else noise)
    data[rng.uniform(size=data.shape) < 0.02] = np.nan
    return data, [f"w{j:04d}" for j in range(columns)]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, default=400)
    ap.add_argument("--columns", type=int, default=150)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    data, names = wide_table(args.rows, args.columns)
    small = data[:, :12]
    settings = AnalysisSettings()
    pairs = len(names) * (len(names) - 1) // 2
    print(f"{args.rows} rows x {args.columns} columns ({pairs:,} pairs), measures {','.join(settings.measures)}, "
          f"verdicts; {args.repeats} repeats; {os.cpu_count()} cores; load average {os.getloadavg()[0]:.1f}",
          flush=True)

    def local(warm_up):
        return run_analysis(data[:, :12] if warm_up else data, names[:12] if warm_up else names, settings,
                            verdicts=True)

    def on_cluster(address, path):
        def run(warm_up):
            with DaskExecutor(address) as ex:
                return run_analysis(small if warm_up else data, names[:12] if warm_up else names, settings,
                                    executor=ex, verdicts=True, path=path)
        return run

    results = {}
    results["local, all cores, auto"], reference = _time("local, all cores, auto", args.repeats, local)
    reference_labels = local(False).verdicts
    cluster = LoopbackCluster(Path(tempfile.mkdtemp(prefix="pairlens-bench-")))
    try:
        cluster.start_scheduler()
        cluster.add_worker()
        cluster.add_worker()
        import distributed

        with distributed.Client(cluster.address, timeout=120, set_as_default=False) as client:
            client.wait_for_workers(2, timeout=120)
        for path in ("pairs", "auto"):
            label = f"dask, 2 workers x 1 thread, {path}"
            results[label], bits = _time(label, args.repeats, on_cluster(cluster.address, path))
            if path == "auto":
                if bits != reference:
                    raise SystemExit(f"{label}: pair table differs from the local run")
                if on_cluster(cluster.address, path)(False).verdicts != reference_labels:
                    raise SystemExit(f"{label}: labels differ from the local run")
    finally:
        cluster.stop()
        shutil.rmtree(cluster.workdir, ignore_errors=True)
    before = results["dask, 2 workers x 1 thread, pairs"]
    print("\nratios (time / Dask tiles alone; below 1 is faster):")
    for label, sec in results.items():
        print(f"  {label:<44} {sec / before:5.2f}")
    print(f"the Dask auto run gave the local table and labels bit for bit; load average now "
          f"{os.getloadavg()[0]:.1f}")
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main())
    finally:
        shutil.rmtree(bench_dask.SOURCE_COPY, ignore_errors=True)
