"""Example request bodies from ``openapi_examples/``: one file per example, named
``<operationId>.<example>.json``, shown in the OpenAPI document as named examples."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any


def load_examples(folder: Path, operation_id: str) -> dict[str, dict[str, Any]]:
    """The examples of one operation, in file-name order, in FastAPI's ``openapi_examples`` form."""
    out: dict[str, dict[str, Any]] = {}
    if not folder.is_dir():
        return out
    for path in sorted(folder.glob(f"{operation_id}.*.json")):
        name = path.name[len(operation_id) + 1 : -len(".json")]
        body = json.loads(path.read_text(encoding="utf-8"))
        out[name] = {"summary": name.replace("_", " "), "value": body}
    return out
