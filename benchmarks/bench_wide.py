"""Wide tables: `pairlens pairs` (the matrix path) against a notebook baseline, whole processes.

Workload: generated Gaussian-like data (seeded), ROWS x COLUMNS, measures pearson and
spearman with p-values and q-values, the long pair table written to CSV. The baseline is what
a notebook does: pandas ``DataFrame.corr`` (Pearson and Spearman), p-values from the t
distribution vectorised with scipy, Benjamini-Hochberg with
``scipy.stats.false_discovery_control``, the same long table written with ``DataFrame.to_csv``.
Note the two differ in their tests: pairlens gives each measure's default p-value (at 4 rows
the exact permutation law of all 24 relabellings, raised to the smallest value the law allows),
the baseline the t approximation.

Each size runs the baseline and pairlens alternately, ``--repeats`` times each, every run a
fresh process; wall time and peak resident memory (ru_maxrss of that child) are recorded and
the medians, ratios and the time exponent in the number of pairs (slope of log time on
log pairs over the sizes) are printed as a Markdown table. Not a timed test; run by hand:

    python benchmarks/bench_wide.py                          # 4 x 1,000 and 4 x 3,000, 3 repeats
    python benchmarks/bench_wide.py --sizes 4x300,4x1000,4x3000 --repeats 3,3,1
    python benchmarks/bench_wide.py --sizes 4x300,4x1000 --repeats 1   # quick look
    python benchmarks/bench_wide.py --sizes 100x2000,100x6000,100x20000 --repeats 3,3,1 --top 1000 \
        --pearson-test t          # the 2 x 10^8-pair goal: blocks, --top, q-values over all pairs

Above --baseline-max-pairs (2 x 10^7) the baseline is not run: its two full correlation
matrices and long table need more than the machine's memory at 20,000 columns.

Timings on a shared machine vary; compare the ratios measured in the same run.
"""

from __future__ import annotations

import argparse
import math
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

BASELINE = r'''
import sys
import numpy as np, pandas as pd
from scipy import special, stats
src, out = sys.argv[1], sys.argv[2]
df = pd.read_csv(src)
n = len(df)
names = np.array(df.columns, dtype=object)
i, j = np.triu_indices(df.shape[1], k=1)
parts = []
for measure in ("pearson", "spearman"):
    r = df.corr(method=measure).to_numpy()[i, j]
    df_t = n - 2
    # two-sided t p-value of r, n-2 df: I_{1-r^2}((n-2)/2, 1/2)
    p = special.betainc(df_t / 2.0, 0.5, np.clip((1 - r) * (1 + r), 0, 1))
    q = np.full(p.shape, np.nan)
    ok = ~np.isnan(p)
    q[ok] = stats.false_discovery_control(p[ok], method="bh")
    parts.append(pd.DataFrame({"x": names[i], "y": names[j], "measure": measure, "estimate": r,
                               "p_value": p, "q_value": q, "n": n}))
pd.concat(parts).to_csv(out, index=False)
'''


def _run(cmd: list[str]) -> tuple[float, float]:
    """Wall seconds and peak RSS (MB) of one child process."""
    started = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - started
    err = proc.stderr.read().decode()
    proc.stderr.close()
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} failed:\n{err}")
    return wall, usage.ru_maxrss / 1024.0


