"""The REST API through FastAPI's TestClient, with a temporary data folder per test.

The one real analysis (the shipped demo, ~7 s) runs in-process with
``service.worker.run_one_job`` and is shared by the tests of the finished state.
External references: sha256 digests from Python's hashlib (FIPS 180-4); the PNG
signature from the PNG specification (ISO/IEC 15948, section 5.2); the
server-sent-events framing from the WHATWG HTML standard, section 9.2; status
codes and Retry-After from RFC 9110 and RFC 6585 (413, 422, 429, 503); base64url
from RFC 4648, section 5.
"""

from __future__ import annotations

import asyncio
import base64
import hashlib
import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.settings import ServiceSettings
from service.storage import Store
from service.worker import run_one_job

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
EVENT = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))
INJECTION = json.loads((DEMO / "injection.json").read_text(encoding="utf-8"))
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _settings(data_dir: Path, **overrides: Any) -> ServiceSettings:
    return ServiceSettings(data_dir=data_dir, workers=1, heartbeat_seconds=0.2, **overrides)


def _submit(client: TestClient, *, settings: dict[str, Any] | str | None = None,
            strain: bytes | None = None, psd: bool = True,
            headers: dict[str, str] | None = None) -> Any:
    files: dict[str, Any] = {
        "strain": ("strain.csv", strain if strain is not None
                   else (DEMO / "strain.csv").read_bytes(), "text/csv")}
    if psd:
        files["psd"] = ("psd.csv", (DEMO / "psd.csv").read_bytes(), "text/csv")
    if settings is None:
        # Spins fixed (four parameters, five times faster); the demo test runs them.
        settings = {"trigger_time": EVENT["trigger_time"], "seed": EVENT["seed"],
                    "label": EVENT["label"], "spin_max": 0.0}
    text = settings if isinstance(settings, str) else json.dumps(settings)
    return client.post("/api/v1/analyses", files=files, data={"settings": text},
                       headers=headers or {})


@pytest.fixture
def svc(tmp_path: Path) -> ServiceSettings:
    return _settings(tmp_path / "data")


@pytest.fixture
def client(svc: ServiceSettings) -> Iterator[TestClient]:
    with TestClient(create_app(svc)) as c:
        yield c


@pytest.fixture(scope="module")
def finished(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Any]]:
    """The demo submitted over the API and run to its end by an in-process worker."""
    svc = _settings(tmp_path_factory.mktemp("done") / "data")
    with TestClient(create_app(svc)) as c:
        answer = _submit(c)
        ran = run_one_job(svc, worker="test-worker")
        yield {"client": c, "answer": answer, "ran": ran, "svc": svc}


def _error(response: Any, status: int) -> dict[str, Any]:
    assert response.status_code == status, response.text
    body = response.json()
    assert set(body) == {"error"}
    assert body["error"]["message"]
    assert body["error"]["request_id"]
    return dict(body["error"])


# -- the main path ----------------------------------------------------------------------

def test_submit_answers_202_with_urls(finished: dict[str, Any]) -> None:
    answer = finished["answer"]
    assert answer.status_code == 202
    body = answer.json()
    assert body["state"] == "queued"
    assert body["status_url"] == f"/api/v1/analyses/{body['id']}"
    assert body["report_url"] == f"/r/{body['share_token']}"
    # the token carries at least 128 bits (RFC 4648 base64url: 6 bits per character)
    raw = base64.urlsafe_b64decode(body["share_token"] + "=" * (-len(body["share_token"]) % 4))
    assert len(raw) * 8 >= 128
    assert finished["ran"] == body["id"]


