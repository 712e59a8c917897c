"""Start and stop a real ``chirpcast serve`` subprocess for end-to-end tests.

The server runs as ``python -m service.cli serve`` on 127.0.0.1 in its own
process group (so that it and its worker processes can be signalled together),
with its output collected in a log file. Every wait is bounded in time and in
number of tries.
"""

from __future__ import annotations

import math
import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx

__all__ = [
    "HOST",
    "REPO_ROOT",
    "ServerHandle",
    "descendants",
    "free_port",
    "poll_json",
    "running_server",
    "start_server",
]

#: Only loopback: the tests never listen on another interface.
HOST = "127.0.0.1"
#: The repository root (``python -m service.cli`` is run from here).
REPO_ROOT = Path(__file__).resolve().parents[2]


def free_port() -> int:
    """Return a loopback TCP port that was free a moment ago (the OS picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((HOST, 0))
        return int(sock.getsockname()[1])


def _children_map() -> dict[int, list[int]]:
    """Parent pid -> child pids, read from /proc (Linux); empty elsewhere."""
    children: dict[int, list[int]] = {}
    proc = Path("/proc")
    if not proc.is_dir():
        return children
    for entry in proc.iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        # Fields after the parenthesised command name: state, ppid, pgrp, ...
        rest = stat.rsplit(")", 1)[-1].split()
        if len(rest) < 2 or rest[0] == "Z":
            continue
        children.setdefault(int(rest[1]), []).append(int(entry.name))
    return children


def descendants(pid: int) -> list[int]:
    """Living (non-zombie) descendants of ``pid``, breadth first (Linux /proc)."""
    children = _children_map()
    found: list[int] = []
    todo = list(children.get(pid, []))
    while todo and len(found) < 10_000:
        child = todo.pop(0)
        found.append(child)
        todo.extend(children.get(child, []))
    return found


def _alive(pid: int) -> bool:
    """True while ``pid`` exists and is not a zombie."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[-1].split()[0] != "Z"


