"""A hung worker (no heartbeat) and an unreachable database: the job is never stuck.

A worker that stops sending heartbeats loses its claim once ``stale_after_seconds``
pass: the sweep queues the job again, another worker finishes it exactly once, and
the silent worker, when it wakes, can no longer change it. Shown in-process (a claim
whose heartbeat is set into the past, common practice for lease-based job queues)
and with real worker processes, one frozen with SIGSTOP and later resumed with
SIGCONT (POSIX signals; a stopped process is always continued in a ``finally``).
Heartbeats as in tests/e2e/test_serve.py: every 1 s, stale after 3 s. A database
that refuses the heartbeats for a while does not fail the job; one that stays away
leaves a claim that the sweep queues again; a worker process outlives both.
"""

from __future__ import annotations

import math
import os
import signal
import sqlite3
import time
from contextlib import suppress
from pathlib import Path
from typing import Any

import pytest

from service import jobs, worker
from service.settings import ServiceSettings
from service.storage import Store
from service.store_sqlite import SqliteEngine
from service.worker import _run, run_one_job
from service.worker_pool import WorkerPool

from .faults_support import only_inputs_left, queue_job, wait_for

#: What a worker logs when it ends an attempt whose claim it had lost.
GAVE_UP = ("stopped (cancelled or claim lost)", "finished after it was cancelled or taken up again")


def _svc(root: Path, **overrides: Any) -> ServiceSettings:
    given: dict[str, Any] = {"heartbeat_seconds": 1.0, "stale_after_seconds": 3.0, **overrides}
    return ServiceSettings(data_dir=root / "data", **given)


def _store(svc: ServiceSettings) -> Store:
    store = Store(svc.data_dir)
    store.initialize()
    return store


def _stable(path: Path) -> tuple[int, int]:
    """Inode and modification time: a second completion would replace the file."""
    stat = path.stat()
    return stat.st_ino, stat.st_mtime_ns


def _pid(worker: str | None) -> int:
    """The process id in a pool worker's name (``host:pid:suffix``)."""
    return int(str(worker).rsplit(":", 2)[1])


def _stopped(pid: int) -> bool:
    """Whether ``pid`` is in the stopped state ('T' in /proc/PID/stat, Linux)."""
    return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[-1].split()[0] == "T"


def _freeze(pid: int, database: Path) -> None:
    """SIGSTOP ``pid`` at a moment it holds no write lock on the SQLite file (bounded)."""
    for _ in range(50):
        os.kill(pid, signal.SIGSTOP)
        for _ in range(100):
            if _stopped(pid):
                break
            time.sleep(0.01)
        db = sqlite3.connect(database, timeout=0.2, isolation_level=None)
        try:
            db.execute("BEGIN IMMEDIATE")  # free: the frozen worker holds no lock
            db.execute("ROLLBACK")
            return
        except sqlite3.OperationalError:  # frozen mid-write: let it finish, try again
            os.kill(pid, signal.SIGCONT)
            time.sleep(0.05)
        finally:
            db.close()
    pytest.fail(f"worker {pid} could not be frozen outside a database write")


def _wait_log(capfd: pytest.CaptureFixture[str], needles: tuple[str, ...],
              timeout: float) -> str:
    """Collect the captured output (worker processes share it) until a needle shows."""
    seen, deadline = "", time.monotonic() + timeout
    for _ in range(math.ceil(timeout / 0.1) + 1):
        out, err = capfd.readouterr()
        seen += out + err
        if any(n in seen for n in needles) or time.monotonic() > deadline:
            break
        time.sleep(0.1)
    assert any(n in seen for n in needles), f"none of {needles} within {timeout} s:\n{seen}"
    return seen


def test_silent_claim_is_requeued_and_cannot_finish(tmp_path: Path) -> None:
    svc = _svc(tmp_path)
    store = _store(svc)
    queue_job(store, "job")
    hung = jobs.claim(store, "hung-worker")
    assert hung is not None
    with store.connect() as db:  # no heartbeat for a minute, as from a frozen process
        db.execute("UPDATE analyses SET heartbeat = heartbeat - 60 WHERE id = 'job'")
    assert jobs.requeue_stale(store, stale_after=svc.stale_after_seconds,
                              max_attempts=svc.max_attempts) == 1
    assert run_one_job(svc, worker="healthy") == "job"
    done = store.get("job")
    assert done is not None
    assert (done.state, done.attempts, done.worker) == ("done", 2, "healthy")
    summary = store.output_dir("job") / "summary.json"
    marks = (_stable(store.output_dir("job")), _stable(summary))

    # the hung worker wakes up: every change under its old claim is refused
    assert not jobs.heartbeat(store, hung, stage="sampling", progress=0.5)
    assert not jobs.record_preview(store, hung, {"parameters": {}})
    assert not jobs.fail(store, hung, "late failure")
    assert not jobs.release(store, hung)
    late = store.analysis_dir("job") / "attempt-1"
    late.mkdir()
    (late / "summary.json").write_text("{}", encoding="utf-8")
    assert not jobs.finish(store, hung, late)
    assert not late.exists()
    _run(store, hung, svc)  # its analysis, run on, stops at its first report
    after = store.get("job")
    assert after is not None
    assert (after.state, after.attempts, after.worker, after.error_message) == (
        "done", 2, "healthy", None)
    assert (_stable(store.output_dir("job")), _stable(summary)) == marks
    assert {p.name for p in store.analysis_dir("job").iterdir()} == {"inputs", "output"}


