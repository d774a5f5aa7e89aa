"""Fixtures of the browser tests: a real ``earfold serve`` and headless Chromium.

The pages are driven through playwright with the system's Chromium (Debian's ``chromium``
package, ``/usr/bin/chromium``), never a downloaded browser. Where Chromium or playwright
is missing the tests skip with the reason; with ``CI=true`` they fail instead.
Screenshots go to ``test-artifacts/`` at the top of the repo (ignored by git).
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from pathlib import Path

import pytest

from earfold.service.tools.local_server import LocalServer

REPO_ROOT = Path(__file__).resolve().parents[2]
ARTEFACTS = REPO_ROOT / "test-artifacts"


def _missing(reason: str) -> None:
    if os.environ.get("CI") == "true":
        pytest.fail(f"CI=true but {reason}")
    pytest.skip(reason)


def chromium_path() -> str:
    """The system Chromium: ``$EARFOLD_CHROMIUM``, else ``chromium`` on PATH."""
    path = os.environ.get("EARFOLD_CHROMIUM") or shutil.which("chromium") or ""
    if not path or not Path(path).exists():
        _missing("Chromium is not installed (Debian: apt-get install chromium)")
    return path


@pytest.fixture(scope="module")
def browser() -> Iterator[object]:
    """One headless Chromium per test module (playwright ``Browser``).

    Module scope, not session: playwright's sync API keeps an asyncio loop marked as
    running in this thread while it is open, and later tests that call ``asyncio.run``
    would fail (regression: test_retention_sweep_survives_an_outage after the pages)."""
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _missing("playwright is not installed (pip install -e '.[test]')")
    executable = chromium_path()
    with sync_playwright() as pw:
        b = pw.chromium.launch(
            executable_path=executable,
            headless=True,
            args=["--no-sandbox", "--autoplay-policy=no-user-gesture-required"],
        )
        try:
            yield b
        finally:
            b.close()


@pytest.fixture
def page(browser) -> Iterator[object]:
    """A fresh page (own context: no shared storage between tests)."""
    context = browser.new_context(viewport={"width": 1280, "height": 900}, accept_downloads=True)
    pg = context.new_page()
    pg.set_default_timeout(30_000)
    try:
        yield pg
    finally:
        context.close()


@pytest.fixture(scope="module")
def live_server() -> Iterator[LocalServer]:
    """``earfold serve`` with one worker on a free loopback port and a temporary data dir."""
    with LocalServer(workers=1) as server:
        yield server


@pytest.fixture(scope="session")
def artefacts() -> Path:
    """Folder for screenshots and other test artefacts (``test-artifacts/``)."""
    ARTEFACTS.mkdir(exist_ok=True)
    return ARTEFACTS
