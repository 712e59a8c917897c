"""``chirpcast serve``: the web process plus its worker processes, on one machine.

Start-up order: check the host is allowed (a non-loopback host needs an API key),
take the data folder's lock (one server per folder), requeue every analysis
left ``running`` by an earlier server that died, start the workers, then serve
with uvicorn until SIGINT or SIGTERM; the workers then put unfinished analyses
back in the queue and exit.
"""

from __future__ import annotations

import fcntl
import ipaddress
import logging
import os
import shutil
import signal
from pathlib import Path
from typing import IO

from estimator.errors import InputError

from . import jobs
from .settings import ServiceSettings
from .storage import Store
from .worker import WorkerPool

__all__ = ["is_loopback", "lock_data_dir", "serve"]

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


def _note_signal(signum: int, frame: object) -> None:
    log.info("signal %d: stopping", signum)


def serve(settings: ServiceSettings) -> int:
    """Run the service in the foreground until interrupted; return the exit code."""
    import uvicorn

    from .app import create_app

    store = Store(settings.data_dir)
    store.initialize()
    if not is_loopback(settings.host) and not store.has_keys():
        msg = f"refusing to listen on {settings.host}: no API keys exist, so anyone who can"
        msg += " reach it could submit; create one with 'chirpcast keys add NAME"
        msg += f" --data-dir {settings.data_dir}' or serve on 127.0.0.1"
        raise InputError(msg, field="host")
    lock = lock_data_dir(settings.data_dir)
    try:
        for partial in (settings.data_dir / "tmp").iterdir():  # uploads cut off by a kill
            shutil.rmtree(partial, ignore_errors=True)
        orphans = jobs.requeue_stale(
            store, stale_after=0.0, max_attempts=settings.max_attempts, everything=True
        )
        if orphans:
            log.warning("%d analyses left running by an earlier server: queued again", orphans)
        pool = WorkerPool(settings, settings.workers)
        pool.start()
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
        lock.close()
    return 0
