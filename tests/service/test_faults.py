"""Faults of the service: each ends in a clear state, never a stuck job, never a 500.

A full or unwritable data folder is simulated by making the OS calls that write
under it raise ``OSError`` with the POSIX error numbers ENOSPC, EDQUOT, EROFS or
EACCES (IEEE Std 1003.1, ``<errno.h>``): the tests run as root here, and root
writes through permission bits, so a ``chmod`` read-only folder is tested only
where the tests run as another user. A read-only SQLite database is made with
SQLite's own ``PRAGMA query_only`` (its writes then fail with SQLITE_READONLY,
sqlite.org/rescode.html). Status codes: 422 (RFC 9110, section 15.5.21), 507
Insufficient Storage (RFC 4918, section 11.5), Retry-After (RFC 9110, section
10.2.3). A hung worker and an unreachable database: tests/service/test_faults_workers.py.
"""

from __future__ import annotations

import errno
import io
import json
import os
import sqlite3
import struct
import zipfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient

from service import jobs
from service.app import create_app
from service.settings import ServiceSettings
from service.storage import Store
from service.store_sqlite import SqliteEngine
from service.worker import run_one_job

from .faults_support import DEMO, EVENT, only_inputs_left, queue_job

SETTINGS = json.dumps({"trigger_time": EVENT["trigger_time"], "seed": 1, "spin_max": 0.0})
FULL = "data folder is full or not writable"


def _svc(root: Path) -> ServiceSettings:
    return ServiceSettings(data_dir=root / "data", workers=1, heartbeat_seconds=0.2)


def _submit(client: TestClient, strain: tuple[str, bytes] | None = None,
            psd: tuple[str, bytes] | None = None) -> Any:
    files = {"strain": strain or ("strain.csv", (DEMO / "strain.csv").read_bytes()),
             "psd": psd or ("psd.csv", (DEMO / "psd.csv").read_bytes())}
    return client.post("/api/v1/analyses", files=files, data={"settings": SETTINGS})


def _nothing_kept(store: Store) -> None:
    assert store.list(limit=10, offset=0) == ([], 0)
    assert list((store.data_dir / "tmp").iterdir()) == []
    assert list((store.data_dir / "analyses").iterdir()) == []


def _refused_507(answer: Any) -> None:
    assert answer.status_code == 507, answer.text
    error = answer.json()["error"]
    assert error["code"] == "storage_unavailable"
    assert FULL in error["message"]
    assert int(answer.headers["retry-after"]) > 0


def _healthy_again(client: TestClient, store: Store) -> None:
    assert client.get("/healthz").json()["status"] == "ok"
    accepted = _submit(client)
    assert accepted.status_code == 202, accepted.text
    assert store.counts()["queued"] == 1
    assert list((store.data_dir / "tmp").iterdir()) == []


class _FillsUp:
    """A file whose device fills up after ``room`` bytes (each later write: ``code``)."""

    def __init__(self, handle: Any, code: int, room: int = 4096) -> None:
        self.handle, self.code, self.room = handle, code, room

    def write(self, data: bytes) -> int:
        if len(data) > self.room:
            self.handle.write(data[: self.room])
            self.room = 0
            raise OSError(self.code, os.strerror(self.code), self.handle.name)
        self.room -= len(data)
        return int(self.handle.write(data))

    def __enter__(self) -> _FillsUp:
        return self

    def __exit__(self, *exc: object) -> None:
        self.handle.close()


