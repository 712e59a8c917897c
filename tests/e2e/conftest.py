"""The headless browser shared by the browser tests (Debian's Chromium through Playwright).

No test downloads a browser: ``.ci/run`` installs Debian's ``chromium`` and
``chromium-driver``; where they are missing the browser tests skip (``NEEDS_CHROMIUM``).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

__all__ = ["ARGS", "CHROMIUM", "NEEDS_CHROMIUM", "browser"]

CHROMIUM = Path("/usr/bin/chromium")
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking"]
NEEDS_CHROMIUM = pytest.mark.skipif(
    not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium"
    " (apt-get install chromium chromium-driver; .ci/run does this)")


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    """One headless Chromium per test module."""
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        yield chromium
        chromium.close()
