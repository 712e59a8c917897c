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

from .store_schema import schema

__all__ = ["SqliteEngine"]

_SCHEMA = ";\n".join(schema(real="REAL", key_id="INTEGER PRIMARY KEY AUTOINCREMENT")) + ";"
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
