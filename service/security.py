"""Protection at the edge of the web app: body size limit, security headers, page policies.

* :class:`BodyLimit` answers 413 for a declared ``Content-Length`` above the limit
  before anything is read, and stops a streamed (chunked) body once it passes the limit.
* :class:`SecurityHeaders` puts ``X-Content-Type-Options: nosniff``,
  ``X-Frame-Options: DENY``, ``Referrer-Policy: no-referrer`` and, where a route set
  none, a content-security policy that allows nothing (``default-src 'none'``) on every
  answer.
* Pages (:func:`page_headers`) get a policy with a fresh nonce per answer: only the
  page's own ``<script>`` and ``<style>`` elements, which carry that nonce, run; images,
  fetches and event streams only from this origin. No ``'unsafe-inline'``.
* Stored HTML files (the worker's self-contained ``report.html``) are served sandboxed
  (:data:`FILE_POLICY`): their inline images and styles show, no script runs.
"""

from __future__ import annotations

import secrets
from collections.abc import Callable, Mapping

from starlette.datastructures import MutableHeaders
from starlette.responses import Response
from starlette.types import ASGIApp, Message, Receive, Scope, Send

__all__ = [
    "API_POLICY",
    "BASIC_HEADERS",
    "FILE_POLICY",
    "FRAMING_ALLOWANCE",
    "BodyLimit",
    "BodyTooLarge",
    "SecurityHeaders",
    "new_nonce",
    "page_headers",
    "page_policy",
]

#: Bytes of multipart framing (boundaries, part headers, the settings) allowed on top
#: of the upload limit before a body counts as too large.
FRAMING_ALLOWANCE = 65536
#: Headers of every answer (pages, API, files, errors).
BASIC_HEADERS: Mapping[str, str] = {
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Referrer-Policy": "no-referrer",
}
#: Policy of answers that are not pages (JSON, images, CSV): nothing may load or frame.
API_POLICY = "default-src 'none'; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"
#: Policy of stored HTML files: sandboxed (no script, no same-origin), inline images/styles.
FILE_POLICY = ("sandbox; default-src 'none'; img-src data:; style-src 'unsafe-inline';"
               " frame-ancestors 'none'; base-uri 'none'; form-action 'none'")
#: Paths of the interactive API documentation, which loads its own scripts: framing
#: is still denied there, but the strict default policy is not applied.
_DOCS = ("/docs", "/redoc")


class BodyTooLarge(Exception):
    """The request body passed the upload limit (raised by :class:`BodyLimit`'s receive)."""


def new_nonce() -> str:
    """A fresh content-security-policy nonce (128 random bits, base64url)."""
    return secrets.token_urlsafe(16)


def page_policy(nonce: str) -> str:
    """The content-security policy of a page rendered with ``nonce``."""
    return (f"default-src 'none'; script-src 'nonce-{nonce}'; style-src 'nonce-{nonce}';"
            " img-src 'self' data:; connect-src 'self'; form-action 'self';"
            " base-uri 'none'; frame-ancestors 'none'")


def page_headers(nonce: str) -> dict[str, str]:
    """Headers of a page: its nonce policy, never cached, no Referer (share tokens)."""
    return {**BASIC_HEADERS, "Content-Security-Policy": page_policy(nonce),
            "Cache-Control": "no-store"}


class SecurityHeaders:
    """ASGI middleware: :data:`BASIC_HEADERS` on every answer, a policy where none was set."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path = str(scope.get("path", ""))
        docs = any(path == p or path.startswith(p + "/") for p in _DOCS)

        async def with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = MutableHeaders(scope=message)
                for name, value in BASIC_HEADERS.items():
                    if name not in headers:
                        headers[name] = value
                if "content-security-policy" not in headers:
                    headers["Content-Security-Policy"] = ("frame-ancestors 'none'" if docs
                                                          else API_POLICY)
            await send(message)

        await self.app(scope, receive, with_headers)


class BodyLimit:
    """ASGI middleware: 413 for a declared or streamed body above ``limit`` bytes.

    ``too_large(declared, limit)`` builds the answer to a declared ``Content-Length``
    that is too large; it is sent without reading any of the body. A body without (or
    with a false) ``Content-Length`` is counted as it streams: past the limit the
    receive raises :class:`BodyTooLarge`, which the upload route turns into a 413.
    """

    def __init__(self, app: ASGIApp, limit: int,
                 too_large: Callable[[int, int], Response]) -> None:
        self.app, self.limit, self.too_large = app, limit, too_large

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        ceiling = self.limit + FRAMING_ALLOWANCE
        headers = dict(scope.get("headers") or [])
        declared = headers.get(b"content-length", b"").decode("latin-1").strip()
        if declared.isdigit() and int(declared) > ceiling:
            response = self.too_large(int(declared), self.limit)
            await response(scope, receive, send)
            return
        seen = 0

        async def counted() -> Message:
            nonlocal seen
            message = await receive()
            seen += len(message.get("body", b""))
            if seen > ceiling:
                raise BodyTooLarge
            return message

        await self.app(scope, counted, send)
