"""Shared pieces of the browser tests: a real pairlens server in a subprocess, Chromium, screenshots."""

from __future__ import annotations

import contextlib
import os
import shutil
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parents[1]
SCREENSHOTS = ROOT / "tests" / "screenshots"
DOC_SCREENSHOTS = ROOT / "docs" / "screenshots"
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic"]


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """``pairlens serve`` on a free loopback port with its own data directory."""

    def __init__(self, data_dir: Path, *, demo: bool = False, max_upload_mb: int | None = None) -> None:
        self.port = free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.data_dir = data_dir
        args = [sys.executable, "-m", "pairlens.cli", "serve", "--port", str(self.port), "--data-dir", str(data_dir)]
        if demo:
            args.append("--demo")
        if max_upload_mb is not None:
            args += ["--max-upload-mb", str(max_upload_mb)]
        env = dict(os.environ)
        env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
        self.log = open(data_dir.parent / f"server-{self.port}.log", "wb")
        self.proc = subprocess.Popen(args, cwd=str(ROOT), env=env, stdout=self.log, stderr=subprocess.STDOUT)
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"server exited with {self.proc.returncode}: {self.log_text()}")
            try:
                if httpx.get(self.base + "/api/datasets", timeout=2).status_code == 200:
                    return
            except httpx.HTTPError:
                pass
            time.sleep(0.2)
        self.stop()
        raise RuntimeError("server did not start in 60 s: " + self.log_text())

    def log_text(self) -> str:
        if not self.log.closed:
            self.log.flush()
        return (self.data_dir.parent / f"server-{self.port}.log").read_text(errors="replace")[-4000:]

    def url(self, path: str) -> str:
        return self.base + path

    def wait_done(self, analysis_id: str, timeout: float = 120.0) -> dict:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            status = httpx.get(self.url(f"/api/analyses/{analysis_id}"), timeout=10).json()
            if status["status"] not in ("queued", "running"):
                return status
            time.sleep(0.3)
        raise TimeoutError(f"analysis {analysis_id} still running after {timeout} s")

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(5)
        self.log.close()


@contextlib.contextmanager
def chromium():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            yield browser
        finally:
            browser.close()


def screenshot(page, name: str, *, doc: bool = False, full_page: bool = True) -> Path:
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    path = SCREENSHOTS / f"{name}.png"
    page.screenshot(path=str(path), full_page=full_page)
    # The README's screenshots are refreshed on request only, so a test run leaves the tree clean.
    if doc and os.environ.get("PAIRLENS_UPDATE_SCREENSHOTS"):
        DOC_SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(path, DOC_SCREENSHOTS / f"{name}.png")
    return path


def chromium_available() -> bool:
    if not Path(CHROMIUM).exists():
        return False
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        return False
    return True
