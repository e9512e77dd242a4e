"""Wide tables with every default measure and the verdicts: the engine against the notebook loop.

The dashboard's analysis of a wide table: every pair of columns, the default measures (Pearson,
Spearman, Kendall tau-b, distance correlation) with their default p-values, Benjamini-Hochberg
q-values and each pair's verdict label, on local worker processes. Goal (issue 19): 1,000 columns x
1,000 rows under 2 minutes on 2 cores.

Workload: generated Gaussian-like columns with shared factors (seeded, the generator of
bench_wide.py), ROWS x COLUMNS, written to CSV. Each size runs, in fresh processes:

* pairlens: ``pairlens.ingest.load_table`` then ``pairlens.engine.run_analysis(..., verdicts=True)``
  with ``--workers`` processes; wall time of the whole child (start-up, reading, engine), the
  engine's own time, and the peak resident memory of the child and its workers;
* the notebook loop (``benchmarks/baseline_loop.py``: pandas + scipy.stats + dcor, one pair at a
  time, dcor's t-test) on the first ``--sample-pairs`` pairs, scaled to all pairs per pair (its own
  loop time, without imports and reading; no q-values, no verdicts: it does less).

Not a timed test; run by hand:

    python benchmarks/bench_wide_verdicts.py                        # 1,000 x 1,000, once
    python benchmarks/bench_wide_verdicts.py --sizes 1000x200,1000x1000 --repeats 1

Timings on a shared machine vary; compare the ratios measured in the same run.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_wide import _write_table  # noqa: E402 - the same generator as the --top table

CHILD = r'''
import json, sys, time
t0 = time.perf_counter()
from pairlens.engine import run_analysis
from pairlens.ingest import load_table
from pairlens.plan import AnalysisSettings
table = load_table(sys.argv[1])
t_read = time.perf_counter()
result = run_analysis(table.data, table.columns, AnalysisSettings(), workers=int(sys.argv[2]), verdicts=True)
t_done = time.perf_counter()
print(json.dumps({"read_s": t_read - t0, "engine_s": t_done - t_read, "rows": len(result.rows),
                  "verdicts": len(result.verdicts)}))
'''


def _tree_rss_kb(pid: int) -> int:
    """Resident memory of a process and its descendants (kB), from /proc."""
    total, todo = 0, [pid]
    while todo:
        p = todo.pop()
        try:
            with open(f"/proc/{p}/status") as fh:
                total += next((int(line.split()[1]) for line in fh if line.startswith("VmRSS:")), 0)
            for task in os.listdir(f"/proc/{p}/task"):
                with open(f"/proc/{p}/task/{task}/children") as fh:
                    todo += [int(c) for c in fh.read().split()]
        except (FileNotFoundError, ProcessLookupError, StopIteration):
            continue
    return total


def _pairlens(csv: Path, workers: int) -> dict:
    started = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", CHILD, str(csv), str(workers)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    peak = 0
    while proc.poll() is None:
        peak = max(peak, _tree_rss_kb(proc.pid))
        time.sleep(0.5)
    out, err = proc.communicate()
    if proc.returncode != 0:
        raise SystemExit(f"pairlens child failed:\n{err[-3000:]}")
    res = json.loads(out.strip().splitlines()[-1])
    res.update(wall_s=time.perf_counter() - started, peak_tree_mb=peak / 1024.0)
    return res


def _baseline(csv: Path, sample: int, total_pairs: int) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        done = subprocess.run([sys.executable, str(HERE / "baseline_loop.py"), str(csv), str(Path(tmp) / "o.csv"),
                               "--pairs", str(sample)], capture_output=True, text=True, check=True)
    info = json.loads(done.stdout.strip().splitlines()[-1])
    loop = float(info["loop_s"])
    per_pair = loop / sample
    return {"sample_pairs": sample, "sample_loop_s": loop, "per_pair_ms": per_pair * 1e3,
            "extrapolated_s": per_pair * total_pairs}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="1000x1000", help="ROWSxCOLUMNS,... (default 1000x1000)")
    ap.add_argument("--repeats", type=int, default=1, help="pairlens runs per size (median reported)")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--sample-pairs", type=int, default=2000, help="pairs the notebook loop runs (scaled up)")
    ap.add_argument("--seed", type=int, default=19)
    args = ap.parse_args()
    print(f"# {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, {platform.node()}, "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f}")
    print("| rows x columns | pairs | pairlens wall (engine) | peak memory | notebook loop, extrapolated "
          "(per pair) | ratio |")
    print("|---|---|---|---|---|---|")
    with tempfile.TemporaryDirectory() as tmp:
        for size in args.sizes.split(","):
            rows, cols = (int(v) for v in size.lower().split("x"))
            csv = Path(tmp) / f"wide_{rows}x{cols}.csv"
            _write_table(csv, rows, cols, args.seed)
            pairs = cols * (cols - 1) // 2
            runs = [_pairlens(csv, args.workers) for _ in range(args.repeats)]
            wall = statistics.median(r["wall_s"] for r in runs)
            engine = statistics.median(r["engine_s"] for r in runs)
            peak = max(r["peak_tree_mb"] for r in runs)
            assert all(r["verdicts"] == pairs for r in runs), runs
            base = _baseline(csv, min(args.sample_pairs, pairs), pairs)
            print(f"| {rows:,} x {cols:,} | {pairs:,} | {wall:.1f} s ({engine:.1f} s) | {peak:,.0f} MB | "
                  f"{base['extrapolated_s']:.0f} s ({base['per_pair_ms']:.2f} ms) | "
                  f"{base['extrapolated_s'] / wall:.1f}x |", flush=True)
            print("<!-- " + json.dumps({"size": size, "runs": runs, "baseline": base}) + " -->", flush=True)


if __name__ == "__main__":
    main()
