"""Error pages for browsers, JSON for the API, and the security headers of every answer.

External references: status codes 404, 405 and 500 from RFC 9110; Content-Security-
Policy nonces, ``frame-ancestors`` and ``sandbox`` from the W3C CSP Level 3 draft;
``Referrer-Policy: no-referrer`` from the W3C Referrer Policy recommendation;
``X-Content-Type-Options: nosniff`` from the WHATWG Fetch standard; ``X-Frame-Options``
from RFC 7034.
"""

from __future__ import annotations

import json
import re
import secrets
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.pipeline import PLOT_FILES
from service.report import build_context, render_report
from service.routes.pages import render_page
from service.settings import ServiceSettings
from service.storage import Store, hash_secret

from .test_security import finished_share, settings_for

BROWSER = {"Accept": "text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8"}
AS_JSON = {"Accept": "application/json"}
NONCE = re.compile(r"script-src 'nonce-([A-Za-z0-9_-]{22,})'")


@pytest.fixture
def svc(tmp_path: Path) -> ServiceSettings:
    return settings_for(tmp_path / "data")


@pytest.fixture
def client(svc: ServiceSettings) -> Iterator[TestClient]:
    with TestClient(create_app(svc), raise_server_exceptions=False) as c:
        yield c


def test_unknown_share_link_is_a_friendly_html_404(client: TestClient) -> None:
    for headers in (BROWSER, {"Accept": "*/*"}):
        for path in ("/r/" + "x" * 32, "/r/" + "x" * 32 + "/files/corner.png", "/r/short"):
            page = client.get(path, headers=headers)
            assert page.status_code == 404
            assert page.headers["content-type"].startswith("text/html")
            assert "unknown or was withdrawn" in page.text
            assert "Ask the person who sent it for the current link" in page.text
            assert 'href="/"' in page.text
            assert "Traceback" not in page.text
            assert page.headers["referrer-policy"] == "no-referrer"
    scripted = client.get("/r/" + "x" * 32, headers=AS_JSON)
    assert scripted.json()["error"]["code"] == "not_found"


def test_revoked_share_link_gets_the_same_page(client: TestClient, svc: ServiceSettings,
                                               tmp_path: Path) -> None:
    aid, token = finished_share(Store(svc.data_dir), tmp_path / "attempt")
    assert client.get(f"/r/{token}", headers=BROWSER).status_code == 200
    assert client.post(f"/api/v1/analyses/{aid}/share/revoke").status_code == 204
    page = client.get(f"/r/{token}", headers=BROWSER)
    assert page.status_code == 404
    assert "unknown or was withdrawn" in page.text
    assert "drill-0042" not in page.text
    assert aid not in page.text


def test_unknown_paths_by_route_then_accept(client: TestClient) -> None:
    page = client.get("/no/such/page", headers=BROWSER)
    assert page.status_code == 404
    assert page.headers["content-type"].startswith("text/html")
    assert "There is no page at this address" in page.text
    for headers in (AS_JSON, {"Accept": "*/*"}):
        assert client.get("/no/such/page", headers=headers).json()["error"]["code"] == "not_found"
    api = client.get("/api/v1/analyses/nope", headers=BROWSER)  # the API stays JSON
    assert api.status_code == 404
    assert api.json()["error"]["code"] == "not_found"
    wrong_method = client.delete("/", headers=BROWSER)
    assert wrong_method.status_code == 405
    assert wrong_method.headers["content-type"].startswith("text/html")


