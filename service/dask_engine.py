"""Analyses and calibration injections on a Dask cluster (``--scheduler tcp://HOST:PORT``).

The database stays the queue. :class:`DaskExecutor` runs a small dispatcher thread
in the serving process that keeps up to one task per cluster thread in flight; each
task (:func:`run_task`) is what a local worker does once: claim the oldest queued
analysis from the store, run it with heartbeats into the data folder, record its
end, and return. A task holds no job that the database does not also hold: when a
Dask worker dies, its analysis' heartbeat goes silent and the sweep (here, in the
web process and in local workers alike) puts it back in the queue for the next task.

The cluster's workers therefore need what a local worker has: the data folder at the
same path (a shared filesystem) and the database (PostgreSQL through
``database_url`` when they run on other machines; SQLite only serves workers on the
machine that holds the file). :func:`map_on_cluster` spreads calibration injections
over the same kind of cluster.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
import time
import uuid
from collections.abc import Callable, Collection
from typing import Any

from estimator.errors import InputError

from . import jobs
from .settings import ServiceSettings, check_scheduler_address
from .storage import open_store
from .worker import run_one_job
from .worker_pool import guard_forks

__all__ = ["CONNECT_TIMEOUT", "DaskExecutor", "connect", "map_on_cluster", "run_task"]

log = logging.getLogger(__name__)

#: Seconds to wait for a scheduler to answer before giving up (``calibrate``).
CONNECT_TIMEOUT = 10.0
#: Seconds between two looks of the dispatcher at the queue and the cluster.
POLL_SECONDS = 0.5
#: Seconds between two reports of a dispatcher that keeps failing (a scheduler gone).
_REPORT_EVERY = 60.0

_guarded = threading.Lock()
_forks_guarded = False


def _distributed() -> Any:
    """The ``distributed`` package (its API is not typed), or ``InputError`` if missing."""
    try:
        import distributed
    except ImportError as err:
        msg = "scheduler: running on a Dask cluster needs Dask distributed;"
        msg += " install it with: pip install 'chirpcast[cluster]'"
        raise InputError(msg, field="scheduler") from err
    return distributed


def connect(address: str, *, timeout: float = CONNECT_TIMEOUT) -> Any:
    """A ``distributed.Client`` of the scheduler at ``address``.

    ``InputError`` (field ``scheduler``) if the address is malformed, Dask is not
    installed, or no scheduler answers within ``timeout`` s.
    """
    try:
        check_scheduler_address(address)
    except ValueError as err:
        raise InputError(str(err), field="scheduler") from err
    dask = _distributed()
    try:
        return dask.Client(address, timeout=timeout, set_as_default=False)
    except Exception as err:  # refused, timed out, or something that is not a scheduler
        msg = f"scheduler {address}: no Dask scheduler answered within {timeout:g} s ({err});"
        msg += " start one ('dask scheduler') or correct the address"
        raise InputError(msg, field="scheduler") from err


def _guard_forks_once() -> None:
    """In a Dask worker process: processes the pipeline forks die with it (once per process)."""
    global _forks_guarded
    with _guarded:
        if not _forks_guarded:
            guard_forks()
            _forks_guarded = True


def run_task(settings_data: dict[str, Any]) -> str | None:
    """One Dask task: claim the oldest queued analysis and run it to its end; its id or ``None``.

    Runs on a Dask worker; everything it changes goes through the store, guarded by
    its claim (a cancelled analysis, or one taken up again, stops at its next report).
    """
    _guard_forks_once()
    from . import pipeline  # noqa: F401  (imported before the claim: seconds on a fresh worker)

    settings = ServiceSettings(**settings_data)
    worker = f"{socket.gethostname()}:{os.getpid()}:dask-{uuid.uuid4().hex[:6]}"
    return run_one_job(settings, worker=worker)


def _ended(future: Any) -> bool:
    """Whether a task returned, raised, was cancelled, or was lost with its scheduler."""
    return bool(future.done() or future.status == "lost")


class DaskExecutor:
    """Runs queued analyses as tasks on a Dask cluster (an :class:`~service.execution.Executor`).

    At most one task per thread of the cluster is in flight (so it follows the cluster
    as workers come and go); queued tasks are cancelled on :meth:`stop`, and a
    running one ends its analysis on the cluster and records it in the database.
    """

    def __init__(self, settings: ServiceSettings, *, poll: float = POLL_SECONDS) -> None:
        if not settings.scheduler:
            msg = "scheduler: DaskExecutor needs settings.scheduler (tcp://HOST:PORT)"
            raise InputError(msg, field="scheduler")
        self.settings, self.address, self.poll = settings, settings.scheduler, poll
        self._data = settings.model_dump(mode="json")
        self._store = open_store(settings)
        self._client: Any = None  # a distributed.Client once started
        self._futures: list[Any] = []  # distributed.Future of the tasks in flight
        self._lock = threading.Lock()
        self._closing = threading.Event()
        self._wake = threading.Event()  # set when a task ends: the next one goes at once
        self._thread = threading.Thread(target=self._dispatch, daemon=True,
                                        name="chirpcast-dispatch")  # fmt: skip
        self._failing_since: float | None = None

    def start(self) -> None:
        """Connect to the scheduler (``InputError`` if it does not answer), start dispatching."""
        self._client = connect(self.address, timeout=self.settings.scheduler_timeout_seconds)
        if self.settings.database_url is None:
            log.warning("analyses on the Dask cluster at %s with the SQLite database: every"
                        " Dask worker must run on this machine (use --database-url for workers"
                        " on others)", self.address)  # fmt: skip
        self._thread.start()

    def capacity(self) -> int:
        """Threads of the cluster's workers now (0 before :meth:`start` or with no worker)."""
        if self._client is None:
            return 0
        return int(sum(self._client.nthreads().values()))

    def describe(self) -> str:
        """``"the Dask cluster at tcp://..."``."""
        return f"the Dask cluster at {self.address}"

    @property
    def in_flight(self) -> int:
        """Tasks submitted to the cluster that have not returned yet."""
        with self._lock:
            return sum(not _ended(f) for f in self._futures)

    def _dispatch(self) -> None:
        last_sweep = 0.0
        while not self._closing.is_set():
            self._wake.wait(self.poll)
            self._wake.clear()
            if self._closing.is_set():
                break
            try:
                if time.monotonic() - last_sweep > self.settings.heartbeat_seconds:
                    last_sweep = time.monotonic()
                    jobs.requeue_stale(self._store, stale_after=self.settings.stale_after_seconds,
                                       max_attempts=self.settings.max_attempts)  # fmt: skip
                self._collect()
                self._submit_some()
                self._failing_since = None
            except Exception:
                now = time.monotonic()
                if self._failing_since is None or now - self._failing_since > _REPORT_EVERY:
                    log.exception("dispatching to the Dask cluster at %s failed; the analyses"
                                  " wait in the queue, retrying", self.address)  # fmt: skip
                    self._failing_since = now

    def _collect(self) -> None:
        """Forget the tasks that returned; report those that raised."""
        with self._lock:
            ended = {id(f) for f in self._futures if _ended(f)}
            done = [f for f in self._futures if id(f) in ended]
            self._futures = [f for f in self._futures if id(f) not in ended]
        for future in done:
            if future.status == "error":
                log.warning("a Dask task ended with %r; its analysis goes back to the queue"
                            " when its heartbeat goes stale", future.exception())  # fmt: skip

    def _submit_some(self) -> None:
        """Submit one task per queued analysis not yet promised one, up to the free threads.

        A task in flight that has not claimed its analysis yet (``in flight - running``)
        will take one of the queued; a surplus task only finds the queue empty and returns.
        """
        client = self._client
        if client is None:
            return
        in_flight = self.in_flight
        room = self.capacity() - in_flight
        if room <= 0:
            return
        counts = self._store.counts()
        unclaimed = max(0, in_flight - counts.get("running", 0))
        for _ in range(min(room, counts.get("queued", 0) - unclaimed)):
            future = client.submit(run_task, self._data, pure=False,
                                   key=f"chirpcast-analysis-{uuid.uuid4().hex}")  # fmt: skip
            future.add_done_callback(lambda _: self._wake.set())
            with self._lock:
                self._futures.append(future)

    def stop(self, timeout: float = 20.0) -> None:
        """Stop dispatching, cancel tasks not yet started, close the client."""
        self._closing.set()
        self._wake.set()
        if self._thread.is_alive():
            self._thread.join(timeout)
        client = self._client
        if client is None:
            return
        with self._lock:
            futures, self._futures = self._futures, []
        try:
            if futures:
                client.cancel(futures)
            client.close(timeout=max(1.0, timeout / 2))
        except Exception:  # a scheduler already gone must not stop the server's shutdown
            log.exception("closing the Dask client of %s failed", self.address)
        self._client = None


