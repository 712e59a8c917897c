"""Load and kill: many concurrent submissions while the server and its workers are SIGKILLed.

Used by ``tests/e2e/test_load_kill.py`` (a reduced run in CI) and by
``benchmarks/load_kill.py`` (the full run: 50 submissions, 20 kills). Submitters
post the demo event over HTTP from several threads, some with an Idempotency-Key
that another submission repeats (an alert pipeline retrying); every connection
error is retried with the same key until the server answers. A killer thread
SIGKILLs, at seeded random moments, either the whole server process tree (then
starts a new server on the same data folder) or one worker process (the server's
pool starts another). Afterwards, with one last server running, every accepted
submission must reach a final state, each key must own exactly one analysis,
every ``done`` analysis must hold one complete output folder (no half-written
attempt left beside it), and the database must pass an integrity check. Every
wait is bounded in time and in count.
"""

from __future__ import annotations

import json
import math
import os
import signal
import sqlite3
import threading
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx
import numpy as np

from service import pipeline

from .serving import ServerHandle, descendants, start_server

__all__ = ["LoadKillReport", "run_load_kill"]

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
FINAL = frozenset({"done", "failed", "cancelled"})
#: Quick recovery (a silent job is stale after 3 s), a rate limit and queue that a
#: burst of submissions does not reach, and room for jobs hit by several kills.
ENV = {
    "CHIRPCAST_STALE_AFTER_SECONDS": "3",
    "CHIRPCAST_HEARTBEAT_SECONDS": "1",
    "CHIRPCAST_RATE_PER_MINUTE": "100000",
    "CHIRPCAST_MAX_QUEUE": "1000",
    "CHIRPCAST_MAX_ATTEMPTS": "8",
}
#: Demo-sized analysis (spins fixed: four parameters) and a heavier one (aligned spins).
LIGHT = {"trigger_time": 2000000012.004, "label": "load-light", "spin_max": 0.0}
HEAVY = {"trigger_time": 2000000012.004, "label": "load-heavy", "spin_max": 0.99}


