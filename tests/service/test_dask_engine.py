"""Analyses on a Dask cluster: a LocalCluster on 127.0.0.1, two worker processes of one thread.

A real (reduced) analysis of the demo strain runs to ``done`` through the Dask executor;
a Dask worker SIGKILLed mid-analysis loses nothing (the job is queued again by the
heartbeat sweep and finished by another worker); a cancelled analysis stops its task;
calibration injections give the same rows on the cluster as in local processes; a
malformed or silent scheduler stops ``serve`` and ``calibrate`` with exit 2.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import signal
import socket
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from estimator.errors import InputError
from service import jobs
from service.calibrate import CalibrationSetup, run_injection
from service.cli import main
from service.execution import Executor, make_executor
from service.parallel_runs import run_in_processes
from service.serve import lock_data_dir
from service.settings import ServiceSettings
from service.storage import Store, hash_secret, open_store

distributed = pytest.importorskip(
    "distributed", reason="Dask distributed is not installed (pip install 'chirpcast[cluster]')"
)

from service.dask_engine import DaskExecutor, connect, map_on_cluster  # noqa: E402

pytestmark = pytest.mark.timeout(180)

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
EVENT = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))
#: A short sampler run (about 8 s on one core): enough to reach "done" with every output.
QUICK = {"target_effective_samples": 100.0, "check_draws": 10, "max_steps": 1000, "n_bins": 32}


@pytest.fixture(scope="module")
def scheduler() -> Iterator[str]:
    """A LocalCluster on 127.0.0.1: two worker processes, one thread each."""
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
        dashboard_address=None, silence_logs=logging.ERROR,
    )  # fmt: skip
    try:
        yield str(cluster.scheduler_address)
    finally:
        cluster.close(timeout=20)


def _settings(data_dir: Path, address: str) -> ServiceSettings:
    return ServiceSettings(data_dir=data_dir, scheduler=address, heartbeat_seconds=0.2,
                           stale_after_seconds=5.0)  # fmt: skip


def _queue(store: Store, analysis_id: str, **settings: Any) -> None:
    (store.inputs_dir(analysis_id) / "strain").mkdir(parents=True)
    shutil.copy(DEMO / "strain.csv", store.inputs_dir(analysis_id) / "strain" / "strain.csv")
    request = {"strain": "inputs/strain/strain.csv", "psd": None, "asd": False,
               "sample_rate": None, "start_time": None, "label": "",
               "settings": {"trigger_time": EVENT["trigger_time"], "seed": 1, "spin_max": 0.0,
                            **settings}}  # fmt: skip
    store.insert_analysis(analysis_id=analysis_id, label=analysis_id, request=request,
                          inputs={}, owner="", idempotency_key=None,
                          share_hash=hash_secret(analysis_id))  # fmt: skip


def _until(check: Callable[[], bool], timeout: float) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if check():
            return True
        time.sleep(0.1)
    return check()


def _state(store: Store, analysis_id: str) -> str:
    row = store.get(analysis_id)
    return row.state if row is not None else "missing"


def _running_in(store: Store, analysis_id: str) -> int | None:
    """The pid of the Dask worker process running the analysis, once it reports progress."""
    row = store.get(analysis_id)
    if row is None or row.state != "running" or row.progress <= 0 or not row.worker:
        return None
    return int(row.worker.split(":")[1])


@pytest.fixture
def started(tmp_path: Path, scheduler: str) -> Iterator[tuple[Store, DaskExecutor]]:
    svc = _settings(tmp_path / "data", scheduler)
    store = open_store(svc)
    store.initialize()
    executor = make_executor(svc)
    assert isinstance(executor, DaskExecutor)
    assert isinstance(executor, Executor)
    executor.start()
    try:
        yield store, executor
    finally:
        executor.stop(timeout=10)


@pytest.mark.slow
def test_analysis_runs_to_done_on_the_cluster(started: tuple[Store, DaskExecutor]) -> None:
    store, executor = started
    assert executor.capacity() == 2
    _queue(store, "first", **QUICK)
    assert _until(lambda: _state(store, "first") in {"done", "failed"}, 90)
    row = store.get("first")
    assert row is not None
    assert row.state == "done", row.error_message
    assert row.worker is not None
    assert ":dask-" in row.worker  # a Dask task ran it, not this process
    assert int(row.worker.split(":")[1]) != os.getpid()
    assert (store.output_dir("first") / "summary.json").is_file()
    assert _until(lambda: executor.in_flight == 0, 10)


@pytest.mark.slow
def test_killed_dask_worker_loses_no_analysis(started: tuple[Store, DaskExecutor]) -> None:
    store, _ = started
    _queue(store, "victim", **QUICK)
    assert _until(lambda: _running_in(store, "victim") is not None, 60)
    victim = _running_in(store, "victim")
    assert victim is not None
    os.kill(victim, signal.SIGKILL)  # the nanny starts another worker process
    # heartbeat silent -> queued again after stale_after_seconds (5 s) -> run elsewhere
    assert _until(lambda: _state(store, "victim") in {"done", "failed"}, 90)
    row = store.get("victim")
    assert row is not None
    assert row.state == "done", row.error_message
    assert row.attempts >= 2  # 2 unless a loaded machine made a later worker look silent
    assert row.worker is not None
    assert int(row.worker.split(":")[1]) != victim
    assert (store.output_dir("victim") / "summary.json").is_file()


@pytest.mark.slow
def test_cancelled_analysis_stops_its_task(started: tuple[Store, DaskExecutor]) -> None:
    store, executor = started
    _queue(store, "stopper", target_effective_samples=4000.0)  # a minute or more to finish
    assert _until(lambda: _running_in(store, "stopper") is not None, 60)
    assert executor.in_flight == 1
    began = time.monotonic()
    assert jobs.cancel(store, "stopper") == "cancelled"
    assert _until(lambda: executor.in_flight == 0, 15), "the task went on after the cancel"
    assert time.monotonic() - began < 15
    assert _state(store, "stopper") == "cancelled"
    assert not store.output_dir("stopper").exists()
    assert not list(store.analysis_dir("stopper").glob("attempt-*"))  # its scratch removed


@pytest.mark.slow
def test_calibration_rows_match_local_processes(scheduler: str) -> None:
    # Chirp masses 10-15 Msun keep the signal (from 15 Hz) inside a 16 s segment; seed 4's
    # first injection is a quick one (about 3 s), which keeps this test short.
    setup = CalibrationSetup(injections=2, seed=4, duration=16.0,
                             chirp_mass_range=(10.0, 15.0), spin_max=0.0)  # fmt: skip
    local = run_in_processes(run_injection, setup, 1, workers=1)
    remote, threads = map_on_cluster(run_injection, setup, 1, scheduler=scheduler)
    assert threads == 2
    assert len(local) == len(remote) == 1
    assert remote[0]["index"] == 0
    assert remote[0]["converged"]
    mine, theirs = ({k: v for k, v in row.items() if k != "wall_s"} for row in (*local, *remote))
    assert mine == theirs  # every truth, draw count, SNR and credible level, to the bit


# -- bad addresses stop before anything starts ----------------------------------------


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


@pytest.mark.parametrize("address", ["nonsense", "http://127.0.0.1:8786", "tcp://127.0.0.1",
                                     "tcp://127.0.0.1:99999", "tcp://:8786"])
def test_serve_refuses_a_malformed_scheduler(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], address: str
) -> None:
    code = main(["serve", "--scheduler", address, "--data-dir", str(tmp_path / "d")])
    assert code == 2
    err = capsys.readouterr().err
    assert "scheduler" in err
    assert "tcp://HOST:PORT" in err


def test_serve_stops_when_no_scheduler_answers(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("CHIRPCAST_SCHEDULER_TIMEOUT_SECONDS", "1")
    data = tmp_path / "d"
    address = f"tcp://127.0.0.1:{_free_port()}"
    began = time.monotonic()
    code = main(["serve", "--scheduler", address, "--data-dir", str(data)])
    assert code == 2
    assert time.monotonic() - began < 20  # bounded by the connect timeout
    err = capsys.readouterr().err
    assert f"scheduler {address}: no Dask scheduler answered within 1 s" in err
    lock_data_dir(data).close()  # the server let go of its data folder: nothing half-started


def test_connect_names_the_field(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="no Dask scheduler answered") as caught:
        connect(f"tcp://127.0.0.1:{_free_port()}", timeout=0.5)
    assert caught.value.field == "scheduler"


def test_calibrate_refuses_a_malformed_scheduler(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    argv = ["calibrate", "--n", "2", "--scheduler", "tcp:/x", "--out", str(tmp_path / "c")]
    assert main(argv) == 2
    assert "scheduler 'tcp:/x'" in capsys.readouterr().err
    assert not (tmp_path / "c").exists()
