"""The web application: ``create_app(settings)`` builds it; nothing is opened at import.

Routes only read and enqueue; the analyses run in worker processes
(:mod:`service.worker`). API errors are JSON
``{"error": {"code", "message", "field", "request_id"}}``, pages answer errors with an
HTML page (:mod:`service.handlers`); every answer carries the security headers of
:mod:`service.security`, and bodies above the upload limit are refused while streaming.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
from collections.abc import AsyncIterator

import anyio
from fastapi import FastAPI

from estimator import __version__

from . import jobs
from .deps import RateLimiter, StoreDep
from .handlers import error_response, install_handlers, too_large_response
from .schemas import Health
from .security import BodyLimit, SecurityHeaders
from .settings import ServiceSettings
from .storage import open_store

__all__ = ["create_app", "error_response"]

log = logging.getLogger(__name__)


def create_app(settings: ServiceSettings | None = None) -> FastAPI:
    """Build the web application for ``settings`` (from the environment when ``None``)."""
    settings = settings or ServiceSettings()
    store = open_store(settings)

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
    app.state.limiter = RateLimiter(store, settings.rate_per_minute)
    store.initialize()  # cheap and idempotent; lets apps used without lifespan work too
    app.add_middleware(BodyLimit, limit=settings.max_upload_bytes, too_large=too_large_response)
    app.add_middleware(SecurityHeaders)  # added last: outside BodyLimit, sees its 413 too
    install_handlers(app)

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
