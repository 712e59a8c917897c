"""The web layer's edge: the API key before the body, body size limits while streaming.

The tests call the ASGI application directly with a ``receive()`` that counts every
body byte it hands out, so "nothing of the body was read" is measured, not assumed.
External references: ASGI HTTP connection scope and messages (ASGI specification 3.0,
"HTTP & WebSocket ASGI Message Format"); multipart/form-data framing from RFC 7578;
status codes 401, 413, 422 and 429 from RFC 9110 and RFC 6585. Error pages and
security headers: test_pages_security.py, which shares the helpers here.
"""

from __future__ import annotations

import asyncio
import json
import secrets
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from service import jobs
from service.app import create_app
from service.pipeline import PLOT_FILES
from service.settings import ServiceSettings
from service.storage import Store, hash_secret

from .test_report import make_summary, tiny_png

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
TRIGGER = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))["trigger_time"]
AS_JSON = {"Accept": "application/json"}


def settings_for(data_dir: Path, **overrides: Any) -> ServiceSettings:
    return ServiceSettings(data_dir=data_dir, workers=1, heartbeat_seconds=0.2, **overrides)


def finished_share(store: Store, scratch: Path) -> tuple[str, str]:
    """A done analysis (the report test's summary, 2x1 PNG plots); returns (id, token)."""
    aid = secrets.token_hex(16)
    token = store.share_token(aid, 0)
    store.analysis_dir(aid).mkdir(parents=True)
    store.insert_analysis(analysis_id=aid, label="drill-0042", inputs={}, owner="",
                          request={"strain": "inputs/strain/s.csv", "psd": None},
                          idempotency_key=None, share_hash=hash_secret(token))
    job = jobs.claim(store, "test-worker")
    if job is None or job.id != aid:
        pytest.fail(f"the analysis just queued was not claimed: {job}")
    scratch.mkdir(parents=True)
    (scratch / "summary.json").write_text(json.dumps(make_summary()), encoding="utf-8")
    for name in PLOT_FILES.values():
        tiny_png(scratch / name)
    (scratch / "report.html").write_text("<!doctype html><p>stored</p>", encoding="utf-8")
    if not jobs.finish(store, job, scratch):
        pytest.fail("the claimed analysis could not be finished")
    return aid, token


def multipart(fields: list[tuple[str, str | None, bytes]]) -> tuple[str, bytes]:
    """(content type, body) of a multipart/form-data body (RFC 7578)."""
    boundary = "chirpcast-" + secrets.token_hex(8)
    parts = []
    for name, filename, data in fields:
        disposition = f'form-data; name="{name}"' + (f'; filename="{filename}"' if filename
                                                      else "")
        parts.append(f"--{boundary}\r\nContent-Disposition: {disposition}\r\n\r\n".encode()
                     + data + b"\r\n")
    return f"multipart/form-data; boundary={boundary}", b"".join(parts) + (
        f"--{boundary}--\r\n".encode())


def demo_upload(strain: bytes | None = None) -> tuple[str, bytes]:
    settings = json.dumps({"trigger_time": TRIGGER, "spin_max": 0.0}).encode()
    return multipart([("settings", None, settings), ("strain", "strain.csv",
                      strain if strain is not None else (DEMO / "strain.csv").read_bytes())])


@dataclass
class Answer:
    status: int
    headers: dict[str, str]
    body: bytes
    consumed: int  # body bytes the application took from receive()

    def error(self) -> dict[str, Any]:
        data = json.loads(self.body)
        assert set(data) == {"error"}, data
        assert set(data["error"]) == {"code", "message", "field", "request_id"}, data
        assert data["error"]["message"], data
        assert data["error"]["request_id"], data
        return dict(data["error"])


def call(app: FastAPI, method: str, path: str, *, headers: dict[str, str] | None = None,
         body: bytes = b"", chunk: int = 16384, declare_length: bool = True) -> Answer:
    """One request straight through the ASGI interface, counting the body bytes read."""
    pieces = [body[i:i + chunk] for i in range(0, len(body), chunk)] or [b""]
    raw = [(k.lower().encode(), v.encode()) for k, v in (headers or {}).items()]
    if declare_length and body:
        raw.append((b"content-length", str(len(body)).encode()))
    scope = {"type": "http", "asgi": {"version": "3.0"}, "http_version": "1.1",
             "method": method, "scheme": "http", "path": path, "raw_path": path.encode(),
             "query_string": b"", "root_path": "", "headers": raw,
             "client": ("127.0.0.1", 40000), "server": ("127.0.0.1", 8000)}
    consumed, sent = 0, []

    async def receive() -> dict[str, Any]:
        nonlocal consumed
        if not pieces:
            return {"type": "http.disconnect"}
        piece = pieces.pop(0)
        consumed += len(piece)
        return {"type": "http.request", "body": piece, "more_body": bool(pieces)}

    async def send(message: dict[str, Any]) -> None:
        sent.append(message)

    asyncio.run(app(scope, receive, send))
    start = next(m for m in sent if m["type"] == "http.response.start")
    answer_headers = {k.decode().lower(): v.decode() for k, v in start["headers"]}
    data = b"".join(m.get("body", b"") for m in sent if m["type"] == "http.response.body")
    return Answer(start["status"], answer_headers, data, consumed)