@dataclass
class LoadKillReport:
    """What a load-and-kill run saw; ``problems`` is empty when every check held."""

    submissions: int
    distinct_keys: int
    accepted: int
    kills: Counter[str] = field(default_factory=Counter)
    states: Counter[str] = field(default_factory=Counter)
    lost: int = 0
    duplicates: int = 0
    half_written: int = 0
    integrity: str = ""
    load_s: float = 0.0
    drain_s: float = 0.0
    retries: int = 0
    problems: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready figures."""
        return {
            "submissions": self.submissions, "distinct_keys": self.distinct_keys,
            "accepted_answers": self.accepted, "kills": dict(self.kills),
            "final_states": dict(self.states), "jobs_lost": self.lost,
            "duplicate_jobs": self.duplicates, "half_written_outputs": self.half_written,
            "integrity_check": self.integrity, "load_phase_s": round(self.load_s, 1),
            "time_to_drain_s": round(self.drain_s, 1), "retried_requests": self.retries,
            "problems": self.problems,
        }  # fmt: skip


class _Server:
    """The current server, replaced under a lock when the killer restarts it."""

    def __init__(self, data_dir: Path, logs: Path, workers: int) -> None:
        self.data_dir, self.logs, self.workers = data_dir, logs, workers
        self.lock = threading.Lock()
        self.generation = 0
        self.handle: ServerHandle = self._start()

    def _start(self) -> ServerHandle:
        self.generation += 1
        return start_server(self.data_dir, self.logs / f"server-{self.generation}.log",
                            workers=self.workers, env=ENV)

    def url(self) -> str:
        with self.lock:
            return self.handle.base_url

    def kill_all_and_restart(self) -> None:
        """Kill the tree; while the next server starts, submitters meet a closed port."""
        with self.lock:
            self.handle.kill()
            self.generation += 1
            generation = self.generation
        fresh = start_server(self.data_dir, self.logs / f"server-{generation}.log",
                             workers=self.workers, env=ENV)
        with self.lock:
            self.handle = fresh

    def kill_one_worker(self, rng: np.random.Generator) -> bool:
        with self.lock:
            family = descendants(self.handle.process.pid)
            if not family:
                return False
            try:
                os.kill(int(rng.choice(family)), signal.SIGKILL)
            except ProcessLookupError:
                return False
            return True

    def stop(self) -> None:
        with self.lock:
            self.handle.stop()


def _payload(heavy: bool) -> tuple[dict[str, Any], dict[str, str]]:
    files = {"strain": ("strain.csv", (DEMO / "strain.csv").read_bytes(), "text/csv"),
             "psd": ("psd.csv", (DEMO / "psd.csv").read_bytes(), "text/csv")}
    return files, {"settings": json.dumps(HEAVY if heavy else LIGHT)}


def _submit(server: _Server, key: str, heavy: bool, deadline: float,
            answers: list[tuple[str, str, int]], report: LoadKillReport,
            lock: threading.Lock) -> None:
    """POST until the server accepts (retrying with the same key) or the deadline passes."""
    files, data = _payload(heavy)
    for _ in range(10_000):
        if time.monotonic() > deadline:
            with lock:
                report.problems.append(f"key {key}: no answer before the deadline")
            return
        try:
            with httpx.Client(base_url=server.url(), timeout=30.0) as client:
                r = client.post("/api/v1/analyses", files=files, data=data,
                                headers={"Idempotency-Key": key})
        except httpx.TransportError:
            with lock:
                report.retries += 1
            time.sleep(0.2)
            continue
        if r.status_code in (200, 202):
            with lock:
                answers.append((key, str(r.json()["id"]), r.status_code))
            return
        if r.status_code in (429, 503):
            with lock:
                report.retries += 1
            time.sleep(0.5)
            continue
        with lock:
            report.problems.append(f"key {key}: answer {r.status_code} {r.text[:200]}")
        return
    with lock:
        report.problems.append(f"key {key}: gave up after 10000 tries")


def _killer(server: _Server, kills: int, seed: int, gap: tuple[float, float],
            report: LoadKillReport, stop: threading.Event) -> None:
    rng = np.random.default_rng(seed)
    for _ in range(kills):
        if stop.wait(float(rng.uniform(*gap))):
            return
        if rng.random() < 0.5:
            server.kill_all_and_restart()
            report.kills["server_and_workers"] += 1
        elif server.kill_one_worker(rng):
            report.kills["one_worker"] += 1
        else:  # no worker alive this instant: kill the whole tree instead
            server.kill_all_and_restart()
            report.kills["server_and_workers"] += 1


def _final_states(server: _Server, ids: set[str], deadline: float,
                  errors: dict[str, str]) -> dict[str, str]:
    """Poll every id until all are final or the deadline passes; id -> last state.

    ``errors`` receives the message of every analysis that ended ``failed``.
    """
    states: dict[str, str] = {}
    with httpx.Client(base_url=server.url(), timeout=30.0) as client:
        for _ in range(math.ceil(max(deadline - time.monotonic(), 0.0) / 0.5) + 1):
            for analysis_id in sorted(ids - {i for i, s in states.items() if s in FINAL}):
                r = client.get(f"/api/v1/analyses/{analysis_id}")
                ok = r.status_code == 200
                states[analysis_id] = r.json()["state"] if ok else f"answer {r.status_code}"
                if ok and r.json().get("error"):
                    errors[analysis_id] = str(r.json()["error"])
            if all(states.get(i) in FINAL for i in ids) or time.monotonic() > deadline:
                break
            time.sleep(0.5)
    return states


def _check_folders(data_dir: Path, states: dict[str, str], report: LoadKillReport) -> None:
    """Every done analysis holds one complete output; no attempt or partial folder is left."""
    for folder in sorted((data_dir / "analyses").iterdir()):
        state = states.get(folder.name)
        if state is None:
            report.problems.append(f"folder {folder.name} belongs to no accepted submission")
            continue
        leftovers = [p.name for p in folder.iterdir() if p.name not in {"inputs", "output"}]
        output = folder / "output"
        complete = output.is_dir() and {p.name for p in output.iterdir()} == pipeline.OUTPUT_FILES
        if leftovers or (state == "done") != complete or (output.exists() and not complete):
            report.half_written += 1
            report.problems.append(f"analysis {folder.name} ({state}): output complete={complete},"
                                   f" left beside it: {leftovers}")


def _check_database(db_path: Path, keys: set[str], report: LoadKillReport) -> None:
    with sqlite3.connect(db_path) as db:
        report.integrity = str(db.execute("PRAGMA integrity_check").fetchone()[0])
        rows = db.execute("SELECT idempotency_key, COUNT(*) FROM analyses"
                          " GROUP BY idempotency_key").fetchall()
    per_key = {str(k): int(n) for k, n in rows}
    report.duplicates = sum(n - 1 for n in per_key.values() if n > 1)
    if report.integrity != "ok":
        report.problems.append(f"integrity check: {report.integrity}")
    if set(per_key) != keys:
        report.problems.append(f"keys in the database {sorted(set(per_key) ^ keys)} differ")


def run_load_kill(
    root: Path, *, submissions: int, kills: int, seed: int, workers: int = 2,
    concurrency: int = 8, repeat_every: int = 5, heavy_every: int = 4,
    kill_gap: tuple[float, float] = (1.0, 6.0), pace: float = 0.0,
    load_timeout: float = 600.0, drain_timeout: float = 900.0,
) -> LoadKillReport:
    """Submit, kill and restart, drain, then check (see the module docstring).

    Submission ``i`` uses the Idempotency-Key of submission ``i - 1`` when
    ``i % repeat_every == repeat_every - 1`` (a retry by the client), and the heavier
    settings when ``i % heavy_every == heavy_every - 1``. Submission ``i`` starts no
    earlier than ``i * pace`` s after the first, so that kills also land while uploads
    are in flight. The killer waits a seeded uniform ``kill_gap`` between kills; the load
    phase ends when every submission is answered and every kill done.
    """
    keys = [f"load-{i}" for i in range(submissions)]
    for i in range(submissions):
        if i % repeat_every == repeat_every - 1 and i > 0:
            keys[i] = keys[i - 1]
    report = LoadKillReport(submissions=submissions, distinct_keys=len(set(keys)), accepted=0)
    data_dir, logs = root / "data", root / "logs"
    logs.mkdir(parents=True, exist_ok=True)
    server = _Server(data_dir, logs, workers)
    answers: list[tuple[str, str, int]] = []
    lock = threading.Lock()
    stop = threading.Event()
    errors: dict[str, str] = {}
    clock = time.monotonic()
    deadline = clock + load_timeout
    try:
        killer = threading.Thread(target=_killer, args=(server, kills, seed, kill_gap, report,
                                                        stop), daemon=True)
        killer.start()
        pending = list(range(submissions))
        threads: list[threading.Thread] = []
        while pending or threads:
            threads = [t for t in threads if t.is_alive()]
            while (pending and len(threads) < concurrency
                   and time.monotonic() >= clock + pending[0] * pace):
                i = pending.pop(0)
                t = threading.Thread(target=_submit, args=(server, keys[i], i % heavy_every ==
                                     heavy_every - 1, deadline, answers, report, lock),
                                     daemon=True)
                t.start()
                threads.append(t)
            if time.monotonic() > deadline + 60.0:
                report.problems.append("submitters still running past the load deadline")
                break
            time.sleep(0.05)
        killer.join(timeout=max(deadline - time.monotonic(), 0.0) + kills * kill_gap[1])
        stop.set()
        report.load_s = time.monotonic() - clock
        report.accepted = len(answers)
        by_key: dict[str, set[str]] = {}
        for key, analysis_id, _ in answers:
            by_key.setdefault(key, set()).add(analysis_id)
        for key, ids in by_key.items():
            if len(ids) > 1:
                report.problems.append(f"key {key} answered with {len(ids)} different ids")
        ids = {i for found in by_key.values() for i in found}
        drain_start = time.monotonic()
        states = _final_states(server, ids, drain_start + drain_timeout, errors)
        report.drain_s = time.monotonic() - drain_start
    finally:
        stop.set()
        server.stop()
    report.states = Counter(states.values())
    report.lost = sum(1 for i in ids if states.get(i) not in FINAL)
    if report.lost:
        report.problems.append(f"{report.lost} accepted analyses never reached a final state")
    # With room for eight attempts every analysis of the demo should finish.
    for analysis_id in sorted(ids):
        if states.get(analysis_id) in FINAL - {"done"}:
            report.problems.append(f"analysis {analysis_id} ended {states[analysis_id]}:"
                                   f" {errors.get(analysis_id, 'no message')}")
    _check_folders(data_dir, states, report)
    _check_database(data_dir / "chirpcast.sqlite3", set(keys), report)
    return report