def test_unexpected_error_on_a_page_is_html_without_details(
        client: TestClient, monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(self: Store, share_hash: str) -> None:
        msg = "database secret detail"
        raise RuntimeError(msg)

    monkeypatch.setattr(Store, "by_share_hash", broken)
    page = client.get("/r/" + "x" * 32, headers=BROWSER)
    assert page.status_code == 500
    assert page.headers["content-type"].startswith("text/html")
    assert "Something went wrong on our side" in page.text
    assert "secret" not in page.text
    assert "Traceback" not in page.text
    assert re.search(r'id="request-id">[0-9a-f]{12}<', page.text)


# -- 4. security headers -------------------------------------------------------------------

def page_nonce(response: Any) -> str:
    """The nonce of a page's policy, after checking the policy and the basic headers."""
    policy = response.headers["content-security-policy"]
    found = NONCE.search(policy)
    assert found, policy
    assert "unsafe-inline" not in policy
    assert "unsafe-eval" not in policy
    assert "frame-ancestors 'none'" in policy
    assert "default-src 'none'" in policy
    assert response.headers["x-frame-options"] == "DENY"
    assert response.headers["x-content-type-options"] == "nosniff"
    # every executable script and every style element of the page carries the nonce
    for tag in re.findall(r"<(?:script|style)\b[^>]*>", response.text):
        if 'type="application/json"' not in tag:
            assert f'nonce="{found[1]}"' in tag, tag
    return found[1]


def test_upload_page_policy(client: TestClient) -> None:
    first, second = client.get("/"), client.get("/")
    assert page_nonce(first) != page_nonce(second)  # fresh per answer
    assert "connect-src 'self'" in first.headers["content-security-policy"]


def test_share_pages_policy_and_no_referrer(client: TestClient, svc: ServiceSettings,
                                            tmp_path: Path) -> None:
    store = Store(svc.data_dir)
    _, token = finished_share(store, tmp_path / "attempt")
    report = client.get(f"/r/{token}")
    nonce = page_nonce(report)
    assert report.headers["referrer-policy"] == "no-referrer"
    assert "img-src 'self'" in report.headers["content-security-policy"]
    assert f'src="/r/{token}/files/corner.png"' in report.text  # same origin: 'self'
    # the service's report is the command line's report plus the nonce attributes
    out = store.output_dir(store.by_share_hash(hash_secret(token)).id)  # type: ignore[union-attr]
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    images = {k: f"/r/{token}/files/{n}" for k, n in PLOT_FILES.items()}
    downloads = {n: f"/r/{token}/files/{n}" for n in ("samples.csv", "summary.json",
                                                      *PLOT_FILES.values())}
    url = "http://testserver/r/t"
    plain = render_report(summary, images=images, downloads=downloads, share_url=url)
    assert "nonce" not in plain
    again = render_page("report.html", {**build_context(
        summary, images=images, downloads=downloads, share_url=url), "csp_nonce": nonce})
    assert again.replace(f' nonce="{nonce}"', "") == plain
    queued = Store(svc.data_dir)
    aid = secrets.token_hex(16)
    queued_token = queued.share_token(aid, 0)
    queued.insert_analysis(analysis_id=aid, label="waiting", request={}, inputs={}, owner="",
                           idempotency_key=None, share_hash=hash_secret(queued_token))
    status = client.get(f"/r/{queued_token}")
    assert "id=\"progress\"" in status.text
    page_nonce(status)
    assert status.headers["referrer-policy"] == "no-referrer"


def test_api_and_file_answers_are_locked_down(client: TestClient, svc: ServiceSettings,
                                              tmp_path: Path) -> None:
    aid, token = finished_share(Store(svc.data_dir), tmp_path / "attempt")
    for path in ("/healthz", "/api/v1/analyses/nope", f"/api/v1/analyses/{aid}"):
        answer = client.get(path)
        assert answer.headers["content-security-policy"].startswith("default-src 'none'")
        assert answer.headers["x-content-type-options"] == "nosniff"
        assert answer.headers["x-frame-options"] == "DENY"
    for path in (f"/r/{token}/files/report.html", f"/api/v1/analyses/{aid}/files/report.html"):
        stored = client.get(path)
        assert stored.status_code == 200
        policy = stored.headers["content-security-policy"]
        assert policy.startswith("sandbox;")
        assert "script-src" not in policy
        assert "frame-ancestors 'none'" in policy
