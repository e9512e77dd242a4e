"""Engine benchmarks: pairlens against the notebook loop (pandas + scipy.stats + dcor), same run.

    python benchmarks/bench_engine.py                 # W1, W2, W3, 3 repeats, all cores
    python benchmarks/bench_engine.py --only W1 --repeats 5 --workers 2
    python benchmarks/bench_engine.py --only W1V --repeats 5 --workers 2   # what verdicts add to W1
    python benchmarks/bench_engine.py --quick         # small sizes, a smoke run (minutes)

Not a test: nothing here asserts a speed. It prints, per workload, medians over
``--repeats`` runs of

* whole process: ``python -m pairlens.cli pairs DATA.csv -o OUT.csv ...`` in a
  subprocess against ``python benchmarks/baseline_loop.py DATA.csv ...`` in a
  subprocess (imports, reading the CSV, the loop, writing the table), with the
  ratio baseline / ours and the peak memory of each (``ru_maxrss`` of the
  command's process tree as ``/usr/bin/time -f %M`` reports it -- the
  largest single process -- and the sampled sum of resident memory over the
  tree, which counts pages shared by forked workers more than once);
* engine only: ``run_analysis`` in this process against the baseline's own
  loop time (after its imports and reading);
* answers: our estimates against the baseline's, largest relative difference;
* W3: the scaling exponent of engine time in n (10^3 .. 10^5 rows) and in p.

The first pairlens run of a workload is reported separately: it may load (or,
after a source change, compile) the numba cache; the medians are over warm
runs. The machine is shared, so only ratios measured in the same run mean much.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
BASELINE = ROOT / "benchmarks" / "baseline_loop.py"
TIME_BIN = "/usr/bin/time"


# --- machine and processes ------------------------------------------------------------

def machine() -> dict:
    import numba
    import scipy

    model = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    try:
        import dcor
        dcor_version = dcor.__version__
    except ImportError:  # pragma: no cover
        dcor_version = "not installed"
    return {"nproc": os.cpu_count(), "cpu": model, "python": platform.python_version(),
            "numpy": np.__version__, "scipy": scipy.__version__, "numba": numba.__version__,
            "dcor": dcor_version, "loadavg": os.getloadavg()}


def _descendants(root: int) -> list[int]:
    """The process and its descendants, from /proc/<pid>/task/<tid>/children (cheap)."""
    out, todo = [], [root]
    while todo:
        pid = todo.pop()
        out.append(pid)
        try:
            for tid in os.listdir(f"/proc/{pid}/task"):
                with open(f"/proc/{pid}/task/{tid}/children") as fh:
                    todo.extend(int(c) for c in fh.read().split())
        except OSError:
            continue
    return out


def _tree_rss_kb(root: int) -> int:
    """Resident memory of a process and all its descendants (kB), from /proc."""
    total = 0
    for pid in _descendants(root):
        try:
            with open(f"/proc/{pid}/status") as fh:
                for line in fh:
                    if line.startswith("VmRSS:"):
                        total += int(line.split()[1])
                        break
        except OSError:
            continue
    return total


def run_process(cmd: list[str], *, cwd: Path = ROOT, env: dict | None = None) -> dict:
    """Wall time, exit status, stdout, ru_maxrss of the largest process and the sampled tree RSS."""
    # ru_maxrss survives fork and exec, so a child started from this (large) process
    # would report this process's peak; /usr/bin/time forks the command from a small
    # process and reports the command's own peak.
    rss_file = None
    if Path(TIME_BIN).exists():
        fd, rss_file = tempfile.mkstemp(prefix="pairlens-rss-")
        os.close(fd)
        cmd = [TIME_BIN, "-f", "%M", "-o", rss_file, *cmd]
    started = time.perf_counter()
    proc = subprocess.Popen(cmd, cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    peak = [0]
    stop = threading.Event()

    def sample():
        while not stop.is_set():
            peak[0] = max(peak[0], _tree_rss_kb(proc.pid))
            stop.wait(0.1)  # light: the sampler shares the cores with what it measures

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    out_chunks, err_chunks = [], []
    readers = [threading.Thread(target=lambda: out_chunks.append(proc.stdout.read())),
               threading.Thread(target=lambda: err_chunks.append(proc.stderr.read()))]
    for t in readers:
        t.start()
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - started
    stop.set()
    for t in readers:
        t.join()
    sampler.join()
    proc.returncode = os.waitstatus_to_exitcode(status)
    stderr = b"".join(err_chunks).decode(errors="replace")
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed ({proc.returncode}): {stderr[-2000:]}")
    maxrss_kb = usage.ru_maxrss
    if rss_file is not None:
        text = Path(rss_file).read_text().strip().splitlines()
        os.unlink(rss_file)
        maxrss_kb = int(text[-1])
    return {"seconds": seconds, "maxrss_mb": maxrss_kb / 1024.0, "tree_rss_mb": peak[0] / 1024.0,
            "stdout": b"".join(out_chunks).decode(errors="replace")}


def median(values):
    return statistics.median(values) if values else math.nan


# --- data -------------------------------------------------------------------------------

def make_table(n: int, p: int, missing: float, seed: int) -> tuple[np.ndarray, list[str]]:
    """Seeded synthetic table: pairs of related columns, rounded (tied) columns, missing cells."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, p))
    for j in range(1, p, 3):
        z[:, j] = 0.6 * z[:, j - 1] + 0.8 * z[:, j]          # linear partner
    for j in range(2, p, 6):
        z[:, j] = np.abs(z[:, j - 2]) + 0.5 * z[:, j]         # non-monotone partner
    for j in range(4, p, 5):
        z[:, j] = np.round(z[:, j] * 2)                       # heavy ties
    if missing > 0:
        z[rng.random((n, p)) < missing] = np.nan
    return z, [f"c{j:02d}" for j in range(p)]


