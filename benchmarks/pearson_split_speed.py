"""Pearson's default p-value on skewed columns: the binned split law against the all-n split and the t-test.

30 lognormal columns x 2,000 rows (435 pairs, seeded), ``linear.pearson`` pair by pair; medians of 3
alternating runs after a warm-up. The all-n split (one Pearson curve per partner, the law before
binning) is run by raising ``PEARSON_SPLIT_GROUPS`` so that no binning happens.

    python benchmarks/pearson_split_speed.py
"""
import time

import numpy as np

from pairlens.core import linear

rng = np.random.default_rng(7)
data = rng.lognormal(size=(2000, 30))
pairs = [(i, j) for i in range(30) for j in range(i + 1, 30)]


def run(method):
    t = time.perf_counter()
    for i, j in pairs:
        linear.pearson(data[:, i], data[:, j], test=method)
    return time.perf_counter() - t


run("moments"); run("t")
res = {"moments": [], "t": []}
for _ in range(3):
    for m in res: res[m].append(run(m))
print({m: np.median(v) for m, v in res.items()}, "ratio", np.median(res["moments"]) / np.median(res["t"]))
linear.PEARSON_SPLIT_GROUPS = 10**9
old = [run("moments") for _ in range(3)]
print("all-n split:", np.median(old), "ratio to binned", np.median(old) / np.median(res["moments"]))
