"""Fixtures shared by the test modules.

The suite runs in two pytest-xdist workers; a session-scoped fixture lives once per worker.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

# Each worker compiles into its own numba cache. Two processes that write the same cache
# entries at once can crash one of them (numba issue 4807: "Cache causes Segmentation Faults
# when generated in parallel"); a fresh clone's two workers did, on their first kernels.
# Set before any test module imports numba; servers and command lines a test starts inherit it.
_WORKER = os.environ.get("PYTEST_XDIST_WORKER")
if _WORKER:
    _base = os.environ.get("NUMBA_CACHE_DIR") or str(Path(__file__).resolve().parents[1] / ".numba_cache")
    os.environ["NUMBA_CACHE_DIR"] = str(Path(_base) / _WORKER)

# One BLAS thread in the workers and in every process a test starts. The suite runs two workers
# on two cores, each often with a server or an analysis beside it; OpenBLAS's helper threads then
# wait for cores and a small product costs milliseconds (measured: the group dCor level test
# 14.8 s with the default threads beside two busy loops, 3.4 s with one, 2.7 s idle). The
# analysis tiles already run on one BLAS thread (tiles.one_blas_thread); tests that call the
# core directly did not.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
try:  # NumPy may already be loaded by a plugin, its BLAS sized: limit it in place too
    from threadpoolctl import threadpool_limits

    _BLAS_LIMIT = threadpool_limits(limits=1, user_api="blas")
except ImportError:  # pragma: no cover - threadpoolctl comes with the test extras' dependencies
    _BLAS_LIMIT = None

from browser_helpers import Server, chromium  # noqa: E402


# Playwright's own default (30 s per click, wait or navigation) is a hang guard that a page
# on a machine with both cores busy can exceed (a click once took longer at load 20); waits
# are on state, so a larger guard costs nothing when the page is quick.
HANG_GUARD_MS = 180_000


class _PatientBrowser:
    """The browser, whose new contexts wait up to HANG_GUARD_MS unless a call says otherwise."""

    def __init__(self, browser) -> None:
        self._browser = browser

    def new_context(self, **options):
        context = self._browser.new_context(**options)
        context.set_default_timeout(HANG_GUARD_MS)
        context.set_default_navigation_timeout(HANG_GUARD_MS)
        return context

    def __getattr__(self, name):
        return getattr(self._browser, name)


@pytest.fixture(scope="session")
def browser():
    """One Debian Chromium per worker process; each test opens its own context (its own cookies,
    viewport and storage) and closes it."""
    with chromium() as b:
        yield _PatientBrowser(b)


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    """A pairlens server in a subprocess, on a free port, over an empty workspace (one per module;
    a module that needs another, the demo's say, defines its own ``server``)."""
    root = tmp_path_factory.mktemp("server")
    (root / "data").mkdir()
    srv = Server(root / "data")
    yield srv
    srv.stop()


@pytest.fixture()
def page(browser):
    """A page in a context of its own at 1400 x 900 px, downloads accepted; ``page.errors`` lists the
    page's uncaught script errors."""
    context = browser.new_context(viewport={"width": 1400, "height": 900}, accept_downloads=True)
    pg = context.new_page()
    errors: list[str] = []
    pg.on("pageerror", lambda exc: errors.append(str(exc)))
    pg.errors = errors
    yield pg
    context.close()
