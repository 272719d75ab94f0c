"""A second service on loopback that requires an API key, for the client and ``--api-key``."""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator

import pytest
import uvicorn

from dualcost.api.app import create_app
from dualcost.config import Settings
from tests.conftest import EXAMPLES, free_port

API_KEY = "wrenmouth-ferry-key"


@pytest.fixture(scope="session")
def keyed_url() -> Iterator[str]:
    """The service with access control on (one key, :data:`API_KEY`), in a thread."""
    settings = Settings(examples_dir=EXAMPLES, api_keys=(API_KEY,))
    config = uvicorn.Config(create_app(settings), host="127.0.0.1", port=free_port(),
                            log_level="warning")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        assert time.monotonic() < deadline, "the keyed service did not start"
        time.sleep(0.05)
    yield f"http://127.0.0.1:{config.port}"
    server.should_exit = True
    thread.join(timeout=10)
