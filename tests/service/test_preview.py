"""The Fisher-matrix first look: stored by the worker, served while running, cleared on requeue.

One real analysis (the shipped demo over the API, ~5 s) runs in a worker thread while
the test reads the status as a client would. External references: the demo's simulated
source (demo_data/injection.json: chirp mass 24 Msun, optimal SNR 18); JSON has no NaN
(RFC 8259, section 6), so a width that is not finite must arrive as null.
"""

from __future__ import annotations

import json
import math
import sqlite3
import threading
import time
from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient

from service import jobs
from service.app import create_app
from service.settings import ServiceSettings
from service.storage import Store, hash_secret
from service.worker import run_one_job

from .test_pages import _parse

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
EVENT = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))
INJECTION = json.loads((DEMO / "injection.json").read_text(encoding="utf-8"))
NAMES = ("chirp_mass", "symmetric_mass_ratio", "coalescence_time", "effective_distance")

#: The analyses table as the first release created it (before the preview column).
OLD_SCHEMA = """
CREATE TABLE analyses (
    id TEXT PRIMARY KEY, state TEXT NOT NULL DEFAULT 'queued',
    stage TEXT NOT NULL DEFAULT 'queued', progress REAL NOT NULL DEFAULT 0,
    error_message TEXT, error_field TEXT, label TEXT NOT NULL DEFAULT '',
    request TEXT NOT NULL, inputs TEXT NOT NULL, owner TEXT NOT NULL DEFAULT '',
    idempotency_key TEXT, share_hash TEXT UNIQUE, share_generation INTEGER NOT NULL DEFAULT 0,
    worker TEXT, attempts INTEGER NOT NULL DEFAULT 0, heartbeat REAL,
    created REAL NOT NULL, updated REAL NOT NULL
);
CREATE INDEX analyses_state ON analyses (state, created);
CREATE TABLE api_keys (id INTEGER PRIMARY KEY AUTOINCREMENT, name TEXT NOT NULL,
    key_hash TEXT NOT NULL UNIQUE, created REAL NOT NULL);
"""


def _fake_preview(sigma: float = 0.5) -> dict[str, Any]:
    return {"method": "test", "snr": 12.0, "correlation_chirp_mass_symmetric_mass_ratio": 0.9,
            "parameters": {n: {"value": 1.0, "sigma": sigma, "unit": ""} for n in NAMES}}


def _insert(store: Store, analysis_id: str) -> None:
    request = {"strain": "inputs/strain/strain.csv", "psd": None, "asd": False,
               "sample_rate": None, "start_time": None, "label": "",
               "settings": {"trigger_time": EVENT["trigger_time"], "seed": 1,
                            "spin_max": 0.0}}
    store.insert_analysis(analysis_id=analysis_id, label=analysis_id, request=request,
                          inputs={}, owner="", idempotency_key=None,
                          share_hash=hash_secret(analysis_id))


