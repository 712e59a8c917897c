"""The web application: ``create_app(settings)`` builds it; nothing is opened at import.

Routes only read and enqueue; the analyses run in worker processes
(:mod:`service.worker`). Every error answer is JSON
``{"error": {"code", "message", "field", "request_id"}}``; an unexpected
exception is logged with the request id the client sees, never shown.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import uuid
from collections.abc import AsyncIterator, Sequence
from typing import Any

import anyio
from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from estimator import __version__

from . import jobs
from .deps import ApiError, RateLimiter, StoreDep
from .schemas import ErrorBody, Health
from .settings import ServiceSettings
from .storage import Store

__all__ = ["create_app", "error_response"]

log = logging.getLogger(__name__)


class BodyTooLarge(Exception):
    """The request body passed the upload limit."""


class BodyLimit:
    """ASGI middleware: 413 for a declared or streamed body above ``limit`` bytes."""

    def __init__(self, app: ASGIApp, limit: int) -> None:
        self.app, self.limit = app, limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = dict(scope.get("headers") or [])
        declared = headers.get(b"content-length", b"").decode("latin-1")
        # multipart framing adds a little to the files; allow 64 KiB of it
        if declared.isdigit() and int(declared) > self.limit + 65536:
            response = error_response(413, "too_large", f"request body of {declared} bytes is"
                                      f" larger than the limit of {self.limit} bytes; send a"
                                      " shorter segment", request_id=uuid.uuid4().hex[:12])
            await response(scope, receive, send)
            return
        seen = 0

        async def counted() -> Message:
            nonlocal seen
            message = await receive()
            seen += len(message.get("body", b""))
            if seen > self.limit + 65536:
                raise BodyTooLarge
            return message

        await self.app(scope, counted, send)


def error_response(status: int, code: str, message: str, *, field: str | None = None,
                   request_id: str | None = None,
                   headers: dict[str, str] | None = None) -> JSONResponse:
    """The JSON error answer of the API."""
    body = ErrorBody.model_validate({"error": {"code": code, "message": message, "field": field,
                                               "request_id": request_id}})
    return JSONResponse(body.model_dump(), status_code=status, headers=headers)


def _request_id(request: Request) -> str:
    rid = getattr(request.state, "request_id", None)
    if rid is None:
        rid = request.state.request_id = uuid.uuid4().hex[:12]
    return str(rid)


def _field(loc: Sequence[Any]) -> str | None:
    parts = [str(p) for p in loc if p not in ("body", "query", "path", "header")]
    return parts[0] if parts else None


def _install_handlers(app: FastAPI) -> None:
    @app.exception_handler(ApiError)
    async def api_error(request: Request, exc: ApiError) -> JSONResponse:
        return error_response(exc.status, exc.code, exc.message, field=exc.field,
                              request_id=_request_id(request), headers=exc.headers)

    @app.exception_handler(RequestValidationError)
    async def invalid(request: Request, exc: RequestValidationError) -> JSONResponse:
        first = exc.errors()[0] if exc.errors() else {"loc": (), "msg": "invalid request"}
        field = _field(first.get("loc", ()))
        message = f"{field or 'request'}: {first.get('msg', 'invalid')}"
        if first.get("type") == "missing":
            message = f"{field}: this field is required"
        return error_response(422, "bad_request", message, field=field,
                              request_id=_request_id(request))

    @app.exception_handler(HTTPException)
    async def http_error(request: Request, exc: HTTPException) -> JSONResponse:
        if isinstance(exc.__cause__, BodyTooLarge):
            return error_response(413, "too_large", "upload larger than the limit; send a"
                                  " shorter segment", request_id=_request_id(request))
        codes = {404: "not_found", 405: "method_not_allowed", 400: "bad_request"}
        message = str(exc.detail) if exc.status_code != 404 else "no such page or resource"
        return error_response(exc.status_code, codes.get(exc.status_code, "http_error"),
                              message, request_id=_request_id(request),
                              headers=dict(exc.headers or {}))

    @app.exception_handler(Exception)
    async def unexpected(request: Request, exc: Exception) -> JSONResponse:
        if isinstance(exc, BodyTooLarge):
            return error_response(413, "too_large", "upload larger than the limit; send a"
                                  " shorter segment", request_id=_request_id(request))
        rid = _request_id(request)
        log.error("request %s %s failed (id %s)", request.method, request.url.path, rid,
                  exc_info=exc)
        return error_response(500, "internal", f"internal error; the operator can find it in"
                              f" the server log under id {rid}", request_id=rid)


def create_app(settings: ServiceSettings | None = None) -> FastAPI:
    """Build the web application for ``settings`` (from the environment when ``None``)."""
    settings = settings or ServiceSettings()
    store = Store(settings.data_dir)

    @contextlib.asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        await anyio.to_thread.run_sync(store.initialize)

        async def sweep() -> None:
            while True:
                await asyncio.sleep(settings.heartbeat_seconds * 2)
                try:
                    await anyio.to_thread.run_sync(lambda: jobs.requeue_stale(
                        store, stale_after=settings.stale_after_seconds,
                        max_attempts=settings.max_attempts))
                except Exception:
                    log.exception("requeue sweep failed")

        task = asyncio.create_task(sweep())
        try:
            yield
        finally:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task

    app = FastAPI(title="chirpcast", version=__version__, lifespan=lifespan,
                  description="Rapid Bayesian parameter estimation of compact-binary inspiral"
                  " candidates: submit a strain segment, follow it, read the shared report.")
    app.state.settings = settings
    app.state.store = store
    app.state.limiter = RateLimiter(settings.rate_per_minute)
    store.initialize()  # cheap and idempotent; lets apps used without lifespan work too
    app.add_middleware(BodyLimit, limit=settings.max_upload_bytes)
    _install_handlers(app)

    from .routes import analyses, pages, reports

    app.include_router(analyses.router)
    app.include_router(reports.router)
    app.include_router(pages.router)

    @app.get("/healthz", response_model=Health, tags=["health"])
    def healthz(store: StoreDep) -> Health:
        """Liveness and queue depth."""
        counts = store.counts()
        return Health(status="ok", version=__version__, queued=counts["queued"],
                      running=counts["running"])

    return app