def _write_table(path: Path, rows: int, cols: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    # Gaussian-like columns with some shared structure, so that a few pairs are correlated
    base = rng.normal(size=(rows, 8))
    load = rng.normal(scale=0.5, size=(8, cols))
    data = rng.normal(size=(rows, cols)) + base @ load
    with path.open("w") as fh:
        fh.write(",".join(f"s{k}" for k in range(cols)) + "\n")
        for row in data:
            fh.write(",".join(f"{v:.6g}" for v in row) + "\n")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="4x1000,4x3000", help="ROWSxCOLUMNS,... (default 4x1000,4x3000)")
    ap.add_argument("--repeats", default="3", help="runs of each side per size: one number, or one per size (3,3,1)")
    ap.add_argument("--seed", type=int, default=19)
    ap.add_argument("--top", type=int, default=None, metavar="K",
                    help="pairlens keeps each measure's K rows of smallest q-value (q over all pairs), in blocks")
    ap.add_argument("--pearson-test", default=None, choices=("moments", "t"),
                    help="pairlens's Pearson p-value (default: its default, the moment law)")
    ap.add_argument("--baseline-max-pairs", type=float, default=2e7,
                    help="skip the baseline above this many pairs (it holds full matrices and the long table)")
    args = ap.parse_args()
    pairlens = [sys.executable, "-m", "pairlens"]
    # pairlens reads at most config.MAX_COLUMNS (5,000) columns unless told otherwise
    widest = max(int(size.lower().split("x")[1]) for size in args.sizes.split(","))
    os.environ["PAIRLENS_MAX_COLUMNS"] = str(max(widest, int(os.environ.get("PAIRLENS_MAX_COLUMNS", "0") or 0)))
    results = []
    with tempfile.TemporaryDirectory(prefix="bench_wide_") as tmp:
        tmp = Path(tmp)
        script = tmp / "baseline.py"
        script.write_text(BASELINE)
        sizes = args.sizes.split(",")
        repeats = [int(v) for v in args.repeats.split(",")]
        repeats = repeats * len(sizes) if len(repeats) == 1 else repeats
        for size, runs in zip(sizes, repeats):
            rows, cols = (int(v) for v in size.lower().split("x"))
            src = tmp / f"wide_{rows}x{cols}.csv"
            _write_table(src, rows, cols, args.seed)
            times = {"baseline": [], "pairlens": []}
            memory = {"baseline": [], "pairlens": []}
            pairs = cols * (cols - 1) // 2
            ours = pairlens + ["pairs", str(src), "--measures", "pearson,spearman", "-o", str(tmp / "p.csv")]
            if args.top:
                ours += ["--top", str(args.top)]
            if args.pearson_test:
                ours += ["--test", f"pearson={args.pearson_test}"]
            sides = [("pairlens", ours)]
            if pairs <= args.baseline_max_pairs:
                sides.insert(0, ("baseline", [sys.executable, str(script), str(src), str(tmp / "b.csv")]))
            for _ in range(runs):
                for name, cmd in sides:
                    wall, peak = _run(cmd)
                    times[name].append(wall)
                    memory[name].append(peak)
                    print(f"{size} {name}: {wall:.1f} s, {peak:.0f} MB", file=sys.stderr, flush=True)
            with (tmp / "p.csv").open() as fh:
                lines = sum(1 for _ in fh) - 1
            assert lines == 2 * min(pairs, args.top or pairs), (lines, pairs)
            results.append((rows, cols, pairs, {k: statistics.median(v) if v else math.nan for k, v in times.items()},
                            {k: max(v) if v else math.nan for k, v in memory.items()}, runs))
    print(f"\n{time.strftime('%Y-%m-%d')}, {platform.machine()} {os.cpu_count()} cores "
          f"({platform.processor() or platform.platform()}), load average at the end "
          f"{os.getloadavg()[0]:.1f}, medians of whole-process runs (runs per size: {args.repeats})\n")
    print("| table | pairs | baseline wall | pairlens wall | ratio (baseline / pairlens) "
          "| baseline peak MB | pairlens peak MB |")
    print("|---|---|---|---|---|---|---|")
    def cell(v, fmt):
        return "not run" if not math.isfinite(v) else fmt.format(v)

    for rows, cols, pairs, med, peak, _ in results:
        print(f"| {rows} x {cols:,} | {pairs:,} | {cell(med['baseline'], '{:.1f} s')} | {med['pairlens']:.1f} s | "
              f"{cell(med['baseline'] / med['pairlens'], '{:.2f}')} | {cell(peak['baseline'], '{:.0f}')} | "
              f"{peak['pairlens']:.0f} |")
    for name in ("baseline", "pairlens"):
        points = [(r[2], r[3][name]) for r in results if math.isfinite(r[3][name])]
        if len(points) >= 2:
            slope = np.polyfit(np.log([p for p, _ in points]), np.log([t for _, t in points]), 1)[0]
            print(f"\ntime exponent in pairs, {name}: {slope:.2f}", end="")
    print(f"\noptions: top={args.top}, pearson test={args.pearson_test or 'default'}")


if __name__ == "__main__":
    main()
