"""``dualcost check``: recompute a pipeline's published index numbers and fail when one differs.

Inputs are files:

- the published values: CSV with columns ``formula``, ``period``, ``value`` and optionally
  ``series`` (``fixed_base``, the default, or ``chained``); each value's decimals as written set
  its tolerance unless ``--tolerance`` is given. Or JSON: a list of
  ``{"formula", "series", "period", "value", "decimals"}`` (or an object with that list under
  ``"published"``).
- the panel they were computed from: CSV in long form, ``period,item,price`` with ``quantity``
  and/or ``expenditure`` columns, one row per period and item; or JSON in the shape of the
  ``POST /v1/index-series`` body (which may carry the options too).

The check runs in process, or against a running service with ``--url`` (``POST /v1/audits``).
It prints a table, writes JUnit XML with ``--junit`` (one test case per published value) and
exits 0 when every value agrees, 1 when one does not, 2 when the inputs cannot be read.
"""

from __future__ import annotations

import json
import math
import sys
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any, TextIO

from .api.inputs.csv import read_table
from .core.audit import decimals_of
from .core.errors import DualcostError


class CheckInputError(DualcostError):
    """An input file cannot be read; the message says which and why."""


def published_from_file(path: Path) -> list[dict[str, Any]]:
    text = path.read_text(encoding="utf-8")
    if path.suffix.lower() == ".json":
        data = json.loads(text)
        values = data["published"] if isinstance(data, dict) else data
        if not isinstance(values, list):
            raise CheckInputError(f"{path}: expected a list of published values")
        return values
    from .api.problems import RequestProblem

    try:
        rows = read_table(text, required=["formula", "period", "value"], numeric=[])
    except RequestProblem as exc:
        raise CheckInputError(f"{path}: " + "; ".join(f"{e.pointer} {e.detail}" for e in exc.errors)) from exc
    out = []
    for k, row in enumerate(rows, start=2):
        raw = row["value"]
        try:
            value = float(raw)
        except ValueError:
            raise CheckInputError(f"{path}#cell={k}: {raw!r} is not a number") from None
        if not math.isfinite(value):
            raise CheckInputError(f"{path}#row={k}: the value must be a finite number")
        out.append({"formula": row["formula"], "series": row.get("series") or "fixed_base",
                    "period": row["period"], "value": value, "decimals": decimals_of(raw)})
    return out


def panel_from_file(path: Path) -> dict[str, Any]:
    """The panel as the JSON body of POST /v1/index-series."""
    text = path.read_text(encoding="utf-8")
    if path.suffix.lower() == ".json":
        given = json.loads(text)
        if not isinstance(given, dict):
            raise CheckInputError(f"{path}: expected a JSON object with periods, items and prices")
        return given
    from .api.problems import RequestProblem

    try:
        rows = read_table(text, required=["period", "item", "price"], numeric=["price"],
                          optional_numeric=["quantity", "expenditure"])
    except RequestProblem as exc:
        raise CheckInputError(f"{path}: " + "; ".join(f"{e.pointer} {e.detail}" for e in exc.errors)) from exc
    periods: list[str] = []
    items: list[str] = []
    cells: dict[str, dict[str, dict[str, float | None]]] = {"prices": {}, "quantities": {},
                                                            "expenditures": {}}
    for row in rows:
        p, i = row["period"], row["item"]
        if p not in periods:
            periods.append(p)
        if i not in items:
            items.append(i)
        cells["prices"].setdefault(p, {})[i] = row["price"]
        for column, key in (("quantity", "quantities"), ("expenditure", "expenditures")):
            if row.get(column) is not None:
                cells[key].setdefault(p, {})[i] = row[column]
    body: dict[str, Any] = {"periods": periods, "items": items,
                            "prices": [cells["prices"].get(p, {}) for p in periods]}
    for key in ("quantities", "expenditures"):
        if cells[key]:
            body[key] = [cells[key].get(p) for p in periods]
    return body


