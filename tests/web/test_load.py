"""20 concurrent clients for 20 s on the pair table, the pair view and the analysis page, while an analysis runs.

A behaviour test, not a timed one: every request is answered with 200 and with the same answer a
single client got before the load, and the background analysis (a dCor permutation run) keeps
running throughout. Latencies are printed for the record; their goals live in the load benchmark
(`python tests/bench_load.py`), because a latency threshold fails on a busy machine.
"""

from __future__ import annotations

import pytest

from live_server import LiveServer
from load_driver import drive, prepare

CLIENTS = 20
SECONDS = 20.0


@pytest.mark.slow
def test_20_clients_get_correct_answers_while_an_analysis_runs(tmp_path):
    srv = LiveServer(tmp_path / "data")
    try:
        targets, background = prepare(srv)
        run = drive(srv, targets, background, clients=CLIENTS, seconds=SECONDS)
        print("\n" + run.summary())
        assert not run.errors, run.errors[:5]
        assert run.background_status["status"] == "running", "the background analysis must run throughout"
        # every client got answers, and every kind of request was served
        assert all(run.timings[t.name] for t in targets)
        assert len(run.all_ms) >= CLIENTS
    finally:
        srv.stop()
