"""Page-serving times of the dashboard against a running server (a benchmark, not a timed test).

Run:  python tests/bench_web.py

1. 100 columns x 1,000 rows, pearson + spearman (4,950 pairs): the analysis page,
   first request (figures built) and repeated requests (figures cached), medians.
2. 6 columns x 10,000 rows: the pair page for distinct pairs (no cache involved:
   each request reads the points and the pair's rows of the table and fits the
   Gaussian moments), and the full pair JSON (Henze-Zirkler and the verdict) for
   comparison.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

import httpx
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from browser_helpers import Server  # noqa: E402


def _csv(data: np.ndarray, prefix: str) -> bytes:
    header = ",".join(f"{prefix}{i:03d}" for i in range(data.shape[1]))
    body = "\n".join(",".join(f"{v:.5g}" for v in row) for row in data)
    return (header + "\n" + body + "\n").encode()


def _timed(client: httpx.Client, url: str, **params) -> tuple[float, int, int]:
    t0 = time.perf_counter()
    r = client.get(url, params=params or None)
    dt = time.perf_counter() - t0
    return dt, r.status_code, len(r.content)


def _run(client: httpx.Client, srv: Server, content: bytes, name: str, measures: list[str]) -> str:
    ds = client.post(srv.url("/api/datasets"), files={"file": (name, content, "text/csv")}).json()
    aid = client.post(srv.url(f"/api/datasets/{ds['id']}/analyses"), json={"measures": measures}).json()["id"]
    t0 = time.perf_counter()
    status = srv.wait_done(aid, timeout=900)
    print(f"  analysis {name}: {status['status']} in {time.perf_counter() - t0:.1f} s wall "
          f"(engine {status.get('seconds', float('nan')):.2f} s)")
    return aid


def main() -> int:
    rng = np.random.default_rng(42)
    base = rng.normal(size=(1000, 10))
    wide = np.repeat(base, 10, axis=1) + rng.normal(scale=1.0, size=(1000, 100))
    tall = rng.normal(size=(10_000, 6))
    tall[:, 1] += 0.6 * tall[:, 0] ** 2
    with tempfile.TemporaryDirectory() as tmp:
        data_dir = Path(tmp) / "data"
        data_dir.mkdir()
        srv = Server(data_dir)
        try:
            with httpx.Client(timeout=120) as client:
                aid = _run(client, srv, _csv(wide, "w"), "wide.csv", ["pearson", "spearman"])
                first, code, size = _timed(client, srv.url(f"/analyses/{aid}"))
                warm = [_timed(client, srv.url(f"/analyses/{aid}"))[0] for _ in range(15)]
                print(f"100 columns, 4,950 pairs: analysis page status {code}, {size / 1e6:.2f} MB; "
                      f"first {first * 1000:.0f} ms, then median {statistics.median(warm) * 1000:.0f} ms "
                      f"(min {min(warm) * 1000:.0f}, max {max(warm) * 1000:.0f}) over {len(warm)}")
                clustered = _timed(client, srv.url(f"/analyses/{aid}"), order="pearson")[0]
                print(f"  clustered on pearson, first request: {clustered * 1000:.0f} ms")
                api = [_timed(client, srv.url(f"/api/analyses/{aid}/pairs"))[0] for _ in range(5)]
                print(f"  /pairs JSON (9,900 records): median {statistics.median(api) * 1000:.0f} ms")

                aid2 = _run(client, srv, _csv(tall, "t"), "tall.csv", ["pearson", "spearman", "kendall", "dcor"])
                names = [f"t{i:03d}" for i in range(6)]
                pairs = [(names[i], names[j]) for i in range(6) for j in range(i + 1, 6)]
                _timed(client, srv.url(f"/analyses/{aid2}/pair"), x=pairs[0][0], y=pairs[0][1])  # loads the table
                page_times = []
                for x, y in pairs[1:]:
                    dt, code, size = _timed(client, srv.url(f"/analyses/{aid2}/pair"), x=x, y=y)
                    assert code == 200
                    page_times.append(dt)
                print(f"n = 10,000 pair page: median {statistics.median(page_times) * 1000:.0f} ms "
                      f"(min {min(page_times) * 1000:.0f}, max {max(page_times) * 1000:.0f}) over "
                      f"{len(page_times)} distinct pairs, {size / 1e6:.2f} MB each")
                full = []
                for x, y in pairs[1:6]:
                    full.append(_timed(client, srv.url(f"/api/analyses/{aid2}/pair"), x=x, y=y)[0])
                print(f"  full pair JSON with Henze-Zirkler and verdict, first request per pair: median "
                      f"{statistics.median(full) * 1000:.0f} ms over {len(full)}")
        finally:
            srv.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