def write_csv(path: Path, data: np.ndarray, names: list[str]) -> None:
    import pandas as pd

    pd.DataFrame(data, columns=names).to_csv(path, index=False, float_format="%.17g")


# --- runs -------------------------------------------------------------------------------

def ours_cmd(csv: Path, out: Path, measures: str, workers: int, permutations: int = 0) -> list[str]:
    cmd = [sys.executable, "-m", "pairlens.cli", "pairs", str(csv), "-o", str(out), "--measures", measures,
           "--workers", str(workers)]
    if permutations:
        cmd += ["--permutations", str(permutations)]
    return cmd


def baseline_cmd(csv: Path, out: Path, measures: str, *, test: str = "ttest", permutations: int = 999,
                 pairs: int = 0) -> list[str]:
    cmd = [sys.executable, str(BASELINE), str(csv), str(out), "--measures", measures, "--dcor-test", test,
           "--permutations", str(permutations)]
    if pairs:
        cmd += ["--pairs", str(pairs)]
    return cmd


def engine_seconds(csv: Path, measures: tuple[str, ...], workers: int, repeats: int,
                   permutations: int = 0, rows: int | None = None, columns: int | None = None,
                   verdicts: bool = False):
    """Median in-process run_analysis time (the table read once, outside the timing)."""
    from pairlens.engine import AnalysisSettings, run_analysis
    from pairlens.ingest import load_table

    table = load_table(csv)
    data, names = table.data, list(table.columns)
    if rows is not None:
        data = data[:rows]
    if columns is not None:
        data, names = data[:, :columns], names[:columns]
    settings = AnalysisSettings(measures=measures, permutations=permutations)
    run_analysis(data[:50], names, settings, workers=1)  # kernels loaded before timing
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        run_analysis(data, names, settings, workers=workers, verdicts=verdicts)
        times.append(time.perf_counter() - t)
    return median(times), times


def verdicts_add(csv: Path, measures: tuple[str, ...], workers: int, repeats: int) -> dict:
    """What the verdict labels add to the engine's time: runs without and with them, interleaved.

    Interleaving (off, on, off, on, ...) lets a change of load on the shared
    machine touch both alike; the answer is the ratio of the medians.
    """
    from pairlens.engine import AnalysisSettings, run_analysis
    from pairlens.ingest import load_table

    table = load_table(csv)
    data, names = table.data, list(table.columns)
    settings = AnalysisSettings(measures=measures)
    run_analysis(data[:50], names, settings, workers=1, verdicts=True)  # kernels loaded before timing
    off, on = [], []
    labelled = 0
    for _ in range(repeats):
        for flag, times in ((False, off), (True, on)):
            t = time.perf_counter()
            out = run_analysis(data, names, settings, workers=workers, verdicts=flag)
            times.append(time.perf_counter() - t)
            if flag:
                labelled = len(out.verdicts)
    p = len(names)
    return {"engine_without_verdicts_s": median(off), "engine_with_verdicts_s": median(on),
            "runs_without_s": off, "runs_with_s": on, "pairs": p * (p - 1) // 2, "pairs_labelled": labelled,
            "verdicts_add": median(on) / median(off) - 1.0}


