"""The queue's guarantees: atomic claims, heartbeats, requeue of stale jobs, no double finish.

A dead worker is simulated by a claim whose heartbeat is set into the past (common
practice for lease-based job queues). Every test runs against both database engines
(SQLite, and PostgreSQL where tests/service/conftest.py finds a server). Fast: only
the cancellation test runs the pipeline, and it stops it within about a second.
"""

from __future__ import annotations

import json
import shutil
import threading
import time
from pathlib import Path

import pytest

from service import jobs
from service.settings import ServiceSettings
from service.storage import Store, hash_secret, open_store
from service.worker import run_one_job

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
EVENT = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))


def _queue(store: Store, analysis_id: str, *, strain: bytes | None = None,
           trigger: float = EVENT["trigger_time"]) -> None:
    inputs = store.inputs_dir(analysis_id)
    (inputs / "strain").mkdir(parents=True)
    target = inputs / "strain" / "strain.csv"
    if strain is None:
        shutil.copy(DEMO / "strain.csv", target)
    else:
        target.write_bytes(strain)
    request = {"strain": "inputs/strain/strain.csv", "psd": None, "asd": False,
               "sample_rate": None, "start_time": None, "label": "",
               "settings": {"trigger_time": trigger, "seed": 1, "spin_max": 0.0}}
    store.insert_analysis(analysis_id=analysis_id, label=analysis_id, request=request,
                          inputs={}, owner="", idempotency_key=None,
                          share_hash=hash_secret(analysis_id))
    time.sleep(0.002)  # distinct creation times: first in, first out


def _age_heartbeat(store: Store, analysis_id: str, seconds: float) -> None:
    with store.connect() as db:
        db.execute("UPDATE analyses SET heartbeat = heartbeat - ? WHERE id = ?",
                   (seconds, analysis_id))


@pytest.fixture
def store(tmp_path: Path, database_url: str | None) -> Store:
    s = open_store(ServiceSettings(data_dir=tmp_path / "data", database_url=database_url))
    s.initialize()
    return s


def test_wal_mode(tmp_path: Path) -> None:
    store = Store(tmp_path / "data")
    store.initialize()
    with store.connect() as db:
        assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_claims_are_atomic_and_fifo(store: Store) -> None:
    ids = [f"job{i}" for i in range(6)]
    for aid in ids:
        _queue(store, aid)
    got: list[str] = []
    lock = threading.Lock()

    def take(name: str) -> None:
        while (job := jobs.claim(store, name)) is not None:
            with lock:
                got.append(job.id)

    threads = [threading.Thread(target=take, args=(f"w{i}",)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=30)
    assert sorted(got) == ids  # each job claimed exactly once
    assert store.counts()["running"] == 6


def test_oldest_first(store: Store) -> None:
    for aid in ("a", "b", "c"):
        _queue(store, aid)
    assert [jobs.claim(store, "w").id for _ in range(3)] == ["a", "b", "c"]  # type: ignore[union-attr]
    assert jobs.claim(store, "w") is None


def test_stale_job_requeued_and_old_claim_cannot_finish(store: Store, tmp_path: Path) -> None:
    _queue(store, "x")
    dead = jobs.claim(store, "dead-worker")
    assert dead is not None
    assert jobs.requeue_stale(store, stale_after=15, max_attempts=3) == 0  # fresh heartbeat
    _age_heartbeat(store, "x", 60)
    assert jobs.requeue_stale(store, stale_after=15, max_attempts=3) == 1
    row = store.get("x")
    assert row is not None
    assert (row.state, row.worker, row.attempts) == ("queued", None, 1)
    alive = jobs.claim(store, "new-worker")
    assert alive is not None
    assert alive.attempt == 2
    # the dead worker comes back: it can neither beat nor finish nor fail the job
    assert not jobs.heartbeat(store, dead, stage="sampling", progress=0.5)
    out_dead, out_alive = tmp_path / "dead-out", tmp_path / "alive-out"
    for folder in (out_dead, out_alive):
        folder.mkdir()
        (folder / "summary.json").write_text(json.dumps({"by": folder.name}), encoding="utf-8")
    assert not jobs.finish(store, dead, out_dead)
    assert not jobs.fail(store, dead, "late")
    assert jobs.finish(store, alive, out_alive)
    assert not jobs.finish(store, alive, out_alive)  # never twice
    row = store.get("x")
    assert row is not None
    assert row.state == "done"
    summary = json.loads((store.output_dir("x") / "summary.json").read_text(encoding="utf-8"))
    assert summary == {"by": "alive-out"}


def test_startup_requeues_everything_running(store: Store) -> None:
    _queue(store, "y")
    assert jobs.claim(store, "w") is not None
    assert jobs.requeue_stale(store, stale_after=15, max_attempts=3, everything=True) == 1
    assert store.counts()["queued"] == 1


def test_server_deaths_do_not_use_up_a_jobs_attempts(store: Store) -> None:
    """A job orphaned by a whole server dying is requeued with its attempt given back,
    however often that happens; a job whose own worker keeps going silent still fails."""
    _queue(store, "s")
    for _ in range(5):
        assert jobs.claim(store, "w") is not None
        assert jobs.requeue_stale(store, stale_after=15, max_attempts=2, everything=True) == 1
    row = store.get("s")
    assert row is not None
    assert (row.state, row.attempts) == ("queued", 0)


def test_job_that_keeps_killing_workers_fails(store: Store) -> None:
    _queue(store, "z")
    for _ in range(2):
        assert jobs.claim(store, "w") is not None
        _age_heartbeat(store, "z", 60)
        jobs.requeue_stale(store, stale_after=15, max_attempts=2)
    row = store.get("z")
    assert row is not None
    assert row.state == "failed"
    assert "2 times" in (row.error_message or "")


def test_release_on_shutdown(store: Store) -> None:
    _queue(store, "r")
    job = jobs.claim(store, "w")
    assert job is not None
    assert jobs.release(store, job)
    assert store.counts()["queued"] == 1


def test_bad_input_fails_with_message(tmp_path: Path, database_url: str | None) -> None:
    svc = ServiceSettings(data_dir=tmp_path / "data", workers=1, database_url=database_url)
    store = open_store(svc)
    store.initialize()
    _queue(store, "bad", strain=b"time,strain\n0,1\n1,2\n2,x\n")
    assert run_one_job(svc) == "bad"
    row = store.get("bad")
    assert row is not None
    assert row.state == "failed"
    assert "strain.csv" in (row.error_message or "")
    assert not store.output_dir("bad").exists()


def test_cancel_stops_a_running_job(tmp_path: Path, database_url: str | None) -> None:
    svc = ServiceSettings(data_dir=tmp_path / "data", workers=1, heartbeat_seconds=0.1,
                          database_url=database_url)
    store = open_store(svc)
    store.initialize()
    _queue(store, "c")
    worker = threading.Thread(target=run_one_job, args=(svc,))
    worker.start()
    deadline = time.monotonic() + 30
    while (row := store.get("c")) is not None and row.state == "queued":
        assert time.monotonic() < deadline
        time.sleep(0.02)
    assert jobs.cancel(store, "c") == "cancelled"
    started = time.monotonic()
    worker.join(timeout=60)
    assert not worker.is_alive()
    assert time.monotonic() - started < 4  # stopped early: a full run takes 7-10 s
    row = store.get("c")
    assert row is not None
    assert row.state == "cancelled"
    assert not store.output_dir("c").exists()
    assert not any(p.name.startswith("attempt-") for p in store.analysis_dir("c").iterdir())