def _break(monkeypatch: pytest.MonkeyPatch, root: Path, op: str, code: int) -> None:
    """Make ``op`` (mkdir, write or rename) fail with ``code`` for paths under ``root``."""
    def under(path: Path) -> bool:
        return root in Path(path).parents

    def refuse(path: Path) -> OSError:
        return OSError(code, os.strerror(code), str(path))

    real_open, real_mkdir, real_rename = Path.open, Path.mkdir, Path.rename

    def mkdir(self: Path, *args: Any, **kwargs: Any) -> None:
        if under(self):
            raise refuse(self)
        real_mkdir(self, *args, **kwargs)

    def open_(self: Path, mode: str = "r", *args: Any, **kwargs: Any) -> Any:
        handle = real_open(self, mode, *args, **kwargs)
        return _FillsUp(handle, code) if under(self) and "w" in mode else handle

    def rename(self: Path, target: Any) -> Path:
        if under(self):
            raise refuse(self)
        return real_rename(self, target)

    monkeypatch.setattr(Path, {"mkdir": "mkdir", "write": "open", "rename": "rename"}[op],
                        {"mkdir": mkdir, "write": open_, "rename": rename}[op])


@pytest.mark.parametrize(("op", "folder", "code"), [
    ("mkdir", "tmp", errno.EACCES),  # the upload's scratch folder cannot be made
    ("write", "tmp", errno.ENOSPC),  # the disk fills up while the upload is written
    ("write", "tmp", errno.EDQUOT),
    ("mkdir", "analyses", errno.EROFS),  # the analysis folder cannot be made
    ("rename", "tmp", errno.EACCES),  # the upload cannot be moved into it
])
def test_submit_to_a_full_data_folder_is_507(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                             op: str, folder: str, code: int) -> None:
    svc = _svc(tmp_path)
    with TestClient(create_app(svc)) as client:
        store: Store = client.app.state.store  # type: ignore[attr-defined]
        _break(monkeypatch, svc.data_dir / folder, op, code)
        _refused_507(_submit(client))
        monkeypatch.undo()
        _nothing_kept(store)
        _healthy_again(client, store)


@contextmanager
def _read_only_database(monkeypatch: pytest.MonkeyPatch, at_insert: bool) -> Iterator[None]:
    """SQLite refuses writes (SQLITE_READONLY): from now on, or from the row's insert."""
    state = {"on": not at_insert}
    real_connect, real_insert = SqliteEngine.connect, Store.insert_analysis

    @contextmanager
    def connect(self: SqliteEngine) -> Iterator[sqlite3.Connection]:
        with real_connect(self) as db:
            if state["on"]:
                db.execute("PRAGMA query_only = ON")
            yield db

    def insert(self: Store, **kwargs: Any) -> None:
        state["on"] = True
        real_insert(self, **kwargs)

    monkeypatch.setattr(SqliteEngine, "connect", connect)
    monkeypatch.setattr(Store, "insert_analysis", insert)
    yield
    monkeypatch.undo()


@pytest.mark.parametrize("at_insert", [False, True], ids=["rate-limit-write", "row-insert"])
def test_submit_to_a_read_only_database_is_507(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                               at_insert: bool) -> None:
    # raise_server_exceptions stays on: the fault must be answered inside the app, not
    # re-raised past it (which would print a traceback in the server's log).
    svc = _svc(tmp_path)
    with TestClient(create_app(svc)) as client:
        store: Store = client.app.state.store  # type: ignore[attr-defined]
        with _read_only_database(monkeypatch, at_insert):
            _refused_507(_submit(client))
        _nothing_kept(store)
        _healthy_again(client, store)


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes through permission bits; the"
                    " monkeypatched OS calls above stand in for it")
def test_submit_to_a_read_only_folder_is_507(tmp_path: Path) -> None:
    svc = _svc(tmp_path)
    with TestClient(create_app(svc)) as client:
        store: Store = client.app.state.store  # type: ignore[attr-defined]
        folders = [svc.data_dir / "tmp", svc.data_dir / "analyses"]
        try:
            for folder in folders:
                folder.chmod(0o555)
            _refused_507(_submit(client))
        finally:
            for folder in folders:
                folder.chmod(0o755)
        _nothing_kept(store)
        _healthy_again(client, store)


def _npz(compressed: bool) -> bytes:
    buf = io.BytesIO()
    save = np.savez_compressed if compressed else np.savez
    save(buf, strain=np.sin(np.arange(4096) * 0.01), sample_rate=np.float64(1024.0),
         start_time=np.float64(1e9))
    return buf.getvalue()


