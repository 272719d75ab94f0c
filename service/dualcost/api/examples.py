"""Example request bodies from ``dualcost/examples/`` (the repository's ``openapi_examples/``),
shown in the OpenAPI document and offered by the page as starts.

One file per example, named ``<operationId>.<example>.json``. An operation whose body is another
operation's without some fields shows that operation's examples without them (a household job
is created with the body of ``householdIndices`` less its households).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

#: operationId -> (the operation whose examples it shows, the fields it leaves out)
DERIVED: dict[str, tuple[str, tuple[str, ...]]] = {
    "createHouseholdJob": ("householdIndices", ("households",)),
}


def load_examples(folder: Path, operation_id: str) -> dict[str, dict[str, Any]]:
    """The examples of one operation, in file-name order, as OpenAPI's ``examples`` map."""
    source, left_out = DERIVED.get(operation_id, (operation_id, ()))
    out: dict[str, dict[str, Any]] = {}
    if not folder.is_dir():
        return out
    for path in sorted(folder.glob(f"{source}.*.json")):
        name = path.name[len(source) + 1 : -len(".json")]
        body = json.loads(path.read_text(encoding="utf-8"))
        out[name] = {"summary": name.replace("_", " "),
                     "value": {k: v for k, v in body.items() if k not in left_out}}
    return out


def add_examples(doc: dict[str, Any], folder: Path) -> None:
    """Put each operation's examples under its JSON request body in the OpenAPI document."""
    for item in doc.get("paths", {}).values():
        for op in item.values():
            content = op.get("requestBody", {}).get("content", {}).get("application/json")
            if content is None or "operationId" not in op:
                continue
            examples = load_examples(folder, op["operationId"])
            if examples:
                content["examples"] = examples
