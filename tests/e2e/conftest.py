"""The headless browser shared by the browser tests (Debian's Chromium through Playwright).

No test downloads a browser: ``.ci/run`` installs Debian's ``chromium`` and
``chromium-driver``; where they are missing the browser tests skip (``NEEDS_CHROMIUM``).
"""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

__all__ = ["ARGS", "CHROMIUM", "NEEDS_CHROMIUM", "browser", "serve_in_thread"]

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


def serve_in_thread(app: Any) -> Iterator[str]:
    """Run ``app`` with uvicorn on a free loopback port in a thread; yield its base URL.

    Waits at most 10 s for the server to start (fails the test otherwise) and stops it
    after the one yield.
    """
    import uvicorn

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    for _ in range(200):
        if server.started:
            break
        time.sleep(0.05)
    if not server.started:
        pytest.fail("uvicorn did not start within 10 s")
    yield f"http://127.0.0.1:{port}"
    server.should_exit = True
    thread.join(timeout=10)
