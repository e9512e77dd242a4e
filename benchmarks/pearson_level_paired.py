"""Pearson's default test and a Monte Carlo permutation test on the same simulated pairs.

A cell of the level table (tests/core/test_levels_pearson.py) counts rejections of one set of
10,000 draws; a count outside the binomial interval can come from the draws themselves. This
script runs, on the very draws of a cell (same seed), the permutation test with B random
relabellings per pair, (1 + #{|S_b| >= |S|}) / (B + 1), whose level is exact whatever the
margins, and prints both rejection counts and the pairs on which the two disagree.

    python benchmarks/pearson_level_paired.py exponential exponential 10 --resamples 10000
    python benchmarks/pearson_level_paired.py exponential scores 200 --resamples 4000

Not a test: nothing is asserted; it takes seconds (n = 10) to minutes (n = 200).
"""

from __future__ import annotations

import argparse
import pathlib
import sys

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1] / "tests"))

import test_levels_pearson as levels  # noqa: E402  (the level table's margins and seeds)

from pairlens.core import linear  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("x", choices=list(levels.MARGINS))
    parser.add_argument("y", choices=list(levels.MARGINS))
    parser.add_argument("n", type=int)
    parser.add_argument("--resamples", type=int, default=10_000)
    parser.add_argument("--seed", type=int, default=5)
    args = parser.parse_args()
    x, y = levels._draw(args.x, args.y, args.n, levels.REPS)
    ours = linear.moment_pvalue(x, y)
    xc, yc = x - x.mean(1, keepdims=True), y - y.mean(1, keepdims=True)
    s = np.abs((xc * yc).sum(1))
    rng = np.random.default_rng(args.seed)
    hits = np.zeros(levels.REPS)
    batch = 500
    for _ in range(-(-args.resamples // batch)):
        order = np.argsort(rng.random((batch, args.n)), axis=1)
        sb = np.abs(np.einsum("ri,rpi->rp", xc, yc[:, order]))
        hits += (sb >= s[:, None] * (1 - 1e-12)).sum(1)
    b = -(-args.resamples // batch) * batch
    perm = (hits + 1) / (b + 1)
    for alpha in levels.ALPHAS:
        lo, hi = levels._bounds(alpha, 0.99)
        print(f"{args.x} x {args.y}, n = {args.n}, alpha {alpha}: default {int((ours <= alpha).sum())}, "
              f"permutation (B = {b}) {int((perm <= alpha).sum())} of {levels.REPS}; 99% interval {lo}-{hi}; "
              f"default only {int(((ours <= alpha) & (perm > alpha)).sum())}, "
              f"permutation only {int(((ours > alpha) & (perm <= alpha)).sum())}")


if __name__ == "__main__":
    main()
