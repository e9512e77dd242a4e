"""A full disk: JSON 507s while it is full, every analysis ends in a final state, all works again once space is freed.

The workspace lives on a small tmpfs the test mounts (``mount -t tmpfs -o size=...``, which
needs root or CAP_SYS_ADMIN); where it cannot mount one the test is skipped and says why.
HTTP 507 Insufficient Storage is RFC 4918 section 11.5. No restart happens in between.
"""

from __future__ import annotations

import errno
import os
import subprocess

import httpx
import numpy as np
import pytest

from live_server import LiveServer, finished, wait_for_analysis
from test_crash_recovery import _csv


@pytest.fixture
def small_disk(tmp_path):
    mountpoint = tmp_path / "disk"
    mountpoint.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=48m", "tmpfs", str(mountpoint)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a size-limited tmpfs here ({done.stderr.strip() or done.returncode}); "
                    "the full-disk test needs root or CAP_SYS_ADMIN")
    try:
        yield mountpoint
    finally:
        subprocess.run(["umount", "-l", str(mountpoint)], capture_output=True)


def _fill(directory) -> list:
    """Write filler files until the file system refuses (ENOSPC); returns their paths."""
    paths = []
    chunk = 1 << 20
    while chunk >= 512:
        path = directory / f"filler-{len(paths)}"
        paths.append(path)
        try:
            with open(path, "wb") as out:
                while True:
                    out.write(b"\0" * chunk)
                    out.flush()
                    os.fsync(out.fileno())
        except OSError as exc:
            assert exc.errno == errno.ENOSPC
            chunk //= 4
    return paths


def test_full_disk_gives_507_and_recovers_without_restart(small_disk):
    srv = LiveServer(small_disk)  # the log is written beside the mount, not on it
    fillers: list = []
    try:
        with httpx.Client(base_url=srv.base, timeout=120) as c:
            ds = c.post("/api/datasets", files={"file": ("a.csv", _csv(1000, 4, seed=1), "text/csv")}).json()
            running = c.post(f"/api/datasets/{ds['id']}/analyses",
                             json={"measures": ["dcor", "pearson"], "permutations": 3000}).json()["id"]
            wait_for_analysis(c, running, lambda s: s["status"] == "running" or finished(s), timeout=120)

            fillers = _fill(small_disk)
            other = _csv(500, 3, seed=2)
            r = c.post("/api/datasets", files={"file": ("b.csv", other, "text/csv")})
            assert r.status_code == 507, r.text
            assert "full" in r.json()["detail"]
            r = c.post(f"/api/datasets/{ds['id']}/analyses", json={"measures": ["pearson"]})
            # a row may still fit in pages SQLite already holds; either way the answer is JSON
            assert r.status_code in (202, 507), r.text
            started = [running] + ([r.json()["id"]] if r.status_code == 202 else [])
            print("new analysis while full ->", r.status_code, r.json())
            # every analysis reaches a final state while the disk is still full
            finals = {aid: wait_for_analysis(c, aid, timeout=300)["status"] for aid in started}
            print("final states while full:", finals)
            assert all(s in ("done", "failed", "cancelled", "interrupted") for s in finals.values())

            for path in fillers:
                path.unlink()
            fillers = []
            r = c.post("/api/datasets", files={"file": ("b.csv", other, "text/csv")})
            assert r.status_code == 201, r.text
            again = c.post(f"/api/datasets/{r.json()['id']}/analyses", json={"measures": ["pearson", "spearman"]})
            assert again.status_code == 202
            assert wait_for_analysis(c, again.json()["id"], timeout=120)["status"] == "done"
            pairs = c.get(f"/api/analyses/{again.json()['id']}/pairs").json()
            assert len(pairs) == 3 * 2 and all(np.isfinite(p["estimate"]) for p in pairs)
    finally:
        for path in fillers:
            path.unlink(missing_ok=True)
        srv.stop()
