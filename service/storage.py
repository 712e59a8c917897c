"""The embedded store: one SQLite file (WAL mode) plus a folder per analysis.

``data_dir/chirpcast.sqlite3`` holds analyses, API keys (sha256 of the key) and
share-token hashes; ``data_dir/analyses/<id>/inputs/`` the uploaded files and
``data_dir/analyses/<id>/output/`` the pipeline's finished output folder. A network
keeps its files in ``inputs/detectors/<NAME>/{strain,psd}/`` and ``inputs/sites/``;
its stored ``request`` (JSON) says ``"kind": "network"`` and lists the detectors and the
site file, so both kinds share one schema (older databases need no change). Every call
opens its own short-lived connection, so the store may be used from threads and
processes alike.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import os
import secrets
import sqlite3
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["FINAL_STATES", "NETWORK", "STATES", "Analysis", "Store", "hash_secret"]

STATES = ("queued", "running", "done", "failed", "cancelled")
FINAL_STATES = frozenset({"done", "failed", "cancelled"})
#: ``request["kind"]`` of a several-detector analysis (a one-detector request has no kind).
NETWORK = "network"

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
    created REAL NOT NULL
);
"""
#: Columns added after the first release: (name, SQL type), added to older files when opened.
_ADDED_COLUMNS = (("preview", "TEXT"),)