def test_preview_is_served_while_running_and_matches_the_summary(tmp_path: Path) -> None:
    svc = ServiceSettings(data_dir=tmp_path / "data", workers=1, heartbeat_seconds=0.2)
    with TestClient(create_app(svc)) as client:
        files = {"strain": ("strain.csv", (DEMO / "strain.csv").read_bytes(), "text/csv"),
                 "psd": ("psd.csv", (DEMO / "psd.csv").read_bytes(), "text/csv")}
        settings = {"trigger_time": EVENT["trigger_time"], "seed": EVENT["seed"], "spin_max": 0.0}
        answer = client.post("/api/v1/analyses", files=files,
                             data={"settings": json.dumps(settings)}).json()
        status_url, page_url = answer["status_url"], answer["report_url"]
        assert client.get(status_url).json()["preview"] is None  # queued: not known yet

        worker = threading.Thread(target=run_one_job, args=(svc,), kwargs={"worker": "t"})
        worker.start()
        try:
            seen: dict[str, Any] = {}
            deadline = time.monotonic() + 60
            for _ in range(3000):  # at most 60 s, polled every 20 ms
                seen = client.get(status_url).json()
                final = seen["state"] in ("done", "failed", "cancelled")
                if seen["preview"] is not None or final or time.monotonic() > deadline:
                    break
                time.sleep(0.02)
            assert seen["preview"] is not None, seen
            # before sampling has finished: the analysis is still running
            assert seen["state"] == "running", seen["state"]
            assert seen["stage"] not in ("report", "done"), seen["stage"]
            page = _parse(client.get(page_url).text)  # the share link shows the status page
        finally:
            worker.join(timeout=120)
        assert not worker.is_alive()
        done = client.get(status_url).json()

    preview = seen["preview"]
    assert set(preview["parameters"]) == set(NAMES)
    units = {n: p["unit"] for n, p in preview["parameters"].items()}
    assert units == {"chirp_mass": "Msun", "symmetric_mass_ratio": "",
                     "coalescence_time": "s", "effective_distance": "Mpc"}
    assert all(p["sigma"] > 0 for p in preview["parameters"].values())
    # the demo's simulated source: chirp mass 24 Msun (within 3%), optimal SNR 18 (within 4,
    # about four times the spread of the fitted SNR in Gaussian noise, common practice)
    assert abs(preview["parameters"]["chirp_mass"]["value"] - INJECTION["chirp_mass"]) < (
        0.03 * INJECTION["chirp_mass"])
    assert abs(preview["snr"] - INJECTION["optimal_snr"]) < 4.0
    assert abs(preview["parameters"]["coalescence_time"]["value"]) < 0.1  # from the trigger

    assert "hidden" not in page.by_id("preview")[1]
    for name in NAMES:
        assert page.by_id(f"preview-{name}")[0] == "tr"

    # once done the API still gives it, and it is the summary's Fisher estimate, unrounded
    assert done["state"] == "done", done.get("error")
    assert done["preview"] == preview
    fisher = done["summary"]["fisher"]
    assert math.isclose(fisher["snr"], preview["snr"], rel_tol=1e-12)
    for name in NAMES:
        for key in ("value", "sigma"):
            assert math.isclose(fisher["parameters"][name][key],
                                preview["parameters"][name][key], rel_tol=1e-12), (name, key)


def test_old_database_gains_the_column_in_place(tmp_path: Path) -> None:
    store = Store(tmp_path / "data")
    store.data_dir.mkdir(parents=True)
    with sqlite3.connect(store.db_path) as db:
        db.executescript(OLD_SCHEMA)
        db.execute("INSERT INTO analyses (id, label, request, inputs, created, updated)"
                   " VALUES ('old', 'kept', ?, '{}', 1.0, 2.0)", (json.dumps({"settings": {}}),))
    db.close()
    store.initialize()
    store.initialize()  # idempotent: the column is added once
    with store.connect() as db:
        columns = [str(r["name"]) for r in db.execute("PRAGMA table_info(analyses)")]
    assert columns.count("preview") == 1
    old = store.get("old")
    assert old is not None
    assert (old.label, old.state, old.preview) == ("kept", "queued", None)
    job = jobs.claim(store, "w")
    assert job is not None
    assert job.id == "old"
    assert jobs.record_preview(store, job, _fake_preview())
    got = store.get("old")
    assert got is not None
    assert got.preview == _fake_preview()


def test_requeue_and_release_clear_the_preview(tmp_path: Path) -> None:
    store = Store(tmp_path / "data")
    store.initialize()
    _insert(store, "x")
    first = jobs.claim(store, "dead")
    assert first is not None
    assert jobs.record_preview(store, first, _fake_preview(sigma=math.nan))
    row = store.get("x")
    assert row is not None
    assert row.preview is not None
    assert row.preview["parameters"]["chirp_mass"]["sigma"] is None  # NaN is not JSON
    with store.connect() as db:
        db.execute("UPDATE analyses SET heartbeat = heartbeat - 60 WHERE id = 'x'")
    assert jobs.requeue_stale(store, stale_after=15, max_attempts=3) == 1
    row = store.get("x")
    assert row is not None
    assert (row.state, row.preview) == ("queued", None)
    second = jobs.claim(store, "alive")
    assert second is not None
    assert not jobs.record_preview(store, first, _fake_preview())  # the lost claim cannot
    assert jobs.record_preview(store, second, _fake_preview())
    assert jobs.release(store, second)
    row = store.get("x")
    assert row is not None
    assert (row.state, row.preview) == ("queued", None)
