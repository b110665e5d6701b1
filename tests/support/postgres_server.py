"""A throw-away PostgreSQL server for the store tests, started by the test suite itself.

The server binaries come from the Debian package ``postgresql`` (installed by
.ci/run where missing). When they are absent, the tests that need the server
skip and say so. PostgreSQL refuses to run as root, so under root (as CI
runs) the server runs as the ``postgres`` user through ``runuser``. Each test
gets a fresh database from pytest-postgresql's janitor (factories.postgresql
on top of factories.postgresql_noproc, which is pointed at this server).
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import pytest


def server_binaries() -> Path | None:
    """The folder holding initdb and pg_ctl, or None."""
    found = shutil.which("pg_ctl")
    if found and shutil.which("initdb"):
        return Path(os.path.realpath(found)).parent
    for candidate in sorted(glob.glob("/usr/lib/postgresql/*/bin/pg_ctl"), reverse=True):
        return Path(candidate).parent
    return None


def skip_reason() -> str | None:
    """Why the PostgreSQL tests cannot run here, or None when they can."""
    try:
        import psycopg  # noqa: F401
        import pytest_postgresql  # noqa: F401
    except ImportError as err:
        return f"psycopg and pytest-postgresql are needed for the PostgreSQL store tests ({err})"
    if server_binaries() is None:
        return ("no PostgreSQL server binary (pg_ctl, initdb) on this machine; install the Debian package "
                "postgresql (.ci/run does) to run the store tests against a real server")
    if os.geteuid() == 0 and (shutil.which("runuser") is None or _no_user("postgres")):
        return "running as root without a 'postgres' user and runuser, so no PostgreSQL server can be started"
    return None


def _no_user(name: str) -> bool:
    import pwd
    try:
        pwd.getpwnam(name)
    except KeyError:
        return True
    return False


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@dataclass
class RunningServer:
    """What pytest-postgresql's noproc factory reads from the fixture it depends on."""

    host: str
    port: int
    user: str = "postgres"
    password: str = ""
    options: str = ""
    maintenance_dbname: str = "postgres"
    template_dbname: str | None = None
    dbname: str = "postgres"


def _as_server_user(command: list[str]) -> list[str]:
    return ["runuser", "-u", "postgres", "--"] + command if os.geteuid() == 0 else command


@contextmanager
def running_server() -> Iterator[RunningServer]:
    """Start a PostgreSQL server on a free local port in a temporary folder; stop and remove it after.

    Raises RuntimeError with skip_reason() when no server can run here.
    """
    reason = skip_reason()
    if reason:
        raise RuntimeError(reason)
    binaries = server_binaries()
    root = Path(tempfile.mkdtemp(prefix="fitkit-pg-"))
    data = root / "data"
    if os.geteuid() == 0:
        shutil.chown(root, "postgres", "postgres")
        os.chmod(root, 0o700)
    port = _free_port()
    env = dict(os.environ, LC_ALL="C")
    pg_ctl = str(binaries / "pg_ctl")
    try:
        subprocess.run(_as_server_user([str(binaries / "initdb"), "-D", str(data), "-U", "postgres",
                                        "--auth=trust", "-E", "UTF8", "--no-sync"]),
                       check=True, capture_output=True, env=env, timeout=120)
        subprocess.run(_as_server_user([pg_ctl, "-D", str(data), "-l", str(root / "server.log"), "-w", "-o",
                                        f"-p {port} -k {root} -c listen_addresses=127.0.0.1 -c fsync=off", "start"]),
                       check=True, capture_output=True, env=env, timeout=120)
        yield RunningServer(host="127.0.0.1", port=port)
    finally:
        subprocess.run(_as_server_user([pg_ctl, "-D", str(data), "-m", "immediate", "stop"]),
                       capture_output=True, env=env, timeout=60)
        shutil.rmtree(root, ignore_errors=True)


@pytest.fixture(scope="session")
def fitkit_postgres_server():
    """A PostgreSQL server on a free local port for this test session (skips when none can run)."""
    reason = skip_reason()
    if reason:
        pytest.skip(reason)
    with running_server() as server:
        yield server


def postgres_url(connection) -> str:
    """The store URL of the database behind a psycopg connection (from pytest-postgresql)."""
    info = connection.info
    return f"postgresql://{info.user}@{info.host}:{info.port}/{info.dbname}"


def server_url(server: RunningServer, dbname: str = "postgres") -> str:
    """The store URL of a database on a running server."""
    return f"postgresql://{server.user}@{server.host}:{server.port}/{dbname}"
