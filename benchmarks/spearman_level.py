"""Level of Spearman's approximate p-values against the permutation law (not a test).

    python benchmarks/spearman_level.py                 # n = 10 .. 400, 2e6 permutations each
    python benchmarks/spearman_level.py --draws 200000 --n 13 20 50   # a quick look

For each n it draws random permutations of untied ranks (the null law of rho:
every pairing equally likely), or counts all of them exactly where
pairlens.core.rank can (n <= 14), and prints the actual rejection rate of the t
approximation (n-2 df, scipy.stats.spearmanr's p-value) and of the Edgeworth
series (AS 89) at alpha = 0.05, 0.01, 0.005, 0.001 as a ratio to alpha: above 1
the approximation rejects more often than it claims. The handover n
(pairlens.config.SPEARMAN_T_MIN_N) was chosen from this table (README, "p-values").
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numba
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from pairlens.core import linear, rank  # noqa: E402

ALPHAS = (0.05, 0.01, 0.005, 0.001)


@numba.njit(cache=True)
def _draw_s(n, draws, seed):
    np.random.seed(seed)
    perm = np.arange(n)
    out = np.empty(draws, np.int64)
    for b in range(draws):
        for i in range(n - 1, 0, -1):
            j = np.random.randint(0, i + 1)
            perm[i], perm[j] = perm[j], perm[i]
        s = 0
        for i in range(n):
            d = i - perm[i]
            s += d * d
        out[b] = s
    return out


def _law(n: int, draws: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    if n <= 14:
        s, c = rank.spearman_null_counts(n)
        return s, c / c.sum()
    s, c = np.unique(_draw_s(n, draws, seed), return_counts=True)
    return s, c / draws


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="*", default=[10, 12, 14, 20, 30, 50, 75, 100, 150, 200, 400])
    ap.add_argument("--draws", type=int, default=2_000_000)
    ap.add_argument("--seed", type=int, default=20261202)
    args = ap.parse_args(argv)
    print("n, law, then per alpha: size(t)/alpha  size(Edgeworth)/alpha")
    for n in args.n:
        s, prob = _law(n, args.draws, args.seed + n)
        rho = 1.0 - 6.0 * s / (n ** 3 - n)
        p_t = np.array([linear.correlation_t_pvalue(float(r), n) for r in rho])
        p_e = np.array([rank.spearman_edgeworth_pvalue(n, int(v)) for v in s])
        cells = []
        for a in ALPHAS:
            cells.append(f"a={a}: t {prob[p_t <= a].sum() / a:5.2f}  E {prob[p_e <= a].sum() / a:5.2f}")
        print(f"n={n:4d} ({'exact' if n <= 14 else 'MC'})  " + " | ".join(cells), flush=True)


if __name__ == "__main__":
    main()
