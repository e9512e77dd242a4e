"""Fixtures shared by the test modules.

The suite runs in two pytest-xdist workers; a session-scoped fixture lives once per worker.
"""

from __future__ import annotations

import pytest

from browser_helpers import chromium


@pytest.fixture(scope="session")
def browser():
    """One Debian Chromium per worker process; each test opens its own context (its own cookies,
    viewport and storage) and closes it."""
    with chromium() as b:
        yield b
