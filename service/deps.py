"""Dependencies of the routes: settings, store, caller identity, rate limit, API errors.

Route signatures stay short with the ``Annotated`` aliases (``SettingsDep``,
``StoreDep``, ``KeyDep``...); tests swap the settings by building their own app
with :func:`service.app.create_app`.
"""

from __future__ import annotations

import math
from typing import Annotated

from fastapi import Depends, Header, Request

from .settings import ServiceSettings
from .storage import Store
from .store_rates import take_slot

__all__ = [
    "ApiError",
    "KeyDep",
    "OptionalKeyDep",
    "RateLimitedKeyDep",
    "RateLimiter",
    "SettingsDep",
    "StoreDep",
]


class ApiError(Exception):
    """An error answer: HTTP status, a stable code, a message for people, the field."""

    def __init__(
        self,
        status: int,
        code: str,
        message: str,
        *,
        field: str | None = None,
        headers: dict[str, str] | None = None,
    ) -> None:
        super().__init__(message)
        self.status, self.code, self.message = status, code, message
        self.field, self.headers = field, headers or {}


class RateLimiter:
    """At most ``per_minute`` events per key in any 60 s window, counted in the database.

    Every web process using the same store (SQLite file or PostgreSQL database) shares
    the count, so the limit holds however many processes serve.
    """

    def __init__(self, store: Store, per_minute: int) -> None:
        self.store, self.per_minute = store, per_minute

    def check(self, key: str, now: float | None = None) -> float:
        """Record one event; return 0, or the seconds to wait when over the limit."""
        return take_slot(self.store, key, per_minute=self.per_minute, window=60.0, now=now)


def get_settings(request: Request) -> ServiceSettings:
    """The app's settings (set by create_app)."""
    settings: ServiceSettings = request.app.state.settings
    return settings


def get_store(request: Request) -> Store:
    """The app's store (set by create_app)."""
    store: Store = request.app.state.store
    return store


SettingsDep = Annotated[ServiceSettings, Depends(get_settings)]
StoreDep = Annotated[Store, Depends(get_store)]


def _presented_key(authorization: str | None, x_api_key: str | None) -> str | None:
    if x_api_key:
        return x_api_key.strip()
    if authorization:
        scheme, _, value = authorization.partition(" ")
        if scheme.lower() == "bearer" and value.strip():
            return value.strip()
    return None


def optional_key(
    store: StoreDep,
    authorization: Annotated[str | None, Header()] = None,
    x_api_key: Annotated[str | None, Header()] = None,
) -> str | None:
    """The caller's key name; ``""`` when no keys exist; ``None`` when not authenticated."""
    if not store.has_keys():
        return ""
    key = _presented_key(authorization, x_api_key)
    return store.key_name(key) if key else None


def require_key(owner: Annotated[str | None, Depends(optional_key)]) -> str:
    """The caller's key name (``""`` while no keys exist); 401 without a valid key."""
    if owner is None:
        raise ApiError(
            401,
            "unauthorized",
            "this request needs an API key: send 'Authorization: Bearer <key>' or"
            " 'X-API-Key: <key>' (the operator creates one with 'chirpcast keys add NAME')",
            headers={"WWW-Authenticate": "Bearer"},
        )
    return owner


def rate_limited_key(request: Request, owner: Annotated[str, Depends(require_key)]) -> str:
    """As :func:`require_key`, and count one submission against the key's rate (429)."""
    limiter: RateLimiter = request.app.state.limiter
    bucket = owner or f"anonymous:{request.client.host if request.client else ''}"
    wait = limiter.check(bucket)
    if wait > 0:
        raise ApiError(
            429,
            "rate_limited",
            f"more than {limiter.per_minute} submissions in a minute with this key;"
            f" retry in {math.ceil(wait)} s",
            headers={"Retry-After": str(math.ceil(wait))},
        )
    return owner


OptionalKeyDep = Annotated[str | None, Depends(optional_key)]
KeyDep = Annotated[str, Depends(require_key)]
RateLimitedKeyDep = Annotated[str, Depends(rate_limited_key)]
