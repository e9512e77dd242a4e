"""The notebook loop pairlens is measured against: pandas + scipy.stats + dcor, one pair at a time.

    python benchmarks/baseline_loop.py DATA.csv OUT.csv --measures pearson,spearman,kendall,dcor
        [--dcor-test ttest|permutation] [--permutations B] [--pairs K]

For each pair of columns: the rows where both are present (``DataFrame.dropna``),
then ``scipy.stats.pearsonr``, ``spearmanr``, ``kendalltau`` and
``dcor.distance_correlation`` with a p-value from the dcor library:
``dcor.independence.distance_correlation_t_test`` (``--dcor-test ttest``, its
fastest test; it needs no resamples) or
``dcor.independence.distance_covariance_test`` with ``--permutations`` resamples.
Writes the same long table as ``pairlens pairs`` (x, y, measure, estimate,
p_value, n) and prints one JSON line with the loop's own time (after imports and
reading) on stdout. ``--pairs K`` stops after the first K pairs (for the slow
permutation test, measured on a subset and scaled per pair and resample).
"""

from __future__ import annotations

import argparse
import json
import sys
import time

T_START = time.perf_counter()

import dcor  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import scipy.stats  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("data")
    ap.add_argument("out")
    ap.add_argument("--measures", default="pearson,spearman,kendall,dcor")
    ap.add_argument("--dcor-test", choices=("ttest", "permutation"), default="ttest")
    ap.add_argument("--permutations", type=int, default=999)
    ap.add_argument("--pairs", type=int, default=0)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    measures = [m.strip() for m in args.measures.split(",") if m.strip()]
    t_imported = time.perf_counter()
    frame = pd.read_csv(args.data)
    t_read = time.perf_counter()
    rng = np.random.default_rng(args.seed)
    names = list(frame.columns)
    out = []
    done = 0
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            if args.pairs and done >= args.pairs:
                break
            pair = frame[[names[i], names[j]]].dropna()
            x = pair[names[i]].to_numpy(dtype=float)
            y = pair[names[j]].to_numpy(dtype=float)
            for m in measures:
                if m == "pearson":
                    res = scipy.stats.pearsonr(x, y)
                    est, p = res.statistic, res.pvalue
                elif m == "spearman":
                    res = scipy.stats.spearmanr(x, y)
                    est, p = res.statistic, res.pvalue
                elif m == "kendall":
                    res = scipy.stats.kendalltau(x, y)
                    est, p = res.statistic, res.pvalue
                elif m == "dcor":
                    est = dcor.distance_correlation(x, y)
                    if args.dcor_test == "ttest":
                        p = dcor.independence.distance_correlation_t_test(x, y).pvalue
                    else:
                        p = dcor.independence.distance_covariance_test(
                            x, y, num_resamples=args.permutations, random_state=rng).pvalue
                else:
                    raise SystemExit(f"baseline has no measure {m!r}")
                out.append((names[i], names[j], m, float(est), float(p), len(x)))
            done += 1
    t_loop = time.perf_counter()
    pd.DataFrame(out, columns=["x", "y", "measure", "estimate", "p_value", "n"]).to_csv(args.out, index=False)
    t_end = time.perf_counter()
    print(json.dumps({"pairs": done, "import_s": t_imported - T_START, "read_s": t_read - t_imported,
                      "loop_s": t_loop - t_read, "write_s": t_end - t_loop}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
