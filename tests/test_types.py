"""The source type-checks: mypy, strict and with the pydantic plugin, as pyproject.toml sets it
(common practice: the types the code declares are the ones it uses)."""

from __future__ import annotations

import subprocess
import sys

import pytest

from tests.conftest import ROOT


def test_mypy_finds_no_issue_in_the_service() -> None:
    pytest.importorskip("mypy")
    done = subprocess.run([sys.executable, "-m", "mypy"], cwd=ROOT, capture_output=True,
                          text=True, timeout=600)
    assert done.returncode == 0, done.stdout + done.stderr
