"""Real worker processes (spawned): a job runs to done; SIGTERM puts a running job back."""

from __future__ import annotations

import json
import shutil
import time
from pathlib import Path

import pytest

from service.settings import ServiceSettings
from service.storage import Store, hash_secret
from service.worker_pool import WorkerPool

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
EVENT = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))


def _queue(store: Store, analysis_id: str) -> None:
    (store.inputs_dir(analysis_id) / "strain").mkdir(parents=True)
    shutil.copy(DEMO / "strain.csv", store.inputs_dir(analysis_id) / "strain" / "strain.csv")
    request = {"strain": "inputs/strain/strain.csv", "psd": None, "asd": False,
               "sample_rate": None, "start_time": None, "label": "",
               "settings": {"trigger_time": EVENT["trigger_time"], "seed": 1,
                            "spin_max": 0.0}}
    store.insert_analysis(analysis_id=analysis_id, label=analysis_id, request=request,
                          inputs={}, owner="", idempotency_key=None,
                          share_hash=hash_secret(analysis_id))


def _wait(store: Store, analysis_id: str, states: set[str], timeout: float) -> str:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        row = store.get(analysis_id)
        if row is not None and row.state in states:
            return row.state
        time.sleep(0.1)
    row = store.get(analysis_id)
    return row.state if row is not None else "missing"


@pytest.mark.slow
def test_worker_process_runs_then_releases_on_sigterm(tmp_path: Path) -> None:
    svc = ServiceSettings(data_dir=tmp_path / "data", workers=1, heartbeat_seconds=0.2)
    store = Store(svc.data_dir)
    store.initialize()
    _queue(store, "first")
    pool = WorkerPool(svc, 1)
    pool.start()
    try:
        assert _wait(store, "first", {"done", "failed"}, 120) == "done"
        assert (store.output_dir("first") / "summary.json").is_file()
        _queue(store, "second")
        assert _wait(store, "second", {"running"}, 30) == "running"
        time.sleep(0.5)
    finally:
        began = time.monotonic()
        pool.stop(timeout=20)
        stopping = time.monotonic() - began
    assert stopping < 10  # exited by itself, not killed at the 20 s timeout
    row = store.get("second")
    assert row is not None
    assert row.state == "queued"  # given back, to be taken up by the next server
    assert row.attempts == 1
