"""Running a saved run again on this version, and its differences figure by figure.

The saved request (method, path, query less ``save``, body, Content-Type and Accept) is handed
to the route that answers it in this process, as the same key, without going over the network;
the new answer is compared with the saved one:

- a JSON answer member by member: each number with the number at the same JSON Pointer, every
  other value (text, true/false, null) by equality; a member present in one answer only is a
  difference. The ``provenance`` member is left out (its version may differ by design);
- a CSV answer cell by cell (``#cell=row,column``, RFC 7111, the header row is 1), numbers as
  numbers, and the provenance trailer rows left out; a Parquet answer (the table of a CSV
  answer) the same way, its column names as row 1; a plain-text answer as one value.

A figure is the same when it is equal, bit for bit; otherwise its difference (current − saved)
and relative difference are given. A new answer that is a problem (the input is refused on
this version) is reported with its status and problem, nothing compared.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import orjson
from fastapi import FastAPI, Request
from starlette.routing import Match
from starlette.types import Message

from ...storage.tables import RunRecord
from ..problems import RunNotFound
from ..provenance import service_version
from ..render import PARQUET_MEDIA_TYPE, TRAILER_KEYS, format_cell

#: Differences listed at most (all are counted).
MAX_LISTED = 1000


@dataclass
class Rerun:
    """The new answer's status, media type and bytes."""

    status: int
    media_type: str
    body: bytes


@dataclass
class Differences:
    compared: int = 0
    differing: int = 0
    largest: float | None = None
    listed: list[dict[str, Any]] = field(default_factory=list)

    def note(self, where: str, saved: Any, current: Any) -> None:
        """One figure compared (numbers, or other values) and, if they differ, listed."""
        self.compared += 1
        if _same(saved, current):
            return
        self.differing += 1
        entry: dict[str, Any] = {"where": where, "saved": saved, "current": current,
                                 "difference": None, "relative": None}
        if _number(saved) and _number(current):
            delta = float(current) - float(saved)
            entry["difference"] = delta if math.isfinite(delta) else None
            entry["relative"] = (delta / abs(float(saved))
                                 if saved and math.isfinite(delta) else None)
            if entry["difference"] is not None:
                self.largest = max(self.largest or 0.0, abs(delta))
        if len(self.listed) < MAX_LISTED:
            self.listed.append(entry)


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _same(a: Any, b: Any) -> bool:
    if _number(a) and _number(b):
        return float(a) == float(b)
    return bool(type(a) is type(b) and a == b)


# -- running again ----------------------------------------------------------------------------


async def run_again(app: FastAPI, request: Request, row: RunRecord) -> Rerun:
    """The saved request answered now by this process's route for it, as the same key."""
    payload = row.request_body
    if not payload and row.method != "GET" and row.content_type:
        payload = row.input.encode()  # a JSON body: its canonical input is that body
    headers = [(b"content-length", str(len(payload)).encode())]
    if row.content_type:
        headers.append((b"content-type", row.content_type.encode("latin-1")))
    if row.accept:
        headers.append((b"accept", row.accept.encode("latin-1")))
    scope: dict[str, Any] = {
        **{k: v for k, v in request.scope.items() if k.startswith(("starlette.", "fastapi"))},
        "type": "http", "http_version": "1.1", "method": row.method, "scheme": "http",
        "path": row.path, "raw_path": row.path.encode(), "root_path": "",
        "query_string": row.query.encode(), "headers": headers, "app": app,
        "client": request.scope.get("client"), "server": request.scope.get("server"),
        "state": dict(request.scope.get("state") or {}), "extensions": {},
    }
    route = next((r for r in app.router.routes if r.matches(scope)[0] == Match.FULL), None)
    if route is None:
        raise RunNotFound(f"this version has no operation at {row.method} {row.path}")
    scope.update(route.matches(scope)[1])
    sent: list[bytes] = []
    start: dict[str, Any] = {}
    body_sent = False

    async def receive() -> Message:
        nonlocal body_sent
        if body_sent:
            return {"type": "http.disconnect"}
        body_sent = True
        return {"type": "http.request", "body": payload, "more_body": False}

    async def send(message: Message) -> None:
        if message["type"] == "http.response.start":
            start.update(message)
        elif message["type"] == "http.response.body":
            sent.append(bytes(message.get("body", b"")))

    await route.handle(scope, receive, send)
    media = next((v.decode("latin-1") for k, v in start.get("headers", [])
                  if k.lower() == b"content-type"), "")
    return Rerun(int(start.get("status", 500)), media, b"".join(sent))


# -- the differences --------------------------------------------------------------------------


