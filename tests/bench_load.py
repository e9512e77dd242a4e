"""Latency of the dashboard under 20 concurrent clients while an analysis runs (a benchmark).

Run:  python tests/bench_load.py [--clients 20] [--seconds 20]

Same set-up as tests/web/test_load.py (which checks only that every answer is right): a live
``pairlens serve`` on a free loopback port, a finished 12-column analysis, and a dCor permutation
run in the background. Prints median, 95th percentile and maximum latency per kind of request.
Goal (common practice for an interactive page, not a published figure): p95 under 300 ms.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from live_server import LiveServer  # noqa: E402
from load_driver import drive, prepare  # noqa: E402

P95_GOAL_MS = 300.0


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--clients", type=int, default=20)
    parser.add_argument("--seconds", type=float, default=20.0)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        srv = LiveServer(Path(tmp) / "data")
        try:
            targets, background = prepare(srv)
            run = drive(srv, targets, background, clients=args.clients, seconds=args.seconds)
        finally:
            srv.stop()
    print(run.summary())
    p95 = float(np.percentile(run.all_ms, 95)) if run.all_ms else float("nan")
    print(f"p95 {p95:.0f} ms against a goal of {P95_GOAL_MS:.0f} ms: "
          f"{'met' if p95 < P95_GOAL_MS else 'NOT met'}; errors {len(run.errors)}")
    return 0 if not run.errors else 1


if __name__ == "__main__":
    sys.exit(main())
