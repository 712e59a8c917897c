"""The local worker processes: spawned, supervised, restarted when one dies.

:class:`WorkerPool` is the default :class:`service.execution.Executor`: ``count``
spawned processes, each running :func:`worker_main` (claim an analysis with
:func:`service.worker.run_one_job`, run it, repeat, with a periodic sweep of stale
claims) with its numerical libraries kept to one thread. A worker dies with the
serving process (Linux's parent-death signal, and a parent-pid check), and so does
any process it forks (the report's plot helper); SIGTERM makes it give its analysis
back at the next progress report.
"""

from __future__ import annotations

import ctypes
import logging
import multiprocessing as mp
import os
import signal
import socket
import threading
import time
import uuid
from multiprocessing.context import SpawnProcess
from multiprocessing.synchronize import Event
from typing import Any

from . import jobs
from .execution import one_thread_env
from .settings import ServiceSettings
from .storage import open_store
from .worker import _TERMINATE, run_one_job

__all__ = ["WorkerPool", "guard_forks", "worker_main"]

log = logging.getLogger(__name__)


def _die_with_parent() -> None:
    """Ask Linux to SIGKILL this process when its parent dies (no orphans after a kill -9)."""
    try:
        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        libc.prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        log.debug("no prctl: orphan detection by parent pid only")


def _forked_helper() -> None:
    """In a process forked by a worker: die with the worker, default SIGTERM."""
    _die_with_parent()
    signal.signal(signal.SIGTERM, signal.SIG_DFL)


def guard_forks() -> None:
    """Make every process forked from this one die with it (the pipeline's plot helper)."""
    os.register_at_fork(after_in_child=_forked_helper)


def _on_sigterm(signum: int, frame: object) -> None:
    _TERMINATE.set()


def worker_main(settings_data: dict[str, Any], stop: Event, parent: int) -> None:
    """Entry point of a worker process: run analyses until ``stop`` is set."""
    _die_with_parent()
    guard_forks()
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the serving process coordinates shutdown
    signal.signal(signal.SIGTERM, _on_sigterm)
    logging.basicConfig(level=logging.INFO, format="chirpcast worker: %(levelname)s: %(message)s")
    logging.getLogger("matplotlib").setLevel(logging.WARNING)
    settings = ServiceSettings(**settings_data)
    store = open_store(settings)
    name = f"{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:6]}"
    last_sweep = 0.0
    try:
        while not stop.is_set() and not _TERMINATE.is_set() and os.getppid() == parent:
            try:
                if time.monotonic() - last_sweep > settings.heartbeat_seconds:
                    last_sweep = time.monotonic()
                    jobs.requeue_stale(
                        store,
                        stale_after=settings.stale_after_seconds,
                        max_attempts=settings.max_attempts,
                    )
                if run_one_job(settings, worker=name) is None:
                    stop.wait(0.5)
            except Exception:  # the database unavailable: its job goes stale and is swept
                log.exception("worker %s: the queue could not be served; retrying", name)
                stop.wait(settings.heartbeat_seconds)
    except SystemExit:
        pass
    finally:
        # the pipeline's plot helper waits for work forever; multiprocessing would join it
        for child in mp.active_children():
            child.terminate()
            child.join(5)
            if child.is_alive():
                child.kill()
                child.join(5)


class WorkerPool:
    """N worker processes (spawned), restarted when one dies, stopped on :meth:`stop`.

    The default :class:`service.execution.Executor`; each process keeps its numerical
    libraries to one thread (one analysis per core).
    """

    def __init__(self, settings: ServiceSettings, count: int) -> None:
        self.settings, self.count = settings, count
        self._ctx = mp.get_context("spawn")
        self._stop = self._ctx.Event()
        self._procs: list[SpawnProcess] = []
        self._closing = threading.Event()
        self._watch = threading.Thread(target=self._supervise, daemon=True)

    def _spawn(self) -> SpawnProcess:
        proc = self._ctx.Process(
            target=worker_main,
            args=(self.settings.model_dump(mode="json"), self._stop, os.getpid()),
            name="chirpcast-worker",
        )
        with one_thread_env():  # inherited by the spawned process
            proc.start()
        return proc

    def capacity(self) -> int:
        """Analyses run at once: one per worker process."""
        return self.count

    def describe(self) -> str:
        """``"N worker process(es)"``."""
        return f"{self.count} worker process{'es' if self.count != 1 else ''}"

    def start(self) -> None:
        """Start the workers and the thread that replaces any that die."""
        self._procs = [self._spawn() for _ in range(self.count)]
        self._watch.start()

    def _supervise(self) -> None:
        while not self._closing.wait(1.0):
            for i, proc in enumerate(self._procs):
                if not proc.is_alive() and not self._closing.is_set():
                    log.warning("worker %s exited (%s); starting another", proc.pid, proc.exitcode)
                    self._procs[i] = self._spawn()

    def stop(self, timeout: float = 20.0) -> None:
        """Ask every worker to put its analysis back and exit; kill those that do not."""
        self._closing.set()
        self._stop.set()
        for proc in self._procs:
            if proc.is_alive() and proc.pid is not None:
                os.kill(proc.pid, signal.SIGTERM)
        deadline = time.monotonic() + timeout
        for proc in self._procs:
            proc.join(max(0.1, deadline - time.monotonic()))
            if proc.is_alive():
                proc.kill()
                proc.join(5)

    @property
    def pids(self) -> list[int]:
        """Process ids of the running workers."""
        return [p.pid for p in self._procs if p.pid is not None]