def test_done_with_summary(finished: dict[str, Any]) -> None:
    c, aid = finished["client"], finished["answer"].json()["id"]
    got = c.get(f"/api/v1/analyses/{aid}").json()
    assert got["state"] == "done"
    assert got["progress"] == 1.0
    assert got["error"] is None
    assert got["label"] == EVENT["label"]
    summary = got["summary"]
    # provenance: the hashes of the uploads as hashlib computes them on the demo files
    for name in ("strain", "psd"):
        digest = hashlib.sha256((DEMO / f"{name}.csv").read_bytes()).hexdigest()
        assert summary["inputs"][name]["sha256"] == digest
    assert summary["settings"]["seed"] == EVENT["seed"]
    # the simulated source's chirp mass (demo_data/injection.json) within 3% of the median
    chirp = summary["parameters"]["chirp_mass"]
    assert chirp["unit"] == "Msun"
    assert abs(chirp["median"] - INJECTION["chirp_mass"]) < 0.03 * INJECTION["chirp_mass"]
    assert set(got["files"]) >= {"samples.csv", "summary.json", "corner.png", "report.html"}


def test_downloads(finished: dict[str, Any]) -> None:
    c, aid = finished["client"], finished["answer"].json()["id"]
    files = c.get(f"/api/v1/analyses/{aid}").json()["files"]
    samples = c.get(files["samples.csv"])
    assert samples.status_code == 200
    header = samples.text.splitlines()[0].split(",")
    assert header[:2] == ["chirp_mass", "mass_ratio"]
    assert len(samples.text.splitlines()) > 100
    summary = c.get(files["summary.json"]).json()
    assert summary == c.get(f"/api/v1/analyses/{aid}").json()["summary"]
    png = c.get(files["corner.png"])
    assert png.headers["content-type"] == "image/png"
    assert png.content.startswith(PNG_SIGNATURE)
    _error(c.get(f"/api/v1/analyses/{aid}/files/../chirpcast.sqlite3"), 404)
    _error(c.get(f"/api/v1/analyses/{aid}/files/secret.txt"), 404)
    assert _error(c.post(f"/api/v1/analyses/{aid}/cancel"), 409)["code"] == "already_final"


def test_share_link_report_and_revoke(finished: dict[str, Any]) -> None:
    c, body = finished["client"], finished["answer"].json()
    page = c.get(body["report_url"])
    assert page.status_code == 200
    assert page.headers["content-type"].startswith("text/html")
    assert f"/r/{body['share_token']}/files/corner.png" in page.text
    assert "data:image/png" not in page.text  # images by URL, not inlined
    image = c.get(f"/r/{body['share_token']}/files/corner.png")
    assert image.content.startswith(PNG_SIGNATURE)
    wrong = body["share_token"][:-2] + ("AA" if body["share_token"][-2:] != "AA" else "BB")
    as_json = {"Accept": "application/json"}  # browsers get an HTML page (test_security.py)
    assert _error(c.get(f"/r/{wrong}", headers=as_json), 404)["code"] == "not_found"
    _error(c.get(f"/r/{wrong}/files/corner.png", headers=as_json), 404)
    # a new link replaces the old one; revoking ends both
    new = c.post(f"/api/v1/analyses/{body['id']}/share").json()
    assert new["share_token"] != body["share_token"]
    _error(c.get(body["report_url"], headers=as_json), 404)
    assert c.get(new["report_url"]).status_code == 200
    assert c.post(f"/api/v1/analyses/{body['id']}/share/revoke").status_code == 204
    _error(c.get(new["report_url"], headers=as_json), 404)
    _error(c.get(f"{new['report_url']}/files/summary.json", headers=as_json), 404)


def test_events_stream_ends_at_final_state(finished: dict[str, Any]) -> None:
    c, aid = finished["client"], finished["answer"].json()["id"]
    with c.stream("GET", f"/api/v1/analyses/{aid}/events") as stream:
        assert stream.headers["content-type"].startswith("text/event-stream")
        text = "".join(stream.iter_text())
    # WHATWG framing: "event:" and "data:" lines, each message ended by a blank line
    messages = [m for m in text.split("\n\n") if m.startswith("event:")]
    first = dict(line.split(": ", 1) for line in messages[0].splitlines())
    assert first["event"] == "progress"
    assert json.loads(first["data"]) == {"state": "done", "stage": "done", "progress": 1.0}
    assert messages[-1].startswith("event: end")


def test_list_newest_first(finished: dict[str, Any]) -> None:
    c = finished["client"]
    listed = c.get("/api/v1/analyses", params={"limit": 5}).json()
    assert listed["total"] >= 1
    assert listed["items"][0]["id"] == finished["answer"].json()["id"]
    _error(c.get("/api/v1/analyses", params={"limit": 0}), 422)


