"""Where queued analyses run: the :class:`Executor` interface and the choice of one.

The database is the queue (:mod:`service.jobs`): an executor only provides places
that claim the oldest queued analysis, run it with heartbeats and record its end.
It never holds a job itself, so an executor that dies loses nothing: the job's
heartbeat goes silent and the sweep puts it back in the queue. Two executors exist:
local worker processes (:class:`service.worker_pool.WorkerPool`, the default) and a Dask
cluster (:class:`service.dask_engine.DaskExecutor`, ``--scheduler tcp://HOST:PORT``).
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING, Protocol, runtime_checkable

if TYPE_CHECKING:
    from .settings import ServiceSettings

__all__ = ["ONE_THREAD", "Executor", "make_executor", "one_thread_env"]

#: One analysis per core: each process's numerical libraries keep to one thread.
ONE_THREAD = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


@runtime_checkable
class Executor(Protocol):
    """Runs queued analyses somewhere until stopped; the jobs themselves stay in the store."""

    def start(self) -> None:
        """Begin taking analyses from the queue (raises ``InputError`` if it cannot)."""
        ...

    def stop(self, timeout: float = 20.0) -> None:
        """Stop taking analyses; within ``timeout`` s, hand running ones back or let them end."""
        ...

    def capacity(self) -> int:
        """How many analyses it can run at once right now."""
        ...

    def describe(self) -> str:
        """A few words for the start-up line (``"2 worker processes"``)."""
        ...


def make_executor(settings: ServiceSettings) -> Executor:
    """The executor ``settings`` ask for: a Dask cluster if ``scheduler`` is set, else local."""
    if settings.scheduler:
        from .dask_engine import DaskExecutor

        return DaskExecutor(settings)
    from .worker_pool import WorkerPool

    return WorkerPool(settings, settings.workers)


@contextmanager
def one_thread_env() -> Iterator[None]:
    """Set :data:`ONE_THREAD` in the environment (for processes spawned inside); restore it."""
    saved = {k: os.environ.get(k) for k in ONE_THREAD}
    os.environ.update(ONE_THREAD)
    try:
        yield
    finally:
        for key, value in saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value