def w1_verdicts(args, tmp: Path, report: dict) -> None:
    """W1's table: the engine with and without every pair's verdict label (goal: at most +25%)."""
    n, p = (2000, 20) if args.quick else (10_000, 60)
    data, names = make_table(n, p, 0.05, seed=1)
    csv = tmp / "w1v.csv"
    write_csv(csv, data, names)
    res = {"shape": [n, p], "workers": args.workers,
           **verdicts_add(csv, ("pearson", "spearman", "kendall", "dcor"), args.workers, args.repeats)}
    report["W1V"] = res
    _print("W1V", res)


def compare_answers(ours_csv: Path, base_csv: Path) -> dict:
    """Largest relative difference of estimates (and p-values where the tests are the same)."""
    import pandas as pd

    ours = pd.read_csv(ours_csv)
    base = pd.read_csv(base_csv)
    merged = base.merge(ours, on=["x", "y", "measure"], suffixes=("_base", "_ours"))
    out = {"rows_compared": int(len(merged)), "rows_baseline": int(len(base))}
    for m, grp in merged.groupby("measure"):
        a, b = grp["estimate_ours"].to_numpy(float), grp["estimate_base"].to_numpy(float)
        rel = np.abs(a - b) / np.maximum(np.abs(b), 1e-300)
        both_nan = np.isnan(a) & np.isnan(b)
        rel = np.where(both_nan, 0.0, rel)
        entry = {"max_rel_estimate": float(np.nanmax(rel)) if rel.size else math.nan,
                 "n_equal": bool((grp["n_ours"] == grp["n_base"]).all())}
        if m in ("pearson", "spearman", "kendall"):
            pa, pb = grp["p_value_ours"].to_numpy(float), grp["p_value_base"].to_numpy(float)
            ok = (pb > 1e-300) & np.isfinite(pa) & np.isfinite(pb)
            entry["max_rel_p"] = float(np.max(np.abs(pa[ok] - pb[ok]) / pb[ok])) if ok.any() else math.nan
            entry["p_compared"] = int(ok.sum())
        out[m] = entry
    return out