@dataclass
class ServerHandle:
    """A running ``chirpcast serve`` subprocess."""

    process: subprocess.Popen[bytes]
    port: int
    data_dir: Path
    log_path: Path
    _log_file: Any = field(repr=False, default=None)

    @property
    def base_url(self) -> str:
        """``http://127.0.0.1:<port>``."""
        return f"http://{HOST}:{self.port}"

    def client(self, *, timeout: float = 30.0) -> httpx.Client:
        """An httpx client bound to this server (close it, or use ``with``)."""
        return httpx.Client(base_url=self.base_url, timeout=timeout)

    def log_text(self, *, tail: int = 6000) -> str:
        """The last ``tail`` characters of the server's combined stdout/stderr."""
        if self._log_file is not None:
            self._log_file.flush()
        try:
            text = self.log_path.read_text(errors="replace")
        except OSError:
            return ""
        return text[-tail:]

    def kill(self, *, timeout: float = 10.0, others: list[int] | None = None) -> list[int]:
        """SIGKILL the server, its process group and every descendant (a crash).

        Returns the pids that were killed besides the server itself (its
        descendants now, plus ``others``). Waits (at most ``timeout`` s) until
        none of them is alive.
        """
        others = sorted({*descendants(self.process.pid), *(others or [])})
        for sender, target in [(os.killpg, self.process.pid)] + [(os.kill, p) for p in others]:
            try:
                sender(target, signal.SIGKILL)
            except (ProcessLookupError, PermissionError):
                pass
        self._reap(timeout)
        deadline = time.monotonic() + timeout
        for _ in range(math.ceil(timeout / 0.05) + 1):
            if not any(_alive(p) for p in others) or time.monotonic() > deadline:
                break
            time.sleep(0.05)
        self._close_log()
        return others

    def stop(self, *, timeout: float = 15.0) -> int | None:
        """SIGTERM the process group; SIGKILL whatever is left after ``timeout`` s.

        Returns the server's exit code (negative: killed by that signal).
        """
        family = descendants(self.process.pid)  # before they are orphaned
        if self.process.poll() is None:
            try:
                os.killpg(self.process.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
            try:
                self.process.wait(timeout=timeout)
            except subprocess.TimeoutExpired:
                pass
        family.extend(descendants(self.process.pid))
        for _ in range(60):  # up to 3 s for orphaned helpers to exit on their own
            leftover = [p for p in set(family) if _alive(p)]
            if not leftover:
                break
            time.sleep(0.05)
        if self.process.poll() is None or leftover:
            self.kill(timeout=timeout, others=leftover)
        self._reap(timeout)
        self._close_log()
        return self.process.returncode

    def _reap(self, timeout: float) -> None:
        try:
            self.process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            pass

    def _close_log(self) -> None:
        if self._log_file is not None:
            self._log_file.close()
            self._log_file = None


def _server_env(extra: Mapping[str, str] | None) -> dict[str, str]:
    """This environment minus any CHIRPCAST_* setting, plus ``extra`` (hermetic runs)."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("CHIRPCAST_")}
    env["PYTHONUNBUFFERED"] = "1"
    env.update(extra or {})
    return env


def start_server(
    data_dir: Path,
    log_path: Path,
    *,
    workers: int = 1,
    env: Mapping[str, str] | None = None,
    startup_timeout: float = 90.0,
    attempts: int = 3,
) -> ServerHandle:
    """Start ``chirpcast serve`` on a free loopback port; return once /healthz answers 200.

    ``env`` adds environment variables (e.g. ``CHIRPCAST_HEARTBEAT_SECONDS``).
    A server that exits before answering (e.g. the port was taken meanwhile) is
    retried on a new port, at most ``attempts`` times; the log is appended to.
    """
    data_dir.mkdir(parents=True, exist_ok=True)
    problems: list[str] = []
    for _ in range(attempts):
        port = free_port()
        log_file = log_path.open("ab")
        command = [
            sys.executable, "-m", "service.cli", "serve",
            "--host", HOST, "--port", str(port),
            "--data-dir", str(data_dir), "--workers", str(workers),
        ]  # fmt: skip
        process = subprocess.Popen(
            command,
            cwd=REPO_ROOT,
            env=_server_env(env),
            stdin=subprocess.DEVNULL,
            stdout=log_file,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        handle = ServerHandle(process, port, data_dir, log_path, log_file)
        outcome = _wait_healthy(handle, startup_timeout)
        if outcome is None:
            return handle
        problems.append(outcome)
        handle.stop()
    msg = f"chirpcast serve did not come up: {'; '.join(problems)}\n--- log ---\n"
    raise RuntimeError(msg + ServerHandle(process, 0, data_dir, log_path).log_text())


def _wait_healthy(handle: ServerHandle, timeout: float, interval: float = 0.2) -> str | None:
    """None once GET /healthz gives 200; otherwise why not (exited, timed out)."""
    deadline = time.monotonic() + timeout
    with httpx.Client(base_url=handle.base_url, timeout=2.0) as client:
        for _ in range(math.ceil(timeout / interval) + 1):
            code = handle.process.poll()
            if code is not None:
                return f"exited with code {code} on port {handle.port}"
            try:
                if client.get("/healthz").status_code == 200:
                    return None
            except httpx.TransportError:
                pass
            if time.monotonic() > deadline:
                break
            time.sleep(interval)
    return f"no 200 from /healthz on port {handle.port} within {timeout:.0f} s"


@contextmanager
def running_server(data_dir: Path, log_path: Path, **options: Any) -> Iterator[ServerHandle]:
    """``start_server`` as a context manager that always stops the server."""
    handle = start_server(data_dir, log_path, **options)
    try:
        yield handle
    finally:
        handle.stop()


def poll_json(
    client: httpx.Client,
    url: str,
    until: Callable[[dict[str, Any]], bool],
    *,
    timeout: float,
    interval: float = 0.5,
    give_up: Callable[[dict[str, Any]], bool] | None = None,
) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """GET ``url`` every ``interval`` s until ``until(body)``; bounded by ``timeout``.

    Returns the last body and every body seen. Raises ``TimeoutError`` when
    time runs out and ``RuntimeError`` when ``give_up(body)`` holds or the
    answer is not 200.
    """
    deadline = time.monotonic() + timeout
    seen: list[dict[str, Any]] = []
    for _ in range(math.ceil(timeout / interval) + 1):
        response = client.get(url)
        if response.status_code != 200:
            msg = f"GET {url} -> {response.status_code}: {response.text[:500]}"
            raise RuntimeError(msg)
        body = response.json()
        seen.append(body)
        if until(body):
            return body, seen
        if give_up is not None and give_up(body):
            msg = f"GET {url} reached {body.get('state')!r}: {body}"
            raise RuntimeError(msg)
        if time.monotonic() > deadline:
            break
        time.sleep(interval)
    last = seen[-1] if seen else None
    msg = f"GET {url}: condition not met within {timeout:.0f} s; last answer {last}"
    raise TimeoutError(msg)
