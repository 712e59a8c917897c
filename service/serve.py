"""``chirpcast serve``: the web process plus its worker processes, on one machine.

Start-up order: open the database (a bad ``database_url`` stops here), check the
host is allowed (a non-loopback host needs an API key), take over the data folder
(:func:`take_over`: with SQLite, one server per folder), start the workers (local
processes, or a dispatcher to a Dask cluster: an unreachable scheduler stops here), then
serve with uvicorn until SIGINT or SIGTERM; the workers then put unfinished
analyses back in the queue and exit.
"""

from __future__ import annotations

import fcntl
import ipaddress
import logging
import math
import os
import shutil
import signal
import time
from pathlib import Path
from typing import IO

from estimator.errors import InputError

from . import jobs
from .execution import make_executor
from .settings import ServiceSettings
from .storage import Store, open_store

__all__ = ["is_loopback", "lock_data_dir", "serve", "take_over"]

log = logging.getLogger(__name__)


def is_loopback(host: str) -> bool:
    """Whether ``host`` only listens on this machine (127.0.0.0/8, ::1, localhost)."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def lock_data_dir(data_dir: Path) -> IO[str]:
    """Hold an exclusive lock on ``data_dir`` for this process (InputError if taken)."""
    handle = (data_dir / "serve.lock").open("a+", encoding="utf-8")
    try:
        fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as err:
        handle.close()
        msg = f"another chirpcast server already uses the data folder {data_dir};"
        msg += " stop it or pass another --data-dir"
        raise InputError(msg, field="data_dir") from err
    handle.seek(0)
    handle.truncate()
    handle.write(f"{os.getpid()}\n")
    handle.flush()
    return handle


#: With a shared database, a partial upload older than this (s) was cut off by a kill.
STALE_UPLOAD_SECONDS = 3600.0


def take_over(settings: ServiceSettings, store: Store) -> IO[str] | None:
    """Start-up housekeeping; return the data folder's lock to hold (``None``: shared).

    SQLite: this server owns the data folder: lock it, delete every partial upload and
    every analysis folder without a row, and requeue every analysis left running by an
    earlier server that died. PostgreSQL: other servers may use the same database and
    folder right now: take no lock, delete only partial uploads and row-less folders
    older than :data:`STALE_UPLOAD_SECONDS` and requeue only analyses whose heartbeat
    went stale.
    """
    shared = store.engine.shared
    lock = None if shared else lock_data_dir(settings.data_dir)
    try:
        cutoff = time.time() - STALE_UPLOAD_SECONDS if shared else math.inf
        for partial in (settings.data_dir / "tmp").iterdir():  # uploads cut off by a kill
            try:
                stale = partial.stat().st_mtime < cutoff
            except FileNotFoundError:  # another server finished it meanwhile
                continue
            if stale:
                shutil.rmtree(partial, ignore_errors=True)
        _remove_uncommitted(store, cutoff)
        orphans = jobs.requeue_stale(
            store, stale_after=settings.stale_after_seconds,
            max_attempts=settings.max_attempts, everything=not shared,
        )
    except BaseException:
        if lock is not None:
            lock.close()
        raise
    if orphans:
        log.warning("%d analyses left running by a server that stopped: queued again", orphans)
    return lock


def _remove_uncommitted(store: Store, cutoff: float) -> int:
    """Delete analysis folders without a database row, last changed before ``cutoff``.

    A submission moves its checked upload into ``analyses/<id>/`` and then inserts the
    row; a server killed between the two leaves a folder no analysis owns (found by the
    load-and-kill run). The client's retry with its Idempotency-Key makes a new analysis,
    so the folder is garbage. Returns the number removed.
    """
    removed = 0
    for folder in (store.data_dir / "analyses").iterdir():
        try:
            old = folder.stat().st_mtime < cutoff
        except FileNotFoundError:
            continue
        if old and store.get(folder.name) is None:
            shutil.rmtree(folder, ignore_errors=True)
            removed += 1
    if removed:
        log.warning("%d analysis folders without a database row (uploads cut off by a kill):"
                    " removed", removed)
    return removed


def _note_signal(signum: int, frame: object) -> None:
    log.info("signal %d: stopping", signum)


def serve(settings: ServiceSettings) -> int:
    """Run the service in the foreground until interrupted; return the exit code."""
    import uvicorn

    from .app import create_app

    store = open_store(settings)
    store.initialize()
    if not is_loopback(settings.host) and not store.has_keys():
        where = "--database-url URL" if store.engine.shared else f"--data-dir {settings.data_dir}"
        msg = f"refusing to listen on {settings.host}: no API keys exist, so anyone who can"
        msg += f" reach it could submit; create one with 'chirpcast keys add NAME {where}'"
        msg += " or serve on 127.0.0.1"
        raise InputError(msg, field="host")
    lock = take_over(settings, store)
    try:
        pool = make_executor(settings)  # local processes, or a Dask cluster (--scheduler)
        pool.start()  # an unreachable scheduler stops here, before anything listens
        try:
            config = uvicorn.Config(
                create_app(settings),
                host=settings.host,
                port=settings.port,
                log_level="info",
                timeout_graceful_shutdown=5,
            )
            # uvicorn re-raises the signal that stopped it once it is done; with these
            # handlers that is a no-op, so the workers below are stopped cleanly
            for signum in (signal.SIGINT, signal.SIGTERM):
                signal.signal(signum, _note_signal)
            uvicorn.Server(config).run()
        finally:
            pool.stop()
    finally:
        if lock is not None:
            lock.close()
    return 0