@pytest.fixture
def svc(tmp_path: Path) -> ServiceSettings:
    return settings_for(tmp_path / "data", max_upload_bytes=2_000_000)


def leftovers(svc: ServiceSettings) -> list[Path]:
    """Files and folders left in data_dir/tmp (uploads in progress)."""
    return sorted((svc.data_dir / "tmp").rglob("*"))


# -- 1. the key (and the rate) before the body ------------------------------------------

@pytest.mark.parametrize("presented", [{}, {"X-API-Key": "cck_wrong"},
                                       {"Authorization": "Bearer cck_wrong"}])
def test_no_or_wrong_key_401_without_reading_the_body(svc: ServiceSettings,
                                                      presented: dict[str, str]) -> None:
    app = create_app(svc)
    Store(svc.data_dir).add_key("pipeline")
    kind, body = demo_upload()
    answer = call(app, "POST", "/api/v1/analyses", body=body,
                  headers={"content-type": kind, **presented})
    assert answer.status == 401
    assert answer.error()["code"] == "unauthorized"
    assert answer.headers["www-authenticate"] == "Bearer"
    assert answer.consumed == 0, f"{answer.consumed} body bytes read before the 401"
    assert leftovers(svc) == []


def test_valid_key_upload_still_works(svc: ServiceSettings) -> None:
    app = create_app(svc)
    key = Store(svc.data_dir).add_key("pipeline")
    kind, body = demo_upload()
    answer = call(app, "POST", "/api/v1/analyses", body=body,
                  headers={"content-type": kind, "X-API-Key": key})
    assert answer.status == 202, answer.body
    assert answer.consumed == len(body)
    submitted = json.loads(answer.body)
    status = call(app, "GET", submitted["status_url"], headers=AS_JSON)
    assert json.loads(status.body)["state"] == "queued"
    assert leftovers(svc) == []


def test_rate_limit_429_without_reading_the_body(tmp_path: Path) -> None:
    svc = settings_for(tmp_path / "data", rate_per_minute=1)
    app = create_app(svc)
    kind, body = demo_upload()
    assert call(app, "POST", "/api/v1/analyses", body=body,
                headers={"content-type": kind}).status == 202
    limited = call(app, "POST", "/api/v1/analyses", body=body, headers={"content-type": kind})
    assert limited.status == 429
    assert limited.error()["code"] == "rate_limited"
    assert limited.consumed == 0


# -- 2. bodies above the limit, declared or streamed ----------------------------------------

def healthy_after(app: FastAPI, svc: ServiceSettings) -> None:
    """/healthz answers and a normal submission is accepted; nothing left in data_dir/tmp."""
    assert leftovers(svc) == []
    assert json.loads(call(app, "GET", "/healthz").body)["status"] == "ok"
    kind, body = demo_upload()
    assert call(app, "POST", "/api/v1/analyses", body=body,
                headers={"content-type": kind}).status == 202
    assert leftovers(svc) == []


def test_declared_length_over_limit_413_before_reading(svc: ServiceSettings) -> None:
    app = create_app(svc)
    kind, body = demo_upload(strain=b"1e-21\n" * 500_000)  # 3 MB > 2 MB + framing
    answer = call(app, "POST", "/api/v1/analyses", body=body, headers={"content-type": kind})
    assert answer.status == 413
    assert answer.error()["code"] == "too_large"
    assert answer.consumed == 0
    healthy_after(app, svc)


def test_chunked_body_over_limit_413_mid_stream(svc: ServiceSettings) -> None:
    app = create_app(svc)
    kind, body = demo_upload(strain=b"1e-21\n" * 1_000_000)  # 6 MB, no Content-Length
    answer = call(app, "POST", "/api/v1/analyses", body=body, headers={"content-type": kind},
                  declare_length=False)
    assert answer.status == 413
    assert answer.error()["code"] == "too_large"
    # stopped one chunk after the limit plus the framing allowance, far before the end
    assert svc.max_upload_bytes < answer.consumed <= svc.max_upload_bytes + 65536 + 16384
    assert answer.consumed < len(body) / 2
    healthy_after(app, svc)


def test_file_over_limit_inside_framing_allowance_413_and_removed(tmp_path: Path) -> None:
    svc = settings_for(tmp_path / "data", max_upload_bytes=1_200_000)
    app = create_app(svc)
    # the body fits the allowance (limit + 64 KiB), the strain file alone does not
    kind, body = demo_upload(strain=(DEMO / "strain.csv").read_bytes() + b"0,0\n" * 12_000)
    assert svc.max_upload_bytes < len(body) <= svc.max_upload_bytes + 65536
    answer = call(app, "POST", "/api/v1/analyses", body=body, headers={"content-type": kind})
    assert answer.status == 413
    assert answer.error()["field"] == "strain"
    assert list((svc.data_dir / "analyses").iterdir()) == []
    healthy_after(app, svc)


def test_list_offset_beyond_the_database_integers_is_422(svc: ServiceSettings) -> None:
    """Found by the fuzzing (test_fuzz.py): an offset of 2**63 or more was a 500."""
    with TestClient(create_app(svc)) as client:
        answer = client.get("/api/v1/analyses", params={"offset": 2**64})
    assert answer.status_code == 422
    assert answer.json()["error"]["field"] == "offset"