# -- idempotency, cancel ------------------------------------------------------------------

def test_idempotency_key_returns_same_analysis(client: TestClient, svc: ServiceSettings) -> None:
    first = _submit(client, headers={"Idempotency-Key": "alert-42"})
    again = _submit(client, headers={"Idempotency-Key": "alert-42"})
    assert first.status_code == 202
    assert again.status_code == 200
    assert again.json() == first.json()
    other = _submit(client, headers={"Idempotency-Key": "alert-43"})
    assert other.json()["id"] != first.json()["id"]
    assert client.get("/healthz").json()["queued"] == 2
    # the files are stored (and hashed) before the answer
    inputs = Store(svc.data_dir).inputs_dir(first.json()["id"])
    assert (inputs / "strain" / "strain.csv").read_bytes() == (DEMO / "strain.csv").read_bytes()


def test_cancel_queued(client: TestClient, svc: ServiceSettings) -> None:
    aid = _submit(client).json()["id"]
    got = client.post(f"/api/v1/analyses/{aid}/cancel")
    assert got.status_code == 200
    assert got.json()["state"] == "cancelled"
    assert client.post(f"/api/v1/analyses/{aid}/cancel").json()["state"] == "cancelled"
    assert run_one_job(svc) is None  # nothing left to run
    _error(client.post("/api/v1/analyses/0123/cancel"), 404)


# -- errors -----------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("settings", "field"),
    [
        ("{not json", "settings"),
        ({"seed": 3}, "trigger_time"),
        ({"trigger_time": "soon"}, "trigger_time"),
        ({"trigger_time": 2000000012.0, "f_low": -5}, "f_low"),
        ({"trigger_time": 2000000012.0, "colour": "red"}, "colour"),
        ({"trigger_time": 1000.0}, "trigger_time"),
    ],
)
def test_bad_settings_422_names_field(client: TestClient, settings: Any, field: str) -> None:
    error = _error(_submit(client, settings=settings), 422)
    assert error["field"] == field


def test_bad_files_422(client: TestClient) -> None:
    assert _error(_submit(client, strain=b""), 422)["field"] == "strain"
    bad = _error(_submit(client, strain=b"time,strain\n1,2\nx,y\n"), 422)
    assert bad["field"] == "strain"
    files = {"strain": ("s.csv", (DEMO / "strain.csv").read_bytes()),
             "psd": ("noise.txt", b"frequency,psd\n10,abc\n")}
    settings = json.dumps({"trigger_time": EVENT["trigger_time"]})
    bad_psd = client.post("/api/v1/analyses", files=files, data={"settings": settings})
    assert _error(bad_psd, 422)["field"] == "psd"
    missing = client.post("/api/v1/analyses", data={"settings": "{}"})
    assert _error(missing, 422)["field"] == "strain"
    assert client.get("/healthz").json()["queued"] == 0


def test_upload_limit_413(tmp_path: Path) -> None:
    with TestClient(create_app(_settings(tmp_path, max_upload_bytes=100_000))) as c:
        error = _error(_submit(c, psd=False), 413)
        assert "limit" in error["message"]


def test_segment_limit_422(tmp_path: Path) -> None:
    with TestClient(create_app(_settings(tmp_path, max_segment_seconds=8))) as c:
        error = _error(_submit(c), 422)
        assert error["field"] == "strain"
        assert "16 s" in error["message"]


def test_queue_full_503_retry_after(tmp_path: Path) -> None:
    with TestClient(create_app(_settings(tmp_path, max_queue=1))) as c:
        assert _submit(c).status_code == 202
        full = _submit(c)
        assert _error(full, 503)["code"] == "queue_full"
        assert int(full.headers["retry-after"]) > 0


def test_rate_limit_429_retry_after(tmp_path: Path) -> None:
    with TestClient(create_app(_settings(tmp_path, rate_per_minute=2))) as c:
        assert [_submit(c, psd=False).status_code for _ in range(2)] == [202, 202]
        limited = _submit(c, psd=False)
        assert _error(limited, 429)["code"] == "rate_limited"
        assert 0 < int(limited.headers["retry-after"]) <= 60


