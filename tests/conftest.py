"""Shared fixtures: the app in-process, with default settings, and the example request bodies."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.config import Settings

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "openapi_examples"


@pytest.fixture(scope="session")
def client() -> TestClient:
    return TestClient(create_app(Settings(examples_dir=EXAMPLES)))


def load_example(name: str) -> dict[str, Any]:
    with open(EXAMPLES / name, encoding="utf-8") as fh:
        return json.load(fh)  # type: ignore[no-any-return]