def w1(args, tmp: Path, report: dict) -> None:
    n, p = (2000, 20) if args.quick else (10_000, 60)
    data, names = make_table(n, p, 0.05, seed=1)
    csv = tmp / "w1.csv"
    write_csv(csv, data, names)
    measures = "pearson,spearman,kendall,dcor"
    ours_out, base_out = tmp / "w1_ours.csv", tmp / "w1_base.csv"
    first = run_process(ours_cmd(csv, ours_out, measures, args.workers))
    ours, base, base_loop = [], [], []
    for _ in range(args.repeats):
        ours.append(run_process(ours_cmd(csv, ours_out, measures, args.workers)))
        b = run_process(baseline_cmd(csv, base_out, measures))
        base.append(b)
        base_loop.append(json.loads(b["stdout"].strip().splitlines()[-1])["loop_s"])
    eng, eng_all = engine_seconds(csv, tuple(measures.split(",")), args.workers, args.repeats)
    eng1, _ = engine_seconds(csv, tuple(measures.split(",")), 1, max(1, args.repeats // 2 + 1))
    pairs = p * (p - 1) // 2
    res = {
        "shape": [n, p], "missing": 0.05, "pairs": pairs, "measures": measures,
        "baseline_dcor_test": "dcor.independence.distance_correlation_t_test (no resamples)",
        "ours_first_run_s": first["seconds"],
        "ours_whole_s": median([r["seconds"] for r in ours]),
        "ours_whole_runs_s": [r["seconds"] for r in ours],
        "baseline_whole_s": median([r["seconds"] for r in base]),
        "baseline_whole_runs_s": [r["seconds"] for r in base],
        "ours_maxrss_mb": max(r["maxrss_mb"] for r in ours),
        "ours_tree_rss_mb": max(r["tree_rss_mb"] for r in ours),
        "baseline_maxrss_mb": max(r["maxrss_mb"] for r in base),
        "ours_engine_s": eng, "ours_engine_runs_s": eng_all, "ours_engine_serial_s": eng1,
        "baseline_loop_s": median(base_loop), "baseline_loop_runs_s": base_loop,
        "answers": compare_answers(ours_out, base_out),
    }
    res["ratio_whole"] = res["baseline_whole_s"] / res["ours_whole_s"]
    res["ratio_engine"] = res["baseline_loop_s"] / res["ours_engine_s"]
    res["ratio_engine_serial"] = res["baseline_loop_s"] / res["ours_engine_serial_s"]
    report["W1"] = res
    _print("W1", res)


def w2(args, tmp: Path, report: dict) -> None:
    n, p = (500, 6) if args.quick else (2000, 12)
    b = 199 if args.quick else 999
    data, names = make_table(n, p, 0.0, seed=2)
    csv = tmp / "w2.csv"
    write_csv(csv, data, names)
    ours_out, base_out = tmp / "w2_ours.csv", tmp / "w2_base.csv"
    subset = 1 if args.quick else args.w2_pairs
    first = run_process(ours_cmd(csv, ours_out, "dcor", args.workers, b))
    ours, base_loop = [], []
    for _ in range(args.repeats):
        ours.append(run_process(ours_cmd(csv, ours_out, "dcor", args.workers, b)))
    for _ in range(max(1, args.w2_repeats)):
        r = run_process(baseline_cmd(csv, base_out, "dcor", test="permutation", permutations=b, pairs=subset))
        base_loop.append(json.loads(r["stdout"].strip().splitlines()[-1])["loop_s"])
    eng, eng_all = engine_seconds(csv, ("dcor",), args.workers, args.repeats, permutations=b)
    pairs = p * (p - 1) // 2
    per_base = median(base_loop) / (subset * b)
    res = {
        "shape": [n, p], "pairs": pairs, "permutations": b,
        "baseline": f"dcor.independence.distance_covariance_test, {b} resamples, on the first {subset} "
                    f"pair(s), scaled per pair and resample",
        "ours_first_run_s": first["seconds"],
        "ours_whole_s": median([r["seconds"] for r in ours]),
        "ours_whole_runs_s": [r["seconds"] for r in ours],
        "ours_engine_s": eng, "ours_engine_runs_s": eng_all,
        "baseline_loop_s": median(base_loop), "baseline_loop_runs_s": base_loop,
        "baseline_us_per_pair_resample": per_base * 1e6,
        "ours_engine_us_per_pair_resample": eng / (pairs * b) * 1e6,
        "ours_whole_us_per_pair_resample": median([r["seconds"] for r in ours]) / (pairs * b) * 1e6,
        "answers": compare_answers(ours_out, base_out),
    }
    res["ratio_engine_per_pair_resample"] = res["baseline_us_per_pair_resample"] / res["ours_engine_us_per_pair_resample"]
    res["ratio_whole_per_pair_resample"] = res["baseline_us_per_pair_resample"] / res["ours_whole_us_per_pair_resample"]
    report["W2"] = res
    _print("W2", res)


def _slope(xs, ys) -> float:
    lx, ly = np.log(np.asarray(xs, float)), np.log(np.asarray(ys, float))
    return float(np.polyfit(lx, ly, 1)[0])


def w3(args, tmp: Path, report: dict) -> None:
    n, p = (20_000, 8) if args.quick else (100_000, 20)
    data, names = make_table(n, p, 0.0, seed=3)
    csv = tmp / "w3.csv"
    write_csv(csv, data, names)
    measures = "dcor,kendall"
    ours_out, base_out = tmp / "w3_ours.csv", tmp / "w3_base.csv"
    first = run_process(ours_cmd(csv, ours_out, measures, args.workers))
    ours = [run_process(ours_cmd(csv, ours_out, measures, args.workers)) for _ in range(args.repeats)]
    subset = 2 if args.quick else args.w3_pairs
    base = run_process(baseline_cmd(csv, base_out, measures, pairs=subset))
    base_loop = json.loads(base["stdout"].strip().splitlines()[-1])["loop_s"]
    sizes = [1_000, 3_000, 10_000, 30_000, 100_000] if not args.quick else [1_000, 3_000, 10_000, 20_000]
    by_n = {}
    for rows in sizes:
        reps = args.repeats if rows >= 30_000 else 3 * args.repeats
        by_n[rows] = engine_seconds(csv, tuple(measures.split(",")), 1, reps, rows=rows)[0]
    widths = [5, 10, 20] if not args.quick else [4, 8]
    by_p = {}
    for cols in widths:
        by_p[cols] = engine_seconds(csv, tuple(measures.split(",")), 1, args.repeats, rows=10_000,
                                    columns=cols)[0]
    pairs = p * (p - 1) // 2
    big = [k for k in sizes if k >= 10_000]
    res = {
        "shape": [n, p], "pairs": pairs, "measures": measures,
        "ours_first_run_s": first["seconds"],
        "ours_whole_s": median([r["seconds"] for r in ours]),
        "ours_whole_runs_s": [r["seconds"] for r in ours],
        "ours_maxrss_mb": max(r["maxrss_mb"] for r in ours),
        "ours_tree_rss_mb": max(r["tree_rss_mb"] for r in ours),
        "baseline": f"kendalltau + distance_correlation + distance_correlation_t_test on the first {subset} "
                    f"pairs, scaled to all {pairs}",
        "baseline_loop_scaled_s": base_loop / subset * pairs,
        "baseline_maxrss_mb": base["maxrss_mb"],
        "engine_serial_s_by_n": by_n, "engine_serial_s_by_p_at_n10000": by_p,
        "exponent_n_all": _slope(list(by_n), list(by_n.values())),
        "exponent_n_1e4_to_max": _slope(big, [by_n[k] for k in big]),
        "exponent_p": _slope(list(by_p), list(by_p.values())),
        "answers": compare_answers(ours_out, base_out),
    }
    res["ratio_whole_vs_scaled_baseline_loop"] = res["baseline_loop_scaled_s"] / res["ours_whole_s"]
    report["W3"] = res
    _print("W3", res)


def w4(args, tmp: Path, report: dict) -> None:
    """Long tables: 10 columns, 10^4 .. 10^6 rows, default measures; exponent in n and ratio per size."""
    from pairlens import config
    from pairlens.engine import AnalysisSettings, run_analysis

    sizes = [10_000, 30_000, 100_000] if args.quick else [10_000, 100_000, 300_000, 1_000_000]
    p = 10
    measures = ",".join(config.DEFAULT_MEASURES)
    settings = AnalysisSettings(measures=config.DEFAULT_MEASURES)
    pairs = p * (p - 1) // 2
    full, names = make_table(max(sizes), p, 0.0, seed=4)
    run_analysis(full[:50], names, settings, workers=1)  # kernels loaded before timing
    res: dict = {"columns": p, "pairs": pairs, "measures": measures, "workers": args.workers,
                 "baseline": f"pandas + scipy.stats + dcor loop (baseline_loop.py) on the first {args.w4_pairs} "
                             f"pairs, scaled to all {pairs}"}
    engine, serial, baseline = {}, {}, {}
    for rows in sizes:
        data = full[:rows]
        times, times1 = [], []
        for _ in range(args.repeats):
            t = time.perf_counter()
            run_analysis(data, names, settings, workers=args.workers)
            times.append(time.perf_counter() - t)
            # one worker runs in this process: its CPU time is what a busy shared machine perturbs least
            t = time.process_time()
            run_analysis(data, names, settings, workers=1)
            times1.append(time.process_time() - t)
        engine[rows], serial[rows] = median(times), median(times1)
        csv, out = tmp / f"w4_{rows}.csv", tmp / f"w4_{rows}_base.csv"
        write_csv(csv, data, names)
        loops = []
        for _ in range(max(1, args.w4_baseline_repeats)):
            b = run_process(baseline_cmd(csv, out, measures, pairs=args.w4_pairs))
            loops.append(json.loads(b["stdout"].strip().splitlines()[-1])["loop_s"] / args.w4_pairs * pairs)
        baseline[rows] = median(loops)
        csv.unlink()
        res[f"n={rows}"] = {"engine_s": engine[rows], "engine_runs_s": times, "engine_serial_cpu_s": serial[rows],
                            "baseline_loop_scaled_s": baseline[rows],
                            "ratio_engine": baseline[rows] / engine[rows],
                            "ratio_engine_serial_cpu": baseline[rows] / serial[rows]}
        _print(f"W4 n={rows}", res[f"n={rows}"])
    big = [k for k in sizes if k >= 100_000]
    res["exponent_n_all"] = _slope(sizes, [engine[k] for k in sizes])
    res["exponent_n_1e5_to_max"] = _slope(big, [engine[k] for k in big])
    res["exponent_n_serial_cpu_all"] = _slope(sizes, [serial[k] for k in sizes])
    res["exponent_n_serial_cpu_1e5_to_max"] = _slope(big, [serial[k] for k in big])
    res["exponent_n_log_n_reference"] = _slope(big, [k * math.log(k) for k in big])
    report["W4"] = res
    _print("W4", {k: v for k, v in res.items() if not k.startswith("n=")})


def startup(args, report: dict) -> None:
    """Import cost of the pair-table command and of the baseline's libraries."""
    code_ours = ("import time; t=time.perf_counter(); import pairlens.cli, pairlens.ingest, pairlens.engine, pairlens.export; "
                 "import sys; print(time.perf_counter()-t, 'scipy.stats' in sys.modules, 'numba' in sys.modules)")
    code_base = ("import time; t=time.perf_counter(); import pandas, scipy.stats, dcor; "
                 "print(time.perf_counter()-t)")
    ours = [run_process([sys.executable, "-c", code_ours])["stdout"].split() for _ in range(args.repeats)]
    base = [run_process([sys.executable, "-c", code_base])["stdout"].split() for _ in range(args.repeats)]
    res = {"ours_import_s": median([float(o[0]) for o in ours]), "ours_loads_scipy_stats": ours[0][1],
           "baseline_import_s": median([float(b[0]) for b in base])}
    report["startup"] = res
    _print("startup", res)


def compile_sources() -> str:
    """Write the package's .pyc files once, before anything is timed.

    The baseline's libraries (pandas, scipy, dcor) were compiled to bytecode
    when pip installed them; an editable checkout of pairlens is compiled on
    first import, unless PYTHONDONTWRITEBYTECODE is set (as on the development
    machine), in which case every timed run would recompile our sources. This
    puts both sides on the footing of an installed package.
    """
    import compileall

    ok = compileall.compile_dir(str(ROOT / "app"), quiet=1)
    return ("compiled app/ to .pyc before timing" + ("" if ok else " (some files failed)")
            + (" (PYTHONDONTWRITEBYTECODE is set here)" if os.environ.get("PYTHONDONTWRITEBYTECODE") else ""))


def _print(name: str, res: dict) -> None:
    print(f"\n== {name}", flush=True)
    for k, v in res.items():
        if isinstance(v, float):
            v = f"{v:.4g}"
        print(f"  {k}: {v}", flush=True)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    ap.add_argument("--only", default="startup,W1,W1V,W2,W3",
                    help="any of startup,W1,W1V,W2,W3,W4 (W1V: what verdicts add to W1; W4: long tables)")
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--w2-pairs", type=int, default=1, help="baseline permutation test: pairs measured")
    ap.add_argument("--w2-repeats", type=int, default=1)
    ap.add_argument("--w3-pairs", type=int, default=3)
    ap.add_argument("--w4-pairs", type=int, default=3, help="long tables: baseline pairs measured per size")
    ap.add_argument("--w4-baseline-repeats", type=int, default=1)
    ap.add_argument("--json", default=None, help="also write the results here")
    args = ap.parse_args(argv)
    report = {"machine": machine(), "command": " ".join([Path(sys.executable).name, *sys.argv]),
              "started_utc": time.strftime("%Y-%m-%d %H:%M:%S", time.gmtime())}
    _print("machine", report["machine"])
    report["bytecode"] = compile_sources()
    only = {w.strip() for w in args.only.split(",")}
    with tempfile.TemporaryDirectory(prefix="pairlens-bench-") as d:
        tmp = Path(d)
        if "startup" in only:
            startup(args, report)
        for name, fn in (("W1", w1), ("W1V", w1_verdicts), ("W2", w2), ("W3", w3), ("W4", w4)):
            if name in only:
                fn(args, tmp, report)
    report["machine"]["loadavg_end"] = os.getloadavg()
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=1, default=str))
    return 0


if __name__ == "__main__":
    sys.exit(main())
