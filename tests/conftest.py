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

from browser_helpers import chromium  # noqa: E402


@pytest.fixture(scope="session")
def browser():
    """One Debian Chromium per worker process; each test opens its own context (its own cookies,
    viewport and storage) and closes it."""
    with chromium() as b:
        yield b
