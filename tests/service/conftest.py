"""Database engines for the service tests: SQLite always, PostgreSQL where a server exists.

PostgreSQL comes from ``CHIRPCAST_TEST_POSTGRES_URL`` when set; otherwise, when the
server binaries ``initdb`` and ``pg_ctl`` are on PATH (or in Debian's
``/usr/lib/postgresql/VERSION/bin``), from a private throwaway
cluster on 127.0.0.1 (a free port, its socket in a temporary folder, no fsync),
started once per session and stopped at its end. As root (which ``initdb`` refuses)
the cluster runs as the user ``nobody``. Each test gets a schema of its own.
Without either, the PostgreSQL runs are skipped with the reason.
"""

from __future__ import annotations

import os
import pwd
import secrets
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from pathlib import Path

import pytest

SKIP_REASON = ("PostgreSQL tests need a server: set CHIRPCAST_TEST_POSTGRES_URL or install"
               " the server binaries (initdb, pg_ctl)")
#: The superuser name of the throwaway cluster.
TEST_USER = "chirpcast"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _binary(name: str) -> str | None:
    """``name`` on PATH, else in Debian's versioned server folder (the newest version)."""
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(Path("/usr/lib/postgresql").glob(f"*/bin/{name}"),
                        key=lambda p: int(p.parts[-3]) if p.parts[-3].isdigit() else 0)
    return str(candidates[-1]) if candidates else None


def _run(argv: list[str], user: str | None, timeout: float) -> subprocess.CompletedProcess[str]:
    return subprocess.run(argv, user=user, capture_output=True, text=True, timeout=timeout,
                          check=False, cwd="/")


def _start_cluster(folder: Path, user: str | None) -> str:
    """initdb + pg_ctl start in ``folder``; the URL of its ``postgres`` database."""
    data = folder / "cluster"
    initdb = str(_binary("initdb"))
    made = _run([initdb, "-D", str(data), "-U", TEST_USER, "--auth=trust", "--no-sync",
                 "-E", "UTF8", "--locale=C"], user, timeout=120)
    if made.returncode != 0:
        pytest.fail(f"initdb failed: {made.stderr[-2000:]}")
    for _ in range(3):  # a port found free may be taken before the server binds it
        port = _free_port()
        options = (f"-p {port} -k {folder} -h 127.0.0.1 -c fsync=off"
                   " -c synchronous_commit=off -c full_page_writes=off -c max_connections=200")
        started = _run([str(_binary("pg_ctl")), "-D", str(data), "-l", str(folder / "server.log"),
                        "-w",
                        "-t", "60", "-o", options, "start"], user, timeout=90)
        if started.returncode == 0:
            return f"postgresql://{TEST_USER}@127.0.0.1:{port}/postgres"
    log = (folder / "server.log").read_text(errors="replace")[-2000:]
    pytest.fail(f"the throwaway PostgreSQL server did not start: {started.stderr} {log}")


@pytest.fixture(scope="session")
def postgres_server() -> Iterator[str]:
    """The URL of a PostgreSQL database the tests may create schemas in."""
    given = os.environ.get("CHIRPCAST_TEST_POSTGRES_URL")
    if given:
        yield given
        return
    if _binary("initdb") is None or _binary("pg_ctl") is None:
        pytest.skip(SKIP_REASON)
    user = None
    folder = Path(tempfile.mkdtemp(prefix="chirpcast-pg-"))
    if os.geteuid() == 0:  # initdb refuses to run as root
        try:
            nobody = pwd.getpwnam("nobody")
        except KeyError:
            shutil.rmtree(folder)
            pytest.skip(SKIP_REASON + " (as root, a user 'nobody' to run the server as)")
        user = "nobody"
        os.chown(folder, nobody.pw_uid, nobody.pw_gid)
    try:
        url = _start_cluster(folder, user)
        try:
            yield url
        finally:
            _run([str(_binary("pg_ctl")), "-D", str(folder / "cluster"), "-m", "immediate",
                  "-w", "-t", "30",
                  "stop"], user, timeout=60)
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def _in_schema(url: str, schema: str) -> str:
    joiner = "&" if "?" in url else "?"
    return f"{url}{joiner}options=-csearch_path%3D{schema}"


@pytest.fixture(params=["sqlite", "postgresql"])
def database_url(request: pytest.FixtureRequest) -> Iterator[str | None]:
    """``None`` (SQLite in the data folder), then a fresh PostgreSQL schema's URL."""
    if request.param == "sqlite":
        yield None
        return
    import psycopg

    base = request.getfixturevalue("postgres_server")
    schema = "test_" + secrets.token_hex(6)
    with psycopg.connect(base, autocommit=True) as db:
        db.execute(f"CREATE SCHEMA {schema}")
    try:
        yield _in_schema(base, schema)
    finally:
        with psycopg.connect(base, autocommit=True) as db:
            db.execute(f"DROP SCHEMA {schema} CASCADE")