@pytest.mark.slow
def test_frozen_worker_process_is_replaced_and_cannot_finish(
        tmp_path: Path, capfd: pytest.CaptureFixture[str]) -> None:
    svc = _svc(tmp_path, workers=2)
    store = _store(svc)
    queue_job(store, "job")
    pool = WorkerPool(svc, 2)
    frozen: int | None = None
    pool.start()
    try:
        claimed = wait_for(store, "job", lambda r: r.state == "running", 60)
        frozen = _pid(claimed.worker)
        _freeze(frozen, store.db_path)
        # no heartbeat now: the other worker's sweep queues it again and takes it up
        done = wait_for(store, "job", lambda r: r.state in {"done", "failed"}, 120, 0.2)
        assert (done.state, done.attempts, done.error_message) == ("done", 2, None)
        assert _pid(done.worker) != frozen
        summary = store.output_dir("job") / "summary.json"
        marks = (_stable(store.output_dir("job")), _stable(summary))
        capfd.readouterr()
        os.kill(frozen, signal.SIGCONT)
        _wait_log(capfd, tuple(f"analysis job {g}" for g in GAVE_UP), 60)
        after = store.get("job")
        assert after is not None
        assert (after.state, after.attempts, after.worker) == ("done", 2, done.worker)
        assert (_stable(store.output_dir("job")), _stable(summary)) == marks
        assert {p.name for p in store.analysis_dir("job").iterdir()} == {"inputs", "output"}
        assert frozen in pool.pids  # it lives on and serves the queue again
    finally:
        if frozen is not None:
            with suppress(ProcessLookupError):
                os.kill(frozen, signal.SIGCONT)
        pool.stop(timeout=20)


@pytest.mark.slow
def test_worker_process_outlives_a_database_outage(
        tmp_path: Path, capfd: pytest.CaptureFixture[str]) -> None:
    svc = _svc(tmp_path, workers=1, heartbeat_seconds=0.2)
    store = _store(svc)
    with store.connect() as db:  # every query of the worker fails: "no such table"
        db.execute("ALTER TABLE analyses RENAME TO analyses_away")
    pool = WorkerPool(svc, 1)
    pool.start()
    try:
        (pid,) = pool.pids
        _wait_log(capfd, ("the queue could not be served",), 60)
        with store.connect() as db:
            db.execute("ALTER TABLE analyses_away RENAME TO analyses")
        queue_job(store, "after").write_bytes(b"\x00" * 4096)  # fails fast once read
        row = wait_for(store, "after", lambda r: r.state in {"done", "failed"}, 60, 0.2)
        assert (row.state, row.error_field) == ("failed", "strain")
        assert "strain.csv" in str(row.error_message)
        assert pool.pids == [pid]  # the same process: it was never restarted
    finally:
        pool.stop(timeout=20)


def _stand_in(stages: list[str], between: Any) -> Any:
    """An analysis that reports ``stages`` (calling ``between(i)`` after each), then writes."""
    def analyze(request: Any, out: Path, reporter: Any) -> None:
        for i, stage in enumerate(stages):
            reporter(stage, i / len(stages), i / len(stages))
            between(i)
        out.mkdir(parents=True)
        (out / "summary.json").write_text("{}", encoding="utf-8")
    return analyze


def test_database_locked_for_a_while_does_not_fail_the_job(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    svc = _svc(tmp_path, heartbeat_seconds=0.2)
    store = _store(svc)
    queue_job(store, "locked")
    real, locked, failures = jobs.heartbeat, {"on": False}, []

    def heartbeat(*args: Any, **kwargs: Any) -> bool:
        if locked["on"]:
            failures.append(kwargs.get("stage"))
            raise sqlite3.OperationalError("database is locked")  # its busy timeout ran out
        return real(*args, **kwargs)

    def between(i: int) -> None:
        locked["on"] = i in (0, 1)  # reports 2 and 3 and the beats meanwhile fail
        time.sleep(3 * svc.heartbeat_seconds)

    monkeypatch.setattr(jobs, "heartbeat", heartbeat)
    monkeypatch.setattr(worker, "_analyze", _stand_in(["a", "b", "c", "d"], between))
    assert run_one_job(svc, worker="w") == "locked"
    assert None in failures  # the heartbeat thread's beats failed
    assert "b" in failures  # and so did a progress report
    row = store.get("locked")
    assert row is not None
    assert (row.state, row.attempts, row.error_message) == ("done", 1, None)


def test_database_gone_leaves_a_job_that_is_queued_again(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    svc = _svc(tmp_path, heartbeat_seconds=0.2)
    store = _store(svc)
    queue_job(store, "gone")
    real, down = SqliteEngine.connect, {"on": False, "armed": True}

    def connect(self: SqliteEngine) -> Any:
        if down["on"]:
            raise sqlite3.OperationalError("unable to open database file")
        return real(self)

    def between(i: int) -> None:
        down["on"] = down["armed"]  # from the first report on, for the rest of the attempt
        time.sleep(3 * svc.heartbeat_seconds)

    monkeypatch.setattr(SqliteEngine, "connect", connect)
    monkeypatch.setattr(worker, "_analyze", _stand_in(["a", "b"], between))
    with pytest.raises(sqlite3.OperationalError):  # the worker loop logs it and goes on
        run_one_job(svc, worker="first")
    down["on"] = down["armed"] = False
    only_inputs_left(store, "gone")
    time.sleep(0.3)
    assert jobs.requeue_stale(store, stale_after=0.2, max_attempts=3) == 1
    assert run_one_job(svc, worker="second") == "gone"
    row = store.get("gone")
    assert row is not None
    assert (row.state, row.attempts, row.worker) == ("done", 2, "second")
    assert (store.output_dir("gone") / "summary.json").is_file()
