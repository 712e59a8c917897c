"""Error answers: JSON for the API, a friendly HTML page for browsers.

The API (``/api/...``, ``/healthz``, ``/openapi.json``) always answers
``{"error": {"code", "message", "field", "request_id"}}``. The pages (``/`` and the
share links ``/r/...``) answer with ``templates/error.html``, unless the client asks
for JSON only (``Accept: application/json``). Any other path (no route) gets the page
when the client accepts ``text/html`` (a browser) and JSON otherwise. An unexpected
exception is logged with the request id the client sees, never shown; one that says
the data folder is full or not writable is answered 507 (:mod:`service.storage_faults`).
"""

from __future__ import annotations

import logging
import sqlite3
import uuid
from collections.abc import Mapping, Sequence
from http import HTTPStatus
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import HTMLResponse, JSONResponse, Response
from starlette.exceptions import HTTPException

from .deps import ApiError
from .routes.pages import UPLOAD_URL, render_page
from .schemas import ErrorBody
from .security import API_POLICY, BASIC_HEADERS, BodyTooLarge, new_nonce, page_headers
from .storage_faults import is_storage_fault, storage_error

__all__ = [
    "error_page",
    "error_response",
    "install_handlers",
    "too_large_response",
    "wants_html",
]

log = logging.getLogger(__name__)

_API_PATHS = ("/healthz", "/openapi.json")
_TOO_LARGE = "upload larger than the limit; send a shorter segment"


def error_response(status: int, code: str, message: str, *, field: str | None = None,
                   request_id: str | None = None,
                   headers: Mapping[str, str] | None = None) -> JSONResponse:
    """The JSON error answer of the API."""
    body = ErrorBody.model_validate({"error": {"code": code, "message": message, "field": field,
                                               "request_id": request_id}})
    return JSONResponse(body.model_dump(), status_code=status, headers={
        **BASIC_HEADERS, "Content-Security-Policy": API_POLICY, **(headers or {})})


def too_large_response(declared: int, limit: int) -> JSONResponse:
    """413 for a declared ``Content-Length`` above the limit (sent before any body is read)."""
    return error_response(413, "too_large", f"request body of {declared} bytes is larger than"
                          f" the limit of {limit} bytes; send a shorter segment",
                          request_id=uuid.uuid4().hex[:12])


def wants_html(path: str, accept: str) -> bool:
    """Whether an error at ``path`` is answered with a page (else JSON); see the module."""
    if path == "/api" or path.startswith("/api/") or path in _API_PATHS:
        return False
    accept = accept.lower()
    html = "text/html" in accept
    if path == "/" or path == "/r" or path.startswith("/r/"):
        return html or "application/json" not in accept
    return html


def error_page(status: int, message: str, *, path: str, request_id: str,
               headers: Mapping[str, str] | None = None) -> HTMLResponse:
    """The HTML error page (``templates/error.html``) with the page policy and headers."""
    nonce = new_nonce()
    share = path.startswith("/r/")
    if status == 404 and share:
        kind, title = "share", "This report link is unknown or was withdrawn"
    elif status == 404:
        kind, title = "missing", "There is no page at this address"
    elif status >= 500:
        kind, title = "internal", "Something went wrong on our side"
    else:
        kind = "other"
        try:
            title = f"{HTTPStatus(status).phrase} (HTTP {status})"
        except ValueError:
            title = f"The request could not be answered (HTTP {status})"
    html = render_page("error.html", {
        "status": status, "kind": kind, "title": title, "message": message,
        "request_id": request_id, "upload_url": UPLOAD_URL, "csp_nonce": nonce})
    return HTMLResponse(html, status_code=status, headers={**page_headers(nonce),
                                                           **(headers or {})})


def _request_id(request: Request) -> str:
    rid = getattr(request.state, "request_id", None)
    if rid is None:
        rid = request.state.request_id = uuid.uuid4().hex[:12]
    return str(rid)


def _answer(request: Request, status: int, code: str, message: str, *,
            field: str | None = None, headers: Mapping[str, str] | None = None) -> Response:
    """A page or the JSON error, as :func:`wants_html` decides for this request."""
    rid = _request_id(request)
    if wants_html(request.url.path, request.headers.get("accept", "")):
        try:
            return error_page(status, message, path=request.url.path, request_id=rid,
                              headers=headers)
        except Exception:  # a broken template must not hide the error itself
            log.exception("error page failed for request %s; answering JSON", rid)
    return error_response(status, code, message, field=field, request_id=rid, headers=headers)


def _field(loc: Sequence[Any]) -> str | None:
    parts = [str(p) for p in loc if p not in ("body", "query", "path", "header")]
    return parts[0] if parts else None


def install_handlers(app: FastAPI) -> None:
    """Register the error handlers of ``app`` (API errors, validation, HTTP, unexpected)."""

    @app.exception_handler(ApiError)
    async def api_error(request: Request, exc: ApiError) -> Response:
        return _answer(request, exc.status, exc.code, exc.message, field=exc.field,
                       headers=exc.headers)

    @app.exception_handler(RequestValidationError)
    async def invalid(request: Request, exc: RequestValidationError) -> Response:
        first = exc.errors()[0] if exc.errors() else {"loc": (), "msg": "invalid request"}
        field = _field(first.get("loc", ()))
        message = f"{field or 'request'}: {first.get('msg', 'invalid')}"
        if first.get("type") == "missing":
            message = f"{field}: this field is required"
        return _answer(request, 422, "bad_request", message, field=field)

    @app.exception_handler(HTTPException)
    async def http_error(request: Request, exc: HTTPException) -> Response:
        if isinstance(exc.__cause__, BodyTooLarge):
            return _answer(request, 413, "too_large", _TOO_LARGE)
        codes = {404: "not_found", 405: "method_not_allowed", 400: "bad_request"}
        message = str(exc.detail) if exc.status_code != 404 else "no such page or resource"
        return _answer(request, exc.status_code, codes.get(exc.status_code, "http_error"),
                       message, headers=dict(exc.headers or {}))

    # Registered for these classes (not only under Exception), a storage fault is answered
    # inside the app: the catch-all below answers too, but Starlette then re-raises and the
    # server log gets a traceback for a condition already reported in one line.
    async def storage_fault(request: Request, exc: Exception) -> Response:
        if not is_storage_fault(exc):
            raise exc  # to the catch-all: a 500 logged with its request id
        full = storage_error(exc)
        return _answer(request, full.status, full.code, full.message, headers=full.headers)

    app.add_exception_handler(OSError, storage_fault)
    app.add_exception_handler(sqlite3.Error, storage_fault)

    @app.exception_handler(Exception)
    async def unexpected(request: Request, exc: Exception) -> Response:
        if isinstance(exc, BodyTooLarge):
            return _answer(request, 413, "too_large", _TOO_LARGE)
        if is_storage_fault(exc):  # e.g. the rate limit's write to a read-only database
            full = storage_error(exc)
            return _answer(request, full.status, full.code, full.message, headers=full.headers)
        rid = _request_id(request)
        log.error("request %s %s failed (id %s)", request.method, request.url.path, rid,
                  exc_info=exc)
        return _answer(request, 500, "internal", f"internal error; the operator can find it"
                       f" in the server log under id {rid}")