def test_api_keys_401(client: TestClient, svc: ServiceSettings) -> None:
    assert client.get("/api/v1/analyses").status_code == 200  # no keys yet: open on loopback
    key = Store(svc.data_dir).add_key("pipeline")
    assert _error(_submit(client), 401)["code"] == "unauthorized"
    _error(client.get("/api/v1/analyses"), 401)
    _error(client.get("/api/v1/analyses", headers={"X-API-Key": "cck_wrong"}), 401)
    ok = _submit(client, headers={"Authorization": f"Bearer {key}"})
    assert ok.status_code == 202
    aid = ok.json()["id"]
    assert client.get("/api/v1/analyses", headers={"X-API-Key": key}).json()["total"] == 1
    _error(client.post(f"/api/v1/analyses/{aid}/cancel"), 401)
    _error(client.post(f"/api/v1/analyses/{aid}/share/revoke"), 401)
    # reading the status and the share link never needs a key
    assert client.get(f"/api/v1/analyses/{aid}").json()["report_url"] is None
    assert client.get(ok.json()["report_url"]).status_code == 200
    # keys are stored hashed
    assert key.encode() not in (svc.data_dir / "chirpcast.sqlite3").read_bytes()


def test_status_page_before_done(client: TestClient) -> None:
    body = _submit(client).json()
    page = client.get(body["report_url"])
    assert page.status_code == 200
    assert body["id"] in page.text or "queued" in page.text.lower()


def test_unknown_is_json_404(client: TestClient) -> None:
    assert _error(client.get("/api/v1/analyses/nope"), 404)["code"] == "not_found"
    assert _error(client.get("/no/such/page"), 404)["code"] == "not_found"
    health = client.get("/healthz").json()
    assert health["status"] == "ok"


def test_unexpected_error_is_logged_with_id(svc: ServiceSettings,
                                            monkeypatch: pytest.MonkeyPatch,
                                            caplog: pytest.LogCaptureFixture) -> None:
    def broken(self: Store) -> dict[str, int]:
        msg = "database secret detail"
        raise RuntimeError(msg)

    with TestClient(create_app(svc), raise_server_exceptions=False) as c:
        monkeypatch.setattr(Store, "counts", broken)
        answer = c.get("/healthz")
    error = _error(answer, 500)
    assert "secret" not in answer.text
    assert "Traceback" not in answer.text
    assert error["request_id"] in error["message"]
    assert any(error["request_id"] in r.getMessage() for r in caplog.records)


def test_streamed_upload_over_limit_413(tmp_path: Path) -> None:
    """A chunked body (no Content-Length) is cut off at the limit too."""
    app = create_app(_settings(tmp_path, max_upload_bytes=100_000))
    boundary = "chirpcast-test"
    head = (f"--{boundary}\r\nContent-Disposition: form-data; name=\"settings\"\r\n\r\n"
            f'{{"trigger_time": {EVENT["trigger_time"]}}}\r\n--{boundary}\r\n'
            'Content-Disposition: form-data; name="strain"; filename="s.csv"\r\n\r\n')
    body = head.encode() + (DEMO / "strain.csv").read_bytes() + f"\r\n--{boundary}--\r\n".encode()

    async def chunks() -> Any:
        for i in range(0, len(body), 65536):
            yield body[i:i + 65536]

    async def send() -> httpx.Response:
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://test") as c:
            return await c.post("/api/v1/analyses", content=chunks(), headers={
                "content-type": f"multipart/form-data; boundary={boundary}"})

    assert _error(asyncio.run(send()), 413)["code"] == "too_large"


def test_openapi_documents_the_contract(client: TestClient) -> None:
    paths = client.get("/openapi.json").json()["paths"]
    assert {"/api/v1/analyses", "/api/v1/analyses/{analysis_id}", "/r/{token}",
            "/api/v1/analyses/{analysis_id}/events", "/healthz"} <= set(paths)
    assert "202" in paths["/api/v1/analyses"]["post"]["responses"]
