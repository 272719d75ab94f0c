"""The databases the job and run tests run against: SQLite always, and a real PostgreSQL
server started for the session in a temporary directory with ``initdb`` and ``pg_ctl`` (Debian's
``postgresql`` package) on a free loopback port, stopped after. Without the binaries the
PostgreSQL cases are skipped, except under CI (``CI=true``), where they fail.

``initdb`` refuses to run as root: as root the server's directory is given to the ``postgres``
user (the package creates it) and ``initdb`` and ``pg_ctl`` run as that user through
``runuser``. The server trusts local connections (``--auth=trust``) and runs with
``fsync=off``: it holds nothing worth keeping.
"""

from __future__ import annotations

import glob
import os
import shutil
import subprocess
import tempfile
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

from dualcost.storage import forget

KINDS = ["sqlite", "postgresql"]


def _bindir() -> Path | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    return Path(found[-1]).parent if found else None


def _free_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="session")
def postgres_server() -> Iterator[str]:
    """A running PostgreSQL server: its SQLAlchemy URL without a database name."""
    bindir = _bindir()
    if bindir is None:
        message = "PostgreSQL is not installed (Debian package postgresql: initdb, pg_ctl)"
        if os.environ.get("CI") == "true":
            pytest.fail(message)
        pytest.skip(message)
    home = tempfile.mkdtemp(prefix="dualcost-pg-")
    as_user: list[str] = []
    if os.geteuid() == 0:  # initdb refuses root
        shutil.chown(home, "postgres", "postgres")
        as_user = ["runuser", "-u", "postgres", "--"]
    data, port = f"{home}/data", _free_port()
    subprocess.run([*as_user, str(bindir / "initdb"), "-D", data, "-U", "postgres",
                    "--auth=trust", "-E", "UTF8", "--no-sync"], check=True,
                   capture_output=True)
    options = (f"-p {port} -k {home} -c listen_addresses=127.0.0.1 -c fsync=off "
               "-c max_connections=400")
    subprocess.run([*as_user, str(bindir / "pg_ctl"), "-D", data, "-o", options,
                    "-l", f"{home}/server.log", "-w", "start"], check=True, capture_output=True)
    try:
        yield f"postgresql+psycopg://postgres@127.0.0.1:{port}"
    finally:
        subprocess.run([*as_user, str(bindir / "pg_ctl"), "-D", data, "-m", "immediate",
                        "-w", "stop"], capture_output=True)
        shutil.rmtree(home, ignore_errors=True)


def new_database(kind: str, request: pytest.FixtureRequest, folder: Path) -> str:
    """The URL of a new, empty database of ``kind``, forgotten (its connections closed) when
    the test ends."""
    if kind == "sqlite":
        url = f"sqlite:///{folder / f'{uuid.uuid4().hex[:8]}.sqlite3'}"
    else:
        import psycopg

        server = request.getfixturevalue("postgres_server")
        name = f"t_{uuid.uuid4().hex[:12]}"
        plain = server.replace("postgresql+psycopg://", "postgresql://")
        with psycopg.connect(f"{plain}/postgres", autocommit=True) as connection:
            connection.execute(f"CREATE DATABASE {name}")
        url = f"{server}/{name}"
    request.addfinalizer(lambda: forget(url))
    return url


@pytest.fixture(params=KINDS)
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A new, empty database: SQLite, then PostgreSQL."""
    return new_database(request.param, request, tmp_path)