def audit_request(published: list[dict[str, Any]], panel: dict[str, Any], *,
                  options: dict[str, Any], tolerance: float | None) -> dict[str, Any]:
    body = dict(panel)
    body.update({k: v for k, v in options.items() if v is not None})
    body["published"] = published
    if tolerance is not None:
        body["tolerance"] = tolerance
    return body


def run_locally(body: dict[str, Any]) -> dict[str, Any]:
    from .api.operations.audit import audit_json
    from .api.problems import RequestProblem
    from .config import Settings

    try:
        return audit_json(body, Settings())
    except RequestProblem as exc:
        raise CheckInputError("; ".join(f"{e.pointer}: {e.detail}" for e in exc.errors)) from None


def run_remotely(body: dict[str, Any], url: str, api_key: str | None) -> dict[str, Any]:
    from .client import Client, ProblemError

    headers = {"x-api-key": api_key} if api_key else None
    try:
        with Client(url, headers=headers) as client:
            return client.request("POST", "/v1/audits", json=body)
    except ProblemError as exc:
        details = "; ".join(f"{e.get('pointer')}: {e.get('detail')}" for e in exc.errors)
        raise CheckInputError(f"{exc} {details}".strip()) from None


def print_table(answer: dict[str, Any], out: TextIO) -> None:
    header = f"{'formula':<20} {'series':<10} {'period':<10} {'published':>14} {'recomputed':>14} " \
             f"{'difference':>12} {'tolerance':>10}  result"
    print(header, file=out)
    print("-" * len(header), file=out)
    for r in answer["rows"]:
        again = "n/a" if r["recomputed"] is None else f"{r['recomputed']:.6f}"
        gap = "n/a" if r["difference"] is None else f"{r['difference']:+.2e}"
        print(f"{r['formula']:<20} {r['series']:<10} {r['period']:<10} {r['published']:>14.6f} "
              f"{again:>14} {gap:>12} {r['tolerance']:>10.2e}  {'ok' if r['passed'] else 'DIFFERS'}",
              file=out)
    verdict = "all agree" if answer["passed"] else f"{answer['failed']} differ"
    print(f"\n{answer['checked']} published values checked: {verdict}.", file=out)


def write_junit(answer: dict[str, Any], path: Path) -> None:
    """JUnit XML: one test suite, one test case per published value."""
    suite = ET.Element("testsuite", name="dualcost check", tests=str(answer["checked"]),
                       failures=str(answer["failed"]), errors="0", skipped="0")
    for r in answer["rows"]:
        case = ET.SubElement(suite, "testcase", classname=f"dualcost.{r['series']}.{r['formula']}",
                             name=f"{r['formula']} {r['series']} {r['period']}")
        if not r["passed"]:
            failure = ET.SubElement(case, "failure", message=(
                f"published {r['published']} but recomputed {r['recomputed']} "
                f"(difference {r['difference']}, tolerance {r['tolerance']})"))
            failure.text = json.dumps(r)
    root = ET.Element("testsuites", tests=str(answer["checked"]), failures=str(answer["failed"]))
    root.append(suite)
    ET.ElementTree(root).write(path, encoding="utf-8", xml_declaration=True)


def check(args: Any, out: TextIO = sys.stdout, err: TextIO = sys.stderr) -> int:
    try:
        published = published_from_file(Path(args.published))
        panel = panel_from_file(Path(args.panel))
        options = {"base_period": args.base_period, "reference_period": args.reference_period,
                   "reference_value": args.reference_value,
                   "model": json.loads(args.model) if args.model else None}
        body = audit_request(published, panel, options=options, tolerance=args.tolerance)
        answer = run_remotely(body, args.url, args.api_key) if args.url else run_locally(body)
    except (OSError, ValueError, CheckInputError) as exc:
        print(f"dualcost check: {exc}", file=err)
        return 2
    print_table(answer, out)
    if args.junit:
        write_junit(answer, Path(args.junit))
    return 0 if answer["passed"] else 1