def _inflate_breaks() -> bytes:
    """A compressed .npz whose strain member's deflate stream (RFC 1951) is damaged."""
    raw = bytearray(_npz(compressed=True))
    member = zipfile.ZipFile(io.BytesIO(bytes(raw))).getinfo("strain.npy")
    # local file header (ZIP APPNOTE 4.3.7): 30 bytes, then the name and extra field
    name, extra = struct.unpack("<HH", raw[member.header_offset + 26: member.header_offset + 30])
    raw[member.header_offset + 30 + name + extra + 1] ^= 0xFF
    return bytes(raw)


def _npy_header_breaks() -> bytes:
    buf = io.BytesIO()
    np.save(buf, np.zeros(64))
    return buf.getvalue().replace(b"}", b" ", 1)  # the header's dict never closes


@pytest.mark.parametrize(("field", "name", "data"), [
    ("strain", "strain.dat", b"\x00" * 4096),
    ("strain", "strain.bin", bytes(range(256)) * 16),
    ("strain", "strain.npz", _npz(compressed=False)[:5000]),  # cut off mid-archive
    ("strain", "strain.npz", _inflate_breaks()),
    ("strain", "strain.npy", _npy_header_breaks()),
    ("psd", "psd.dat", b"\x00" * 4096),
], ids=["nul", "binary", "truncated-npz", "bad-deflate-npz", "bad-header-npy", "nul-psd"])
def test_corrupt_upload_is_422_naming_field_and_file(tmp_path: Path, field: str, name: str,
                                                     data: bytes) -> None:
    with TestClient(create_app(_svc(tmp_path))) as client:
        answer = _submit(client, **{field: (name, data)})
        assert answer.status_code == 422, answer.text
        error = answer.json()["error"]
        assert error["field"] == field
        assert name in error["message"]
        _nothing_kept(client.app.state.store)  # type: ignore[attr-defined]


@pytest.mark.parametrize("damage", ["nul", "npy-header", "deleted"])
def test_stored_input_damaged_after_acceptance_fails_the_job(tmp_path: Path,
                                                             damage: str) -> None:
    svc = _svc(tmp_path)
    store = Store(svc.data_dir)
    store.initialize()
    name = "strain.npy" if damage == "npy-header" else "strain.csv"
    stored = queue_job(store, "damaged", name=name)
    if damage == "deleted":
        stored.unlink()
    else:
        stored.write_bytes(b"\x00" * 4096 if damage == "nul" else _npy_header_breaks())
    assert run_one_job(svc, worker="w") == "damaged"  # returns: the loop goes on
    row = store.get("damaged")
    assert row is not None
    assert (row.state, row.error_field, row.attempts) == ("failed", "strain", 1)
    assert name in str(row.error_message)
    only_inputs_left(store, "damaged")
    assert jobs.requeue_stale(store, stale_after=0.0, max_attempts=3) == 0


def test_disk_full_while_writing_output_fails_once(tmp_path: Path,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    svc = _svc(tmp_path)
    store = Store(svc.data_dir)
    store.initialize()
    queue_job(store, "full")
    real = Path.write_text

    def write_text(self: Path, data: str, *args: Any, **kwargs: Any) -> int:
        if self.parent.name.startswith(".attempt-"):  # the output folder being filled
            real(self, data[: len(data) // 2], *args, **kwargs)
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self))
        return real(self, data, *args, **kwargs)

    monkeypatch.setattr(Path, "write_text", write_text)
    assert run_one_job(svc, worker="w") == "full"
    row = store.get("full")
    assert row is not None
    assert (row.state, row.error_field, row.attempts) == ("failed", None, 1)
    assert FULL in str(row.error_message)
    assert os.strerror(errno.ENOSPC) in str(row.error_message)
    only_inputs_left(store, "full")  # no attempt, partial or output folder
    assert jobs.requeue_stale(store, stale_after=0.0, max_attempts=3) == 0  # not retried
    assert run_one_job(svc, worker="w") is None
