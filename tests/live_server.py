"""A real ``pairlens serve`` in its own process group on a free loopback port (hardening tests)."""

from __future__ import annotations

import os
import re
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parents[1]
# Upper bounds for a server to answer and for an analysis to finish. They only matter when
# something hangs: a test waits on the state, and on a machine whose cores are both busy with
# other work a small analysis can take minutes, so the bounds are generous.
START_SECONDS = 240.0
WAIT_SECONDS = 600.0
# One HTTP answer: a hang guard too (two uploads once took over 30 s on a fresh clone's run).
READ_SECONDS = 120.0


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class LiveServer:
    """``python -m pairlens.cli serve`` bound to 127.0.0.1; its own session so the whole group can be killed."""

    def __init__(self, data_dir: Path, *, port: int | None = None, args: tuple[str, ...] = (),
                 start_timeout: float = START_SECONDS) -> None:
        self.port = port or free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.data_dir = Path(data_dir)
        self.log_path = self.data_dir.parent / f"serve-{self.port}-{time.monotonic_ns()}.log"
        env = dict(os.environ)
        env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
        cmd = [sys.executable, "-m", "pairlens.cli", "serve", "--host", "127.0.0.1", "--port", str(self.port),
               "--data-dir", str(self.data_dir), *args]
        self._log = open(self.log_path, "wb")
        self.proc = subprocess.Popen(cmd, cwd=str(ROOT), env=env, stdout=self._log, stderr=subprocess.STDOUT,
                                     start_new_session=True)
        deadline = time.monotonic() + start_timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"server exited with {self.proc.returncode}: {self.log_text()}")
            try:
                # 401: up, and asking for the token (--require-token)
                if httpx.get(self.base + "/api/datasets", timeout=2).status_code in (200, 401):
                    return
            except httpx.HTTPError:
                pass
            time.sleep(0.2)
        self.kill()
        raise RuntimeError("server did not start: " + self.log_text())

    def url(self, path: str) -> str:
        return self.base + path

    def log_text(self) -> str:
        if not self._log.closed:
            self._log.flush()
        return self.log_path.read_text(errors="replace")[-4000:]

    def access_link(self) -> str | None:
        m = re.search(r"serving (http://\S+)", self.log_text())
        return m.group(1) if m else None

    def kill(self) -> None:
        """SIGKILL the server's whole process group (server, analysis children, their pools)."""
        try:
            os.killpg(self.proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        self.proc.wait(10)
        self._log.close()

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(15)
            except subprocess.TimeoutExpired:
                pass
        try:  # analysis children left behind by a server that did not stop in time
            os.killpg(self.proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        if self.proc.poll() is None:
            self.proc.wait(10)
        self._log.close()


def finished(status: dict) -> bool:
    """An analysis that will not change any more (done, failed, cancelled, interrupted)."""
    return status["status"] not in ("queued", "running")


def wait_for_analysis(client, analysis_id: str, until=finished, *, timeout: float = WAIT_SECONDS,
                      poll: float = 0.2) -> dict:
    """Poll ``GET /api/analyses/{id}`` (httpx or FastAPI's TestClient) until ``until(status)`` holds."""
    deadline = time.monotonic() + timeout
    status: dict = {}
    while time.monotonic() < deadline:
        status = client.get(f"/api/analyses/{analysis_id}").json()
        if until(status):
            return status
        time.sleep(poll)
    raise AssertionError(f"analysis {analysis_id} did not reach the wanted state in {timeout} s: {status}")
