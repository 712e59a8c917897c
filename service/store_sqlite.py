"""The embedded database: one SQLite file in WAL mode, the store's default engine.

One writer at a time holds the whole file, so a transaction is ``BEGIN IMMEDIATE``
and needs no row locks; one server owns the file (``chirpcast serve`` locks the data
folder), so a starting server may take every running analysis as orphaned.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

__all__ = ["SqliteEngine"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS analyses (
    id TEXT PRIMARY KEY,
    state TEXT NOT NULL DEFAULT 'queued',
    stage TEXT NOT NULL DEFAULT 'queued',
    progress REAL NOT NULL DEFAULT 0,
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
    heartbeat REAL,
    created REAL NOT NULL,
    updated REAL NOT NULL,
    preview TEXT
);
CREATE INDEX IF NOT EXISTS analyses_state ON analyses (state, created);
CREATE UNIQUE INDEX IF NOT EXISTS analyses_idempotency
    ON analyses (owner, idempotency_key) WHERE idempotency_key IS NOT NULL;
CREATE TABLE IF NOT EXISTS api_keys (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    name TEXT NOT NULL,
    key_hash TEXT NOT NULL UNIQUE,
    created REAL NOT NULL,
    revoked REAL
);
CREATE TABLE IF NOT EXISTS rate_limits (
    bucket TEXT PRIMARY KEY,
    events TEXT NOT NULL,
    touched REAL NOT NULL
);
CREATE INDEX IF NOT EXISTS rate_limits_touched ON rate_limits (touched);
"""
#: Columns added after the first release: (table, name, SQL type), added to older files
#: when opened.
_ADDED_COLUMNS = (("analyses", "preview", "TEXT"), ("api_keys", "revoked", "REAL"))


class SqliteEngine:
    """The SQLite file at ``path``; every call opens its own short-lived connection."""

    name = "sqlite"
    shared = False
    skip_locked = ""
    integrity_error: type[Exception] = sqlite3.IntegrityError

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self.where = str(self.path)

    def initialize(self) -> None:
        """Create the schema (idempotent), upgrade an older file in place, use WAL mode."""
        self.path.parent.mkdir(parents=True, exist_ok=True)
        with self.connect() as db:
            db.execute("PRAGMA journal_mode=WAL")
            db.executescript(_SCHEMA)
        with self.transaction() as db:  # BEGIN IMMEDIATE: two processes opening it do not race
            for table, name, kind in _ADDED_COLUMNS:
                present = {str(r["name"]) for r in db.execute(f"PRAGMA table_info({table})")}
                if name not in present:
                    db.execute(f"ALTER TABLE {table} ADD COLUMN {name} {kind}")

    @contextmanager
    def connect(self) -> Iterator[sqlite3.Connection]:
        """A connection in autocommit mode."""
        db = sqlite3.connect(self.path, timeout=30.0, isolation_level=None)
        db.row_factory = sqlite3.Row
        db.execute("PRAGMA synchronous=FULL")
        db.execute("PRAGMA busy_timeout=30000")
        try:
            yield db
        finally:
            db.close()

    @contextmanager
    def transaction(self) -> Iterator[sqlite3.Connection]:
        """``BEGIN IMMEDIATE`` ... ``COMMIT`` (rolled back on an exception)."""
        with self.connect() as db:
            db.execute("BEGIN IMMEDIATE")
            try:
                yield db
            except BaseException:
                db.execute("ROLLBACK")
                raise
            db.execute("COMMIT")

    def engine_problems(self) -> list[str]:
        """What ``PRAGMA integrity_check`` finds (page, index and constraint damage)."""
        with self.connect() as db:
            found = [str(r[0]) for r in db.execute("PRAGMA integrity_check").fetchall()]
        return [] if found == ["ok"] else [f"SQLite integrity check: {f}" for f in found]
