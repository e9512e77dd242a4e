"""Shared pieces of the browser tests: a real pairlens server in a subprocess, Chromium, screenshots."""

from __future__ import annotations

import contextlib
import os
import shutil
from pathlib import Path

import httpx

from live_server import WAIT_SECONDS, LiveServer, free_port, wait_for_analysis  # noqa: F401 - re-exported

ROOT = Path(__file__).resolve().parents[1]
SCREENSHOTS = ROOT / "tests" / "screenshots"
DOC_SCREENSHOTS = ROOT / "docs" / "screenshots"
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic"]


class Server(LiveServer):
    """``pairlens serve`` on a free loopback port with its own data directory (the browser tests' server)."""

    def __init__(self, data_dir: Path, *, demo: bool = False, max_upload_mb: int | None = None) -> None:
        args: tuple[str, ...] = ("--demo",) if demo else ()
        if max_upload_mb is not None:
            args += ("--max-upload-mb", str(max_upload_mb))
        super().__init__(Path(data_dir), args=args)

    def wait_done(self, analysis_id: str, timeout: float = WAIT_SECONDS) -> dict:
        with httpx.Client(base_url=self.base, timeout=30) as client:
            return wait_for_analysis(client, analysis_id, timeout=timeout, poll=0.3)


def goto_settled(page, url: str) -> None:
    """``page.goto(url)``; a page that navigates by itself at that moment (an analysis page reloads
    when its run ends) interrupts it, and then the page's own navigation is waited for instead."""
    from playwright.sync_api import Error

    try:
        page.goto(url)
    except Error as exc:
        if "interrupted by another navigation" not in str(exc):
            raise
        page.wait_for_load_state("load")
        if page.url != url:
            page.goto(url)


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
