"""The tables of the store, written once for both engines.

Each statement is idempotent. ``{real}`` stands for the engine's double-precision
type and ``{key_id}`` for its auto-numbered primary key; :func:`schema` fills them in.
"""

from __future__ import annotations

__all__ = ["schema"]

_STATEMENTS = (
    """CREATE TABLE IF NOT EXISTS analyses (
        id TEXT PRIMARY KEY,
        state TEXT NOT NULL DEFAULT 'queued',
        stage TEXT NOT NULL DEFAULT 'queued',
        progress {real} NOT NULL DEFAULT 0,
        error_message TEXT,
        error_field TEXT,
        label TEXT NOT NULL DEFAULT '',
        request TEXT NOT NULL,
        inputs TEXT NOT NULL,
        owner TEXT NOT NULL DEFAULT '',
        idempotency_key TEXT,
        share_hash TEXT UNIQUE,
        share_generation INTEGER NOT NULL DEFAULT 0,
        worker TEXT,
        attempts INTEGER NOT NULL DEFAULT 0,
        heartbeat {real},
        created {real} NOT NULL,
        updated {real} NOT NULL,
        preview TEXT
    )""",
    "CREATE INDEX IF NOT EXISTS analyses_state ON analyses (state, created)",
    "CREATE UNIQUE INDEX IF NOT EXISTS analyses_idempotency"
    " ON analyses (owner, idempotency_key) WHERE idempotency_key IS NOT NULL",
    """CREATE TABLE IF NOT EXISTS api_keys (
        id {key_id},
        name TEXT NOT NULL,
        key_hash TEXT NOT NULL UNIQUE,
        created {real} NOT NULL,
        revoked {real}
    )""",
    """CREATE TABLE IF NOT EXISTS rate_limits (
        bucket TEXT PRIMARY KEY,
        events TEXT NOT NULL,
        touched {real} NOT NULL
    )""",
    "CREATE INDEX IF NOT EXISTS rate_limits_touched ON rate_limits (touched)",
)


def schema(*, real: str, key_id: str) -> tuple[str, ...]:
    """The schema's statements with the engine's types filled in."""
    return tuple(s.format(real=real, key_id=key_id) for s in _STATEMENTS)
