"""The pages work under their content-security policy, in Debian's Chromium (Playwright).

The real application (no workers) runs in-process under uvicorn on 127.0.0.1 with one
finished analysis (the report test's summary, 2x1 PNG plots). Chromium opens the
report, the upload page (adds a detector row, submits the demo files) and the status
page that follows; every CSP violation is caught twice, as a ``securitypolicyviolation``
event (W3C CSP Level 3, section 5.3) recorded by a script Playwright injects before the
page's own, and as a console message. A control injects an inline script without the
nonce and expects exactly that to be refused, so the detector is shown to work.

Skipped only when /usr/bin/chromium is absent (.ci/run installs it). Every wait is bounded.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from typing import Any

import pytest

from service.app import create_app
from service.settings import ServiceSettings
from service.storage import Store

from ..service.test_security import finished_share
from .conftest import NEEDS_CHROMIUM, serve_in_thread
from .serving import REPO_ROOT

DEMO = REPO_ROOT / "demo_data"
TRIGGER = "2000000012.004"  # demo_data/event.json
#: Runs before every page script: keeps each CSP violation the page reports.
RECORDER = """
window.__csp = [];
document.addEventListener("securitypolicyviolation", function (e) {
  window.__csp.push(e.violatedDirective + " " + (e.blockedURI || "inline"));
});
"""

pytestmark = [
    pytest.mark.slow,
    NEEDS_CHROMIUM,
]


@pytest.fixture(scope="module")
def served(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, str]]:
    """(base URL, share token of a finished analysis) of the app under uvicorn."""
    root = tmp_path_factory.mktemp("csp")
    svc = ServiceSettings(data_dir=root / "data", workers=1, events_timeout_seconds=3.0)
    app = create_app(svc)
    _, token = finished_share(Store(svc.data_dir), root / "attempt")
    for base in serve_in_thread(app):
        yield base, token


@pytest.fixture
def tab(browser: Any) -> Iterator[tuple[Any, list[str]]]:
    """A page that records CSP violations and console messages about the policy."""
    context = browser.new_context(viewport={"width": 1100, "height": 900})
    context.add_init_script(RECORDER)
    page = context.new_page()
    page.set_default_timeout(20_000)
    console: list[str] = []
    page.on("console", lambda m: console.append(m.text)
            if "Content Security Policy" in m.text or "Content-Security-Policy" in m.text
            else None)
    errors: list[str] = []
    page.on("pageerror", lambda err: errors.append(str(err)))
    yield page, console
    context.close()
    assert errors == [], f"JavaScript errors on the page: {errors}"


def violations(page: Any) -> list[str]:
    return list(page.evaluate("() => window.__csp || []"))


def test_report_renders_under_the_policy(served: tuple[str, str], tab: Any) -> None:
    base, token = served
    page, console = tab
    answer = page.goto(f"{base}/r/{token}")
    assert answer.status == 200
    assert "'nonce-" in answer.headers["content-security-policy"]
    images = page.locator("#plots img")
    assert images.count() == 5
    for i in range(images.count()):
        image = images.nth(i)
        image.scroll_into_view_if_needed()
        page.wait_for_function("img => img.complete && img.naturalWidth > 0",
                               arg=image.element_handle(), timeout=10_000)
    # the nonce'd style applies (report.css: the caution box's 5 px edge) ...
    edge = page.evaluate("() => getComputedStyle(document.querySelector('.caution'))"
                         ".borderLeftWidth")
    assert edge == "5px"
    # ... and the nonce'd script runs (the copy button answers)
    page.click("#copy-share")
    page.wait_for_function("() => document.getElementById('copy-status').textContent !== ''")
    assert violations(page) == []
    assert console == []


def test_upload_and_status_pages_work_under_the_policy(served: tuple[str, str],
                                                       tab: Any) -> None:
    base, _ = served
    page, console = tab
    page.goto(f"{base}/")
    page.click("#add-detector")  # the page's script adds a row; its style shows it
    assert page.locator("#detector-list .detector").count() == 2
    assert page.evaluate("() => document.getElementById('detector-list')"
                         ".classList.contains('several')")
    page.click(".detector:nth-of-type(2) [data-part=remove]")
    assert page.locator("#detector-list .detector").count() == 1
    assert violations(page) == []
    assert console == []
    page.set_input_files("#strain", str(DEMO / "strain.csv"))
    page.set_input_files("#psd", str(DEMO / "psd.csv"))
    page.fill("#trigger_time", TRIGGER)
    page.fill("#label", "policy check")
    page.click("#submit")  # fetch() to the API: connect-src 'self'
    page.wait_for_url("**/r/**", timeout=30_000)
    page.wait_for_selector("#progress")
    time.sleep(1.0)  # the status page opens its event stream (connect-src 'self')
    assert page.evaluate("() => document.getElementById('state').textContent") == "queued"
    assert violations(page) == []
    assert console == []


def test_an_inline_script_without_the_nonce_is_refused(served: tuple[str, str],
                                                       tab: Any) -> None:
    """Control: the recorder sees a violation when there is one."""
    base, _ = served
    page, console = tab
    page.goto(f"{base}/")
    page.evaluate("() => { const s = document.createElement('script');"
                  " s.textContent = 'window.__injected = 1'; document.body.appendChild(s); }")
    page.wait_for_function("() => window.__csp.length > 0", timeout=5_000)
    assert page.evaluate("() => window.__injected === undefined")
    assert any(v.startswith("script-src") for v in violations(page)), violations(page)
    for _ in range(20):  # the console message may arrive a little later (at most 2 s)
        if console:
            break
        page.wait_for_timeout(100)
    assert console, "Chromium's console did not report the refused script"
