"""Save and compare pair tables: a restructure must leave every number bit-identical.

    python benchmarks/pair_tables.py save DIR [--w3-size full|quick]
    python benchmarks/pair_tables.py compare DIR_BEFORE DIR_AFTER

``save`` writes one JSON file per workload: the demo (the invented vineyard
table, default measures and every measure, pairwise and complete-case), W1, W2
and W3 (the generators of benchmarks/bench_engine.py at the sizes given
there), each row with its floats as ``float.hex`` so the comparison is exact.
For the demo it also saves each pair's verdict label from ``pair_detail``.
``compare`` reports any difference and exits 1 when there is one.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))

FIELDS = ("x", "y", "measure", "estimate", "ci_low", "ci_high", "p_value", "q_value", "n", "note", "method")


def _exact(v):
    if isinstance(v, float):
        return "nan" if math.isnan(v) else float.hex(v)
    return v


def _records(table) -> list[list]:
    return [[_exact(getattr(r, f)) for f in FIELDS] for r in table.rows]


def _workloads(w3_size: str):
    import numpy as np

    from bench_engine import make_table
    from pairlens.ingest import load_table
    from pairlens.library import demo_path

    demo = load_table(demo_path())
    every = "pearson,spearman,kendall,dcor,dcor_bc,xi"
    yield "demo_default", demo.data, list(demo.columns), {}
    yield "demo_all", demo.data, list(demo.columns), {"measures": every}
    yield "demo_all_complete", demo.data, list(demo.columns), {"measures": every, "missing": "complete"}
    data, names = make_table(10_000, 60, 0.05, seed=1)
    yield "W1", data, names, {"measures": "pearson,spearman,kendall,dcor"}
    data, names = make_table(2000, 12, 0.0, seed=2)
    yield "W2", data, names, {"measures": "dcor", "permutations": 999}
    n, p = (100_000, 20) if w3_size == "full" else (20_000, 8)
    data, names = make_table(n, p, 0.0, seed=3)
    yield f"W3_{w3_size}", data, names, {"measures": "dcor,kendall"}
    # a table with missing values under complete-case deletion (the --missing complete path)
    data, names = make_table(300, 8, 0.08, seed=5)
    yield "missing_complete", data, names, {"measures": every, "missing": "complete"}
    del np


def save(out: Path, w3_size: str, only: list[str] | None) -> None:
    from pairlens.engine import AnalysisSettings, run_analysis
    try:
        from pairlens.pairs import pair_detail
    except ImportError:  # the layout before the pair-detail service
        from pairlens.engine import pair_detail

    out.mkdir(parents=True, exist_ok=True)
    for name, data, names, opts in _workloads(w3_size):
        if only and name not in only:
            continue
        settings = AnalysisSettings.from_options(**opts)
        t = time.perf_counter()
        table = run_analysis(data, names, settings, workers=2)
        payload = {"name": name, "options": opts, "shape": list(data.shape), "rows": _records(table)}
        if name.startswith("demo") or name == "missing_complete":
            verdicts = {}
            for i, x in enumerate(table.variables):
                for y in table.variables[i + 1:]:
                    d = pair_detail(data, names, x, y, settings, table=table)
                    verdicts[f"{x}|{y}"] = [d["pattern"]["label"], d["n"]]
            payload["verdicts"] = verdicts
        (out / f"{name}.json").write_text(json.dumps(payload))
        print(f"{name}: {len(table.rows)} rows, {time.perf_counter() - t:.1f} s", flush=True)


def compare(a: Path, b: Path) -> int:
    bad = 0
    for fa in sorted(a.glob("*.json")):
        fb = b / fa.name
        if not fb.exists():
            print(f"{fa.stem}: missing in {b}")
            bad += 1
            continue
        da, db = json.loads(fa.read_text()), json.loads(fb.read_text())
        same_rows = da["rows"] == db["rows"]
        diffs = [(ra, rb) for ra, rb in zip(da["rows"], db["rows"]) if ra != rb]
        line = f"{fa.stem}: {len(da['rows'])} rows, " + ("bit-identical" if same_rows else
                                                         f"{len(diffs)} rows differ, e.g. {diffs[:2]}")
        if "verdicts" in da:
            va, vb = da["verdicts"], db.get("verdicts", {})
            changed = {k: (va[k], vb.get(k)) for k in va if va[k] != vb.get(k)}
            line += f"; verdicts {len(va) - len(changed)}/{len(va)} equal"
            if changed:
                line += f", changed: {list(changed.items())[:3]}"
                bad += 1
        if not same_rows:
            bad += 1
        print(line)
    return 1 if bad else 0


def main() -> int:
    ap = argparse.ArgumentParser()
    sub = ap.add_subparsers(dest="cmd", required=True)
    s = sub.add_parser("save")
    s.add_argument("out", type=Path)
    s.add_argument("--w3-size", choices=("full", "quick"), default="full")
    s.add_argument("--only", nargs="*")
    c = sub.add_parser("compare")
    c.add_argument("before", type=Path)
    c.add_argument("after", type=Path)
    args = ap.parse_args()
    if args.cmd == "save":
        save(args.out, args.w3_size, args.only)
        return 0
    return compare(args.before, args.after)


if __name__ == "__main__":
    raise SystemExit(main())
