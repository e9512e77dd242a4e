"""Pearson's default p-value against scipy.stats.permutation_test (B = 99,999) on the 50 real skewed pairs.

The pairs and the reference are those of tests/core/test_levels_pearson.py (which uses B = 9,999 in CI);
prints one row per pair (permutation p, ours, z in Monte Carlo standard errors) and the count outside
4 standard errors (or 10% relative where p < 1e-3). Takes several minutes.

    python benchmarks/pearson_real_tables.py
"""

from __future__ import annotations

import pathlib
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1] / "tests"))

import test_levels_pearson as levels  # noqa: E402


def main() -> None:
    levels.B = 99_999
    levels._AGREEMENT.clear()
    rows = levels._agreement()
    outside = 0
    for tname, a, b, n, ref, ours, se, lumpy in rows:
        ok = abs(ours - ref) <= 4 * se or (ref < 1e-3 and abs(ours - ref) <= 0.1 * ref)
        outside += not ok
        print(f"{tname} | {a} | {b} | {n} | {ref:.5f} | {ours:.5f} | {(ours - ref) / se:+.2f}"
              + (" | point mass > 50%" if lumpy else "") + ("" if ok else " | OUTSIDE"))
    print("pairs", len(rows), "outside", outside)


if __name__ == "__main__":
    main()
