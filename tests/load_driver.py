"""Concurrent clients against a live server: shared by the load test and the load benchmark.

Each client is a thread with its own httpx connection sending requests back to back (no think
time), cycling through a list of targets. Every answer is checked against a reference taken
before the clients start, so the test can ask "all answers correct" and the benchmark can report
latencies from the same run.
"""

from __future__ import annotations

import io
import statistics
import threading
import time
from dataclasses import dataclass, field
from typing import Callable

import httpx
import numpy as np

from live_server import READ_SECONDS, LiveServer, wait_for_analysis


def table_csv(n: int, k: int, seed: int) -> bytes:
    rng = np.random.default_rng(seed)
    data = rng.normal(size=(n, k))
    for j in range(1, k, 2):
        data[:, j] += 0.6 * data[:, j - 1] ** (1 + j % 3)
    buf = io.StringIO()
    buf.write(",".join(f"m{j:02d}" for j in range(k)) + "\n")
    for row in data:
        buf.write(",".join(f"{v:.5g}" for v in row) + "\n")
    return buf.getvalue().encode()


@dataclass
class Target:
    name: str
    path: str
    params: dict | None
    check: Callable[[httpx.Response], bool]


@dataclass
class LoadRun:
    clients: int
    seconds: float
    timings: dict[str, list[float]] = field(default_factory=dict)
    errors: list[str] = field(default_factory=list)
    background_status: dict = field(default_factory=dict)

    @property
    def all_ms(self) -> list[float]:
        return [1000 * v for values in self.timings.values() for v in values]

    def summary(self) -> str:
        lines = [f"{len(self.all_ms)} requests from {self.clients} clients in {self.seconds:.0f} s "
                 f"({len(self.all_ms) / self.seconds:.0f}/s); background analysis "
                 f"{self.background_status.get('status')} at "
                 f"{100 * self.background_status.get('progress', 0):.0f}%"]
        for name, values in self.timings.items():
            if values:
                ms = [1000 * v for v in values]
                lines.append(f"  {name:14} n={len(ms):5d}  median {statistics.median(ms):6.1f} ms  "
                             f"p95 {float(np.percentile(ms, 95)):6.1f} ms  max {max(ms):6.1f} ms")
        if self.all_ms:
            lines.append(f"  all            p95 {float(np.percentile(self.all_ms, 95)):.1f} ms; "
                         f"errors {len(self.errors)}")
        return "\n".join(lines)


def prepare(srv: LiveServer, wait_timeout: float = 180.0) -> tuple[list[Target], str]:
    """A finished 12-column analysis to read and a long dCor permutation run in the background.

    Returns the targets (each with a check against the answer taken before the load starts)
    and the id of the background analysis.
    """
    with httpx.Client(base_url=srv.base, timeout=60) as c:
        ds = c.post("/api/datasets", files={"file": ("load.csv", table_csv(1000, 12, 1), "text/csv")}).json()
        aid = c.post(f"/api/datasets/{ds['id']}/analyses",
                     json={"measures": ["pearson", "spearman", "kendall", "dcor"]}).json()["id"]
        assert wait_for_analysis(c, aid, timeout=wait_timeout)["status"] == "done"
        columns = ds["numeric_columns"]
        pairs = [(columns[i], columns[i + 1]) for i in range(0, 8, 2)] + [(columns[0], columns[5])]
        slow = c.post("/api/datasets", files={"file": ("slow.csv", table_csv(3000, 6, 2), "text/csv")}).json()
        background = c.post(f"/api/datasets/{slow['id']}/analyses",
                            json={"measures": ["dcor"], "permutations": 50000}).json()["id"]
        wait_for_analysis(c, background, lambda s: s["status"] == "running", timeout=wait_timeout)

        # One pass before the load: fills every cache a user's first visit fills, and gives the
        # reference answers the clients' answers must equal.
        table = c.get(f"/api/analyses/{aid}/pairs")
        assert table.status_code == 200 and table.json(), "the finished analysis has a pair table"
        targets = [
            Target("analysis page", f"/analyses/{aid}", None,
                   lambda r: all(f'data-testid="heatmap-{m}"' in r.text
                                 for m in ("pearson", "spearman", "kendall", "dcor"))),
            Target("pair table", f"/api/analyses/{aid}/pairs", None, lambda r, t=table.content: r.content == t),
        ]
        for x, y in pairs:
            page = c.get(f"/analyses/{aid}/pair", params={"x": x, "y": y})
            detail = c.get(f"/api/analyses/{aid}/pair", params={"x": x, "y": y})
            assert page.status_code == 200 and detail.status_code == 200
            reference = detail.content
            targets.append(Target("pair page", f"/analyses/{aid}/pair", {"x": x, "y": y},
                                  lambda r, x=x, y=y: x in r.text and y in r.text))
            targets.append(Target("pair json", f"/api/analyses/{aid}/pair", {"x": x, "y": y},
                                  lambda r, ref=reference: r.content == ref))
    return targets, background


def drive(srv: LiveServer, targets: list[Target], background: str, *, clients: int = 20,
          seconds: float = 20.0) -> LoadRun:
    """``clients`` threads send requests back to back for ``seconds``; every answer is checked."""
    run = LoadRun(clients=clients, seconds=seconds, timings={t.name: [] for t in targets})
    lock = threading.Lock()
    start = threading.Barrier(clients)
    stop_at: list[float] = []

    def client(k: int) -> None:
        local: dict[str, list[float]] = {name: [] for name in run.timings}
        # the timeout only guards against a hang: 20 clients on a machine whose cores are busy
        # with other work once waited over 60 s for an analysis page (load average 20)
        with httpx.Client(base_url=srv.base, timeout=READ_SECONDS) as hc:
            if start.wait() == 0:
                stop_at.append(time.monotonic() + seconds)
            start.wait()  # everyone sees the same end
            i = k
            while time.monotonic() < stop_at[0]:
                target = targets[i % len(targets)]
                i += 1
                t0 = time.perf_counter()
                try:
                    r = hc.get(target.path, params=target.params)
                    dt = time.perf_counter() - t0
                    problem = (f"status {r.status_code} {r.text[:120]}" if r.status_code != 200
                               else None if target.check(r) else "answer differs from the reference")
                except (httpx.HTTPError, ValueError) as exc:
                    problem = f"{type(exc).__name__} {exc}"
                if problem:
                    with lock:
                        run.errors.append(f"{target.name}: {problem}")
                    continue
                local[target.name].append(dt)
        with lock:
            for name, values in local.items():
                run.timings[name].extend(values)

    threads = [threading.Thread(target=client, args=(k,)) for k in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    with httpx.Client(base_url=srv.base, timeout=60) as c:
        run.background_status = c.get(f"/api/analyses/{background}").json()
    return run
