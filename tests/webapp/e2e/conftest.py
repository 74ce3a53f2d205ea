"""Browser tests: Debian's Chromium driven by Playwright's sync API, never a downloaded browser.

Playwright's sync API keeps an asyncio loop running in the test thread, which Django's guard
against async contexts mistakes for one; the variable that lifts the guard is set per test, here,
never in settings.
"""

import os
from pathlib import Path

import pytest

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]


@pytest.fixture
def browser(monkeypatch):
    """Yield a headless Chromium from the system's package."""
    if not Path(CHROMIUM).exists():
        pytest.skip(f"no Chromium at {CHROMIUM}")
    from playwright.sync_api import sync_playwright

    monkeypatch.setenv("DJANGO_ALLOW_ASYNC_UNSAFE", "true")
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            yield browser
        finally:
            browser.close()


@pytest.fixture
def shots(tmp_path) -> Path:
    """Return where to save screenshots: PHASEWRIGHT_SCREENSHOTS (e.g. docs/screenshots) or a temporary folder."""
    folder = Path(os.environ.get("PHASEWRIGHT_SCREENSHOTS") or tmp_path)
    folder.mkdir(parents=True, exist_ok=True)
    return folder
