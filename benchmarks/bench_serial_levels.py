"""Level table of the tests for rows in time order (--ordered), and their power on related series.

Independent pairs of AR(1) series x_t = phi x_{t-1} + e_t (stationary start, standard normal
innovations) for phi in 0, 0.5, 0.9 and n in 100, 500; each measure's test under --ordered
(the registry's ``serial`` entry on top of its default test); the share rejected at 0.05 and
0.01 beside the binomial 99% interval for the replicate count. Power: the same series with
y = 0.4 x + AR(1) noise of the same coefficient (a truly related pair).

Command (never in CI; about 20 minutes on 2 cores at the defaults):

    python benchmarks/bench_serial_levels.py --pairs 2000 --block-pairs 500 --permutations 199

``--block-pairs`` and ``--permutations`` size the block permutation tests (dcor, xi), which
cost B relabellings of an n x n matrix per pair. Prints a Markdown table.
"""

from __future__ import annotations

import argparse
import math
import sys

import numpy as np
from scipy import signal, stats

from pairlens.core.registry import MEASURES, PairContext


def ar1(rng: np.random.Generator, phi: float, shape: tuple[int, ...], n: int) -> np.ndarray:
    """Stationary AR(1) series along the last axis, all generated at once (lfilter over the rows)."""
    e = rng.normal(size=shape + (n,))
    e[..., 0] /= np.sqrt(1.0 - phi * phi)  # stationary start
    return signal.lfilter([1.0], [1.0, -phi], e, axis=-1)


def rejections(measure: str, x: np.ndarray, y: np.ndarray, permutations: int, seed: int,
               save: str = "") -> np.ndarray:
    """p-values of ``measure`` under --ordered for each row pair (x[k], y[k]); with ``save``, the
    p-values so far (NaN for pairs not yet run) are written to that .npy file every 25 pairs, so a
    long cell stopped early still gives its finished pairs."""
    m = MEASURES[measure]
    out = np.full(x.shape[0], np.nan)
    seeds = np.random.SeedSequence(seed).spawn(x.shape[0])
    for k in range(x.shape[0]):
        ctx = PairContext(permutations=permutations, seed=seeds[k])
        base = m.compute(x[k], y[k], ctx if m.default_test != "gamma" else PairContext())
        out[k] = m.serial(x[k], y[k], ctx, base).p_value
        if save and (k % 25 == 24 or k == x.shape[0] - 1):
            np.save(save, out)
    return out


def attainable(level: float, permutations: int) -> float:
    """The level of "p < level" for a permutation p-value (1 + count)/(B + 1) of a continuous statistic."""
    return (math.ceil(level * (permutations + 1) - 1e-9) - 1) / (permutations + 1)


def binomial_interval(count: int, level: float, confidence: float = 0.99) -> tuple[float, float]:
    """Central binomial interval of the share of rejections of a test that holds its level."""
    lo = stats.binom.ppf((1 - confidence) / 2, count, level) / count
    hi = stats.binom.ppf((1 + confidence) / 2, count, level) / count
    return float(lo), float(hi)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pairs", type=int, default=2000, help="independent pairs per cell (correlations)")
    ap.add_argument("--block-pairs", type=int, default=500, help="independent pairs per cell (dcor, xi)")
    ap.add_argument("--permutations", type=int, default=199, help="block relabellings per pair")
    ap.add_argument("--measures", default="pearson,spearman,kendall,dcor,xi")
    ap.add_argument("--n", default="100,500")
    ap.add_argument("--phi", default="0,0.5,0.9")
    ap.add_argument("--seed", type=int, default=20261202)
    ap.add_argument("--power-pairs", type=int, default=200, help="related pairs per cell for the power column")
    ap.add_argument("--save", default="", help="directory: each cell's p-values as .npy, written as they come")
    ap.add_argument("--power-only", action="store_true",
                    help="only the power column (the level cells of a long run stopped early, --save, lack it)")
    a = ap.parse_args(argv)
    rng = np.random.default_rng(a.seed)
    print("| measure | phi | n | pairs | rejected at 0.05 | 99% interval | rejected at 0.01 | 99% interval "
          "| power at 0.05 (y = 0.4x + noise) |")
    print("|---|---|---|---|---|---|---|---|---|")
    for measure in a.measures.split(","):
        block = MEASURES[measure].serial_resamples
        pairs = a.block_pairs if block else a.pairs
        for n in (int(v) for v in a.n.split(",")):
            for phi in (float(v) for v in a.phi.split(",")):
                x, y = ar1(rng, phi, (2, pairs), n)
                stem = f"{a.save}/{measure}_n{n}_phi{phi:g}" if a.save else ""
                p = (np.full(pairs, np.nan) if a.power_only else
                     rejections(measure, x, y, a.permutations, a.seed, stem + "_null.npy" if stem else ""))
                power_pairs = min(pairs, a.power_pairs)
                related = 0.4 * x[:power_pairs] + ar1(rng, phi, (power_pairs,), n)
                power = rejections(measure, x[:power_pairs], related, a.permutations, a.seed + 1,
                                   stem + "_power.npy" if stem else "")
                r05, r01 = (np.nan, np.nan) if a.power_only else (np.mean(p < 0.05), np.mean(p < 0.01))
                # a block p-value is a multiple of 1/(B+1): "p < alpha" then has the attainable level
                # (ceil(alpha (B+1)) - 1)/(B+1), 0.045 and 0.005 at B = 199, and the interval is about it
                at05, at01 = ((attainable(0.05, a.permutations), attainable(0.01, a.permutations)) if block
                              else (0.05, 0.01))
                i05, i01 = binomial_interval(pairs, at05), binomial_interval(pairs, at01)
                print(f"| {measure} | {phi:g} | {n} | {pairs} | {r05:.3f} | {i05[0]:.3f}-{i05[1]:.3f} | "
                      f"{r01:.3f} | {i01[0]:.3f}-{i01[1]:.3f} | {np.mean(power < 0.05):.2f} |", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