def map_on_cluster(
    function: Callable[[Any, int], dict[str, Any]],
    setup: Any,
    count: int,
    *,
    scheduler: str,
    timeout: float = CONNECT_TIMEOUT,
    progress: Callable[[int, int], None] | None = None,
    skip: Collection[int] = (),
    on_row: Callable[[dict[str, Any]], None] | None = None,
) -> tuple[list[dict[str, Any]], int]:
    """``function(setup, i)`` for ``i < count`` not in ``skip`` on the cluster.

    Returns the rows sorted by index and the cluster's threads. Like
    :func:`service.parallel_runs.run_in_processes`, each row carries its ``index`` and
    ``on_row`` sees each as it finishes; the first task that raises stops the run (the
    rest are cancelled) with its error.
    """
    skipped = set(skip)
    todo = [i for i in range(count) if i not in skipped]
    client = connect(scheduler, timeout=timeout)
    try:
        threads = int(sum(client.nthreads().values()))
        token = uuid.uuid4().hex[:8]
        futures = client.map(function, [setup] * len(todo), todo, pure=False,
                             key=[f"chirpcast-injection-{token}-{i}" for i in todo])
        rows: list[dict[str, Any]] = []
        try:
            finished = _distributed().as_completed(futures, loop=client.loop)
            for done, future in enumerate(finished, start=1):
                rows.append(future.result())
                if on_row is not None:
                    on_row(rows[-1])
                if progress is not None:
                    progress(done, len(todo))
        finally:
            client.cancel(futures)
    finally:
        client.close()
    rows.sort(key=lambda r: int(r["index"]))
    return rows, threads