def hash_secret(value: str) -> str:
    """sha256 hex digest of a random key or token (enough for 128+ bit secrets)."""
    return hashlib.sha256(value.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class Analysis:
    """One row of the analyses table, as the routes and workers read it."""

    id: str
    state: str
    stage: str
    progress: float
    error_message: str | None
    error_field: str | None
    label: str
    request: dict[str, Any]
    inputs: dict[str, Any]
    owner: str
    idempotency_key: str | None
    share_generation: int
    shared: bool
    worker: str | None
    attempts: int
    heartbeat: float | None
    created: float
    updated: float
    #: The Fisher-matrix first look (``FisherEstimate.to_dict()``) once the fit is found.
    preview: dict[str, Any] | None = None

    @classmethod
    def from_row(cls, row: sqlite3.Row) -> Analysis:
        """Build from a ``SELECT *`` row."""
        values = dict(row)
        values["shared"] = values.pop("share_hash", None) is not None
        values["request"] = json.loads(values["request"])
        values["inputs"] = json.loads(values["inputs"])
        preview = values.pop("preview", None)
        values["preview"] = json.loads(preview) if preview else None
        return cls(**values)

    @property
    def network(self) -> bool:
        """Whether this is a several-detector analysis."""
        return self.request.get("kind") == NETWORK

    @property
    def detectors(self) -> list[dict[str, str | None]]:
        """``[{"name", "strain", "psd"}]``: each detector's site name and file names.

        A one-detector analysis gives one entry whose ``name`` is ``None``; ``psd`` is
        ``None`` where the spectrum is estimated from the strain.
        """
        if not self.network:
            return [{"name": None, "strain": _file_name(self.request.get("strain")),
                     "psd": _file_name(self.request.get("psd"))}]
        return [{"name": str(d["name"]), "strain": _file_name(d.get("strain")),
                 "psd": _file_name(d.get("psd"))} for d in self.request.get("detectors", [])]

    @property
    def sites_file(self) -> str | None:
        """The uploaded site file's name (``None``: the shipped sites, or one detector)."""
        return _file_name(self.request.get("sites"))


class Store:
    """SQLite database and analysis folders under one data folder."""

    def __init__(self, data_dir: Path) -> None:
        self.data_dir = Path(data_dir)
        self.db_path = self.data_dir / "chirpcast.sqlite3"

    # -- setup and connections -------------------------------------------------
    def initialize(self) -> None:
        """Create the folders and the schema (idempotent), upgrade an older file, use WAL mode."""
        (self.data_dir / "analyses").mkdir(parents=True, exist_ok=True)
        (self.data_dir / "tmp").mkdir(parents=True, exist_ok=True)
        with self.connect() as db:
            db.execute("PRAGMA journal_mode=WAL")
            db.executescript(_SCHEMA)
        self._add_missing_columns()

    def _add_missing_columns(self) -> None:
        """Add the columns of :data:`_ADDED_COLUMNS` that an older database lacks, in place."""
        with self.transaction() as db:  # BEGIN IMMEDIATE: two processes opening it do not race
            present = {str(r["name"]) for r in db.execute("PRAGMA table_info(analyses)")}
            for name, kind in _ADDED_COLUMNS:
                if name not in present:
                    db.execute(f"ALTER TABLE analyses ADD COLUMN {name} {kind}")

    @contextmanager
    def connect(self) -> Iterator[sqlite3.Connection]:
        """A connection in autocommit mode (use :meth:`transaction` for several statements)."""
        db = sqlite3.connect(self.db_path, timeout=30.0, isolation_level=None)
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

    # -- folders ---------------------------------------------------------------
    def analysis_dir(self, analysis_id: str) -> Path:
        """``data_dir/analyses/<id>``."""
        return self.data_dir / "analyses" / analysis_id

    def inputs_dir(self, analysis_id: str) -> Path:
        """Where the uploaded files of an analysis are kept."""
        return self.analysis_dir(analysis_id) / "inputs"

    def output_dir(self, analysis_id: str) -> Path:
        """The finished output folder (present only once the analysis is done)."""
        return self.analysis_dir(analysis_id) / "output"

    def scratch_dir(self) -> Path:
        """A fresh private folder for an upload in progress."""
        path = self.data_dir / "tmp" / secrets.token_hex(8)
        path.mkdir(parents=True)
        return path

    # -- analyses --------------------------------------------------------------
    def insert_analysis(
        self,
        *,
        analysis_id: str,
        label: str,
        request: dict[str, Any],
        inputs: dict[str, Any],
        owner: str,
        idempotency_key: str | None,
        share_hash: str,
    ) -> None:
        """Commit a new queued analysis (raises sqlite3.IntegrityError on a reused key)."""
        now = time.time()
        with self.connect() as db:
            db.execute(
                "INSERT INTO analyses (id, label, request, inputs, owner, idempotency_key,"
                " share_hash, created, updated) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    analysis_id,
                    label,
                    json.dumps(request),
                    json.dumps(inputs),
                    owner,
                    idempotency_key,
                    share_hash,
                    now,
                    now,
                ),
            )

    def get(self, analysis_id: str) -> Analysis | None:
        """The analysis with this id, or ``None``."""
        with self.connect() as db:
            row = db.execute("SELECT * FROM analyses WHERE id = ?", (analysis_id,)).fetchone()
        return Analysis.from_row(row) if row is not None else None

    def by_idempotency_key(self, owner: str, key: str) -> Analysis | None:
        """The analysis an earlier submission with this Idempotency-Key made, or ``None``."""
        with self.connect() as db:
            row = db.execute(
                "SELECT * FROM analyses WHERE owner = ? AND idempotency_key = ?", (owner, key)
            ).fetchone()
        return Analysis.from_row(row) if row is not None else None

    def by_share_hash(self, share_hash: str) -> Analysis | None:
        """The analysis whose current share token hashes to ``share_hash``, or ``None``."""
        with self.connect() as db:
            row = db.execute(
                "SELECT * FROM analyses WHERE share_hash = ?", (share_hash,)
            ).fetchone()
        return Analysis.from_row(row) if row is not None else None

    def list(self, *, limit: int, offset: int) -> tuple[list[Analysis], int]:
        """A page of analyses, newest first, and the total count."""
        with self.connect() as db:
            rows = db.execute(
                "SELECT * FROM analyses ORDER BY created DESC, id LIMIT ? OFFSET ?",
                (limit, offset),
            ).fetchall()
            total = db.execute("SELECT COUNT(*) FROM analyses").fetchone()[0]
        return [Analysis.from_row(r) for r in rows], int(total)

    def counts(self) -> dict[str, int]:
        """Number of analyses in each state."""
        with self.connect() as db:
            rows = db.execute("SELECT state, COUNT(*) FROM analyses GROUP BY state").fetchall()
        found = {str(r[0]): int(r[1]) for r in rows}
        return {s: found.get(s, 0) for s in STATES}

    def set_share(self, analysis_id: str, share_hash: str | None, generation: int) -> None:
        """Replace (or, with ``None``, revoke) the share token of an analysis."""
        with self.connect() as db:
            db.execute(
                "UPDATE analyses SET share_hash = ?, share_generation = ?, updated = ?"
                " WHERE id = ?",
                (share_hash, generation, time.time(), analysis_id),
            )

    # -- API keys and the share secret -------------------------------------------
    def add_key(self, name: str) -> str:
        """Create an API key called ``name``; return it (only its hash is stored)."""
        key = "cck_" + secrets.token_urlsafe(32)
        with self.connect() as db:
            db.execute(
                "INSERT INTO api_keys (name, key_hash, created) VALUES (?, ?, ?)",
                (name, hash_secret(key), time.time()),
            )
        return key

    def key_name(self, key: str) -> str | None:
        """The name of this API key, or ``None`` if it is not one of ours."""
        with self.connect() as db:
            row = db.execute(
                "SELECT name FROM api_keys WHERE key_hash = ?", (hash_secret(key),)
            ).fetchone()
        return str(row[0]) if row is not None else None

    def has_keys(self) -> bool:
        """Whether any API key exists (then submit/list/cancel need one)."""
        with self.connect() as db:
            return db.execute("SELECT 1 FROM api_keys LIMIT 1").fetchone() is not None

    def share_secret(self) -> bytes:
        """The server's 256-bit secret that share tokens are derived from (made once)."""
        path = self.data_dir / "share.secret"
        if not path.exists():
            tmp = path.with_suffix(f".tmp-{os.getpid()}")
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
            with os.fdopen(fd, "wb") as fh:
                fh.write(secrets.token_bytes(32))
            try:
                os.link(tmp, path)  # exclusive: a racing process keeps the first secret
            except FileExistsError:
                pass
            finally:
                tmp.unlink()
        return path.read_bytes()

    def share_token(self, analysis_id: str, generation: int) -> str:
        """The share token of one analysis and token generation: HMAC-SHA256, 192 bits."""
        mac = hmac.new(self.share_secret(), f"{analysis_id}:{generation}".encode(), "sha256")
        return _urlsafe(mac.digest()[:24])


def _file_name(stored: object) -> str | None:
    """The file name of a stored relative path (``inputs/strain/x.csv`` -> ``x.csv``)."""
    return Path(str(stored)).name if stored else None


def _urlsafe(raw: bytes) -> str:
    return base64.urlsafe_b64encode(raw).rstrip(b"=").decode("ascii")