def differences(row: RunRecord, new: Rerun) -> Differences:
    """The saved answer against the new one, figure by figure (see the module's notes)."""
    found = Differences()
    if row.answer_type.startswith("application/json"):
        saved, current = orjson.loads(row.answer), orjson.loads(new.body)
        if isinstance(saved, dict) and isinstance(current, dict):
            saved.pop("provenance", None)
            current.pop("provenance", None)
        _walk(found, "", saved, current)
    elif row.answer_type.startswith(("text/csv", PARQUET_MEDIA_TYPE)):
        read = _parquet_rows if row.answer_type.startswith(PARQUET_MEDIA_TYPE) else _rows
        old_rows, new_rows = read(row.answer), read(new.body)
        for r in range(max(len(old_rows), len(new_rows))):
            a = old_rows[r] if r < len(old_rows) else []
            b = new_rows[r] if r < len(new_rows) else []
            for c in range(max(len(a), len(b))):
                found.note(f"#cell={r + 1},{c + 1}", _cell(a, c), _cell(b, c))
    else:
        found.note("", _cell([row.answer.decode("utf-8", "replace").strip()], 0),
                   _cell([new.body.decode("utf-8", "replace").strip()], 0))
    return found


def _walk(found: Differences, where: str, saved: Any, current: Any) -> None:
    if isinstance(saved, dict) and isinstance(current, dict):
        for key in [*saved, *(k for k in current if k not in saved)]:
            step = f"{where}/{_escape(str(key))}"
            if key not in saved or key not in current:
                found.note(step, saved.get(key, _MISSING), current.get(key, _MISSING))
            else:
                _walk(found, step, saved[key], current[key])
    elif isinstance(saved, list) and isinstance(current, list):
        for i in range(max(len(saved), len(current))):
            _walk(found, f"{where}/{i}", saved[i] if i < len(saved) else _MISSING,
                  current[i] if i < len(current) else _MISSING)
    else:
        found.note(where, saved, current)


#: What a difference lists for a member or element one answer does not have.
_MISSING = "(absent)"


def _escape(key: str) -> str:
    return key.replace("~", "~0").replace("/", "~1")


def _rows(data: bytes) -> list[list[str]]:
    text = data.decode("utf-8", errors="replace")
    delimiter = ";" if text.split("\n", 1)[0].count(";") > text.split("\n", 1)[0].count(",") \
        else ","
    return [r for r in csv.reader(io.StringIO(text), delimiter=delimiter)
            if not (r and r[0] in TRAILER_KEYS)]


def _parquet_rows(data: bytes) -> list[list[str]]:
    """A Parquet answer's column names and rows as the cells its CSV answer would have."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        table = pq.read_table(pa.BufferReader(data))
    except (pa.ArrowException, OSError):  # not a table (a problem): one cell of text
        return [[data.decode("utf-8", errors="replace")]]
    columns = [[format_cell(v) for v in table.column(j).to_pylist()]
               for j in range(table.num_columns)]
    return [list(table.column_names), *map(list, zip(*columns, strict=True))]


def _cell(row: list[str], c: int) -> Any:
    """A CSV cell as a number when it reads as one, else its text (absent past the row)."""
    if c >= len(row):
        return _MISSING
    text = row[c]
    try:
        value = float(text)
    except ValueError:
        return text
    return value if math.isfinite(value) else text


def document(row: RunRecord, new: Rerun, found: Differences | None) -> dict[str, Any]:
    """The answer of a re-run."""
    problem = None
    if found is None:
        try:
            problem = orjson.loads(new.body)
        except orjson.JSONDecodeError:
            problem = new.body.decode("utf-8", "replace")
    return {
        "run": row.id, "operation": row.operation, "input_digest": row.input_digest,
        "saved": {"version": row.version, "created": row.created.isoformat() + "Z",
                  "status": row.status_code},
        "current": {"version": service_version(), "status": new.status, "problem": problem},
        "identical": found is not None and found.differing == 0,
        "figures_compared": 0 if found is None else found.compared,
        "figures_differing": 0 if found is None else found.differing,
        "largest_difference": None if found is None else found.largest,
        "differences": [] if found is None else found.listed,
        "differences_listed_at_most": MAX_LISTED,
    }


def table(doc: dict[str, Any]) -> Iterator[list[Any]]:
    """The differences as CSV rows (after the header :data:`COLUMNS`)."""
    for d in doc["differences"]:
        yield [d["where"], _text(d["saved"]), _text(d["current"]), d["difference"],
               d["relative"]]


COLUMNS = ("where", "saved", "current", "difference", "relative")


def _text(value: Any) -> Any:
    return value if _number(value) or isinstance(value, str) or value is None else (
        orjson.dumps(value).decode())
