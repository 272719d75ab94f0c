"""Shared fixtures: the app in-process, with default settings, and the example request bodies."""

from __future__ import annotations

import atexit
import json
import os
import shutil
import socket
import tempfile
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest
import uvicorn
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.api.transport import protocol_for
from dualcost.config import Settings
from tests.databases import database_url, postgres_server  # noqa: F401 (fixtures)

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "openapi_examples"
# The tests' household jobs and saved runs go to a database of their own, never the user's
# (tests that need one of their own give data_dir or database_url; see tests/storage.py).
os.environ["DUALCOST_DATA_DIR"] = tempfile.mkdtemp(prefix="dualcost-tests-")
atexit.register(shutil.rmtree, os.environ["DUALCOST_DATA_DIR"], True)
os.environ.pop("DUALCOST_DATABASE_URL", None)
# All the session's apps (and the live server) share that one job table. With the default of 32
# jobs, the jobs other tests created and never uploaded to filled it, so a test's own finished
# job was the one replaced by its next job (the replacement policy takes finished jobs first)
# and read back as 404. The policy itself is tested on tables of its own (test_job_owners.py).
os.environ["DUALCOST_MAX_HOUSEHOLD_JOBS"] = "100000"


@pytest.fixture(scope="session")
def client() -> TestClient:
    return TestClient(create_app(Settings(examples_dir=EXAMPLES)))


def load_example(name: str) -> dict[str, Any]:
    with open(EXAMPLES / name, encoding="utf-8") as fh:
        return json.load(fh)  # type: ignore[no-any-return]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextmanager
def running_service(settings: Settings) -> Iterator[str]:
    """The service on a free loopback port, in a thread, served as ``dualcost serve`` serves it
    (uvicorn with the bounded protocol of dualcost.api.transport); its URL."""
    config = uvicorn.Config(create_app(settings), host="127.0.0.1", port=free_port(),
                            log_level="warning", http=protocol_for(settings))
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        assert time.monotonic() < deadline, "the service did not start"
        time.sleep(0.05)
    try:
        yield f"http://127.0.0.1:{config.port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)


@pytest.fixture(scope="session")
def live_url() -> Iterator[str]:
    """The service on a free loopback port, in a thread, for clients that need a real socket."""
    with running_service(Settings(examples_dir=EXAMPLES)) as url:
        yield url
