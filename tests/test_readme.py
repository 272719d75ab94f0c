"""The README's set-up commands: CI runs exactly its test command (common practice: docs that run)."""

from __future__ import annotations

import re

from tests.conftest import ROOT


def _fenced_after(heading: str, text: str) -> str:
    part = text.split(heading, 1)[1]
    return re.search(r"```(?:sh|bash)?\n(.+?)\n```", part, re.S).group(1).strip()  # type: ignore[union-attr]


def test_ci_runs_exactly_the_readme_test_command() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    command = _fenced_after("Run the tests", readme)
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert command in ci.splitlines()


def test_readme_states_the_caution_about_indexation() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8").lower()
    assert "official statistics" in readme and "indexation" in readme
