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

Both CSV files are read in the dialect ``--separator`` and ``--decimal`` declare, as the
service's uploads are (``comma``, ``semicolon`` or ``tab``; ``point`` or ``comma``); what is
not declared is detected from the file, and the check says on standard error what it detected
(a spreadsheet saved in a decimal-comma locale writes ``101,3`` in cells separated by ``;``).

The check runs in process, or against a running service with ``--url`` (``POST /v1/audits``).
It prints a table and the provenance of the recomputation (the version of dualcost that made it
and the digest of the audit request it made it from, as the answer states them), writes JUnit
XML with ``--junit`` (one test case per published value; the provenance as the suite's
properties) and exits

- 0 when every published value agrees with its recomputation,
- 1 when one differs,
- 2 when the check cannot run: an input cannot be read or breaks a rule, the service named by
  ``--url`` cannot be reached, refuses the request (an API key missing, say) or answers
  something that is not an audit. The reason is one line on standard error.

When values differ, :func:`diagnose` looks for the commonest cause, options that do not match
the ones the values were published with, and prints a hint (see its docstring).
"""

from __future__ import annotations

import json
import math
import sys
import xml.etree.ElementTree as ET
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

from .api.inputs.csv import MARKS, DeclaredDialect, Table, decimal_of, read_table
from .core.audit import decimals_of
from .core.errors import DualcostError

Answer = dict[str, Any]
Runner = Callable[[dict[str, Any]], Answer]

EXIT_AGREE, EXIT_DIFFERS, EXIT_CANNOT_CHECK = 0, 1, 2


class CheckError(DualcostError):
    """The check cannot run: an input cannot be read, or the service cannot be reached or
    refuses the request. The message says which and why, in one line."""


# -- reading the inputs -----------------------------------------------------------------------


def _table(path: Path, text: str, declared: DeclaredDialect, notices: list[str] | None,
           **columns: Any) -> Table:
    from .api.problems import RequestProblem

    try:
        table = read_table(text, declared=declared, **columns)
    except RequestProblem as exc:
        raise CheckError(f"{path}: " + "; ".join(f"{e.pointer} {e.detail}"
                                                 for e in exc.errors)) from None
    if notices is not None:
        notices += _detected(path, table)
    return table


def _detected(path: Path, table: Table) -> list[str]:
    """What was detected that is not the plain CSV default (fields separated by commas, a
    decimal point): said, so a file is never read in a dialect nobody chose unawares."""
    d = table.dialect
    return [f"{path}: read with {what} {value} ({d.detected[what]})"
            for what, value, default in (("separator", d.separator, "comma"),
                                         ("decimal", d.decimal, "point"))
            if what in d.detected and value != default]


def _value_mark(path: Path, table: Table, declared: DeclaredDialect) -> str:
    """The decimal mark of the published values, read as text so that their decimals as
    written set the tolerance: declared, or detected from the ``value`` cells as the service
    detects it from numeric cells."""
    from .api.problems import RequestProblem

    cells = [[v] for v in table.columns["value"]]
    try:
        decimal, _ = decimal_of(table.dialect.separator, declared, cells, [0])
    except RequestProblem as exc:
        raise CheckError(f"{path}: " + "; ".join(e.detail for e in exc.errors)) from None
    return MARKS[decimal]


def published_from_file(path: Path, declared: DeclaredDialect | None = None,
                        notices: list[str] | None = None) -> list[dict[str, Any]]:
    declared = declared or DeclaredDialect()
    text = path.read_text(encoding="utf-8")
    if path.suffix.lower() == ".json":
        data = json.loads(text)
        values = data.get("published") if isinstance(data, dict) else data
        if not isinstance(values, list):
            raise CheckError(f"{path}: expected a list of published values, or an object with "
                             "that list under \"published\"")
        return values
    table = _table(path, text, declared, None, required=["formula", "period", "value"],
                   numeric=[])
    mark = _value_mark(path, table, declared)
    if notices is not None:
        notices += _detected(path, table)
        if declared.decimal is None and mark != ".":
            notices.append(f"{path}: read with decimal comma (the values have decimal commas)")
    out = []
    for k, row in zip(table.records, table.rows(), strict=True):
        raw = row["value"] if mark == "." else row["value"].replace(mark, ".")
        try:
            value = float(raw)
        except ValueError:
            raise CheckError(f"{path}#cell={k},{table.header.index('value') + 1}: "
                             f"{row['value']!r} is not a number") from None
        if not math.isfinite(value):
            raise CheckError(f"{path}#row={k}: the value must be a finite number")
        out.append({"formula": row["formula"], "series": row.get("series") or "fixed_base",
                    "period": row["period"], "value": value, "decimals": decimals_of(raw)})
    return out


def panel_from_file(path: Path, declared: DeclaredDialect | None = None,
                    notices: list[str] | None = None) -> dict[str, Any]:
    """The panel as the JSON body of POST /v1/index-series."""
    text = path.read_text(encoding="utf-8")
    if path.suffix.lower() == ".json":
        given = json.loads(text)
        if not isinstance(given, dict):
            raise CheckError(f"{path}: expected a JSON object with periods, items and prices")
        return given
    rows = _table(path, text, declared or DeclaredDialect(), notices,
                  required=["period", "item", "price"], numeric=["price"],
                  optional_numeric=["quantity", "expenditure"]).rows()
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


def request_from_args(args: Any, notices: list[str] | None = None) -> dict[str, Any]:
    """The body of POST /v1/audits from the command's arguments; unreadable files, bad JSON
    and text that is not UTF-8 raise :class:`CheckError`. What was detected rather than
    declared (the CSV files' separator and decimal mark) is added to ``notices``."""
    try:
        declared = DeclaredDialect(getattr(args, "separator", None),
                                   getattr(args, "decimal", None))
        published = published_from_file(Path(args.published), declared, notices)
        panel = panel_from_file(Path(args.panel), declared, notices)
        options = {"base_period": args.base_period, "reference_period": args.reference_period,
                   "reference_value": args.reference_value,
                   "model": json.loads(args.model) if args.model else None}
    except (OSError, ValueError) as exc:  # ValueError: JSON and UTF-8 decoding errors too
        raise CheckError(str(exc)) from None
    return audit_request(published, panel, options=options, tolerance=args.tolerance)


# -- running the audit ------------------------------------------------------------------------


def run_locally(body: dict[str, Any]) -> Answer:
    from .api.operations.audit import audit_json
    from .api.problems import RequestProblem
    from .config import Settings

    try:
        return audit_json(body, Settings())
    except RequestProblem as exc:
        raise CheckError("; ".join(f"{e.pointer}: {e.detail}" for e in exc.errors)) from None
    except DualcostError as exc:
        raise CheckError(str(exc)) from None


def run_remotely(body: dict[str, Any], url: str, api_key: str | None) -> Answer:
    """POST /v1/audits on the service at ``url``; every way of not getting an audit back
    raises :class:`CheckError`."""
    from .client import Client, ClientError, ProblemError

    try:
        with Client(url, api_key=api_key) as client:
            answer = client.audit(body)
    except ProblemError as exc:
        details = "; ".join(f"{e.get('pointer')}: {e.get('detail')}" for e in exc.errors)
        raise CheckError(f"the service at {url} refused the request: {exc} {details}".strip()
                         ) from None
    except (ClientError, ValueError) as exc:  # ValueError: --url is not an http(s) address
        raise CheckError(str(exc)) from None
    if not (isinstance(answer, dict) and isinstance(answer.get("rows"), list)
            and "passed" in answer):
        raise CheckError(f"the service at {url} did not answer with an audit (is it a dualcost "
                         "service?)")
    return answer


def runner(args: Any) -> Runner:
    if args.url:
        return lambda body: run_remotely(body, args.url, args.api_key)
    return run_locally


# -- the hint ---------------------------------------------------------------------------------

#: The values an index series takes in its reference period (common practice: 100, or 1).
REFERENCE_VALUES = (1.0, 100.0)
FLAGS = {"base_period": "--base-period", "reference_period": "--reference-period",
         "reference_value": "--reference-value"}


@dataclass(frozen=True)
class Hint:
    """Why values probably differ (``text``) and the options that would mend it, if known."""

    text: str
    options: dict[str, Any] = field(default_factory=dict)

    def flags(self) -> str:
        return " ".join(f"{FLAGS[k]} {v}" for k, v in self.options.items())


def _near(value: float | None, target: float, tolerance: float) -> bool:
    return value is not None and abs(value - target) <= tolerance


def _reference_value_of(rows: Sequence[Mapping[str, Any]], key: str) -> float | None:
    """The reference value (1 or 100) that every row's ``key`` equals, within the row's
    tolerance (published) or to rounding error (recomputed), if there is one."""
    for target in REFERENCE_VALUES:
        if all(_near(r[key], target, r["tolerance"] if key == "published" else 1e-9 * target)
               for r in rows):
            return target
    return None


def _reference_period_used(body: Mapping[str, Any]) -> tuple[str, str]:
    """The period the recomputed series equal their reference value in, and how it was chosen."""
    if body.get("reference_period") is not None:
        return str(body["reference_period"]), "the reference period given"
    if body.get("base_period") is not None:
        return str(body["base_period"]), "the base period given"
    periods = body.get("periods") or [""]
    return str(periods[0]), "the panel's first period, as base period"


def _by_period(rows: Sequence[Mapping[str, Any]]) -> dict[str, list[Mapping[str, Any]]]:
    grouped: dict[str, list[Mapping[str, Any]]] = {}
    for r in rows:
        grouped.setdefault(str(r["period"]), []).append(r)
    return grouped


def diagnose(answer: Mapping[str, Any], body: Mapping[str, Any]) -> Hint | None:
    """Why the published values probably differ, when the answer shows it.

    An index series equals its reference value (100, or 1) in its reference period, which is
    its base period unless another is named (common practice). So when every published value
    of a period P equals 100 (or 1) within its tolerance while a recomputed one there does not:

    - if P is not the period the recomputation was referenced to (the base period given, or the
      panel's first period), the values were probably computed on base period P: the panel
      starts before their base period, or the base period given is another one. The hint names
      P and ``--base-period P`` (with ``--reference-period P`` when one was given);
    - if P is that period and the recomputed values there equal the other reference value, the
      hint names ``--reference-value``.

    Failing that, when every value differs and no base period was given, the hint says that the
    recomputation took the panel's first period as its base and names ``--base-period``.
    """
    rows = answer["rows"]
    used, why = _reference_period_used(body)
    for period, here in _by_period(rows).items():
        published = _reference_value_of(here, "published")
        failing = [r for r in here if not r["passed"]]
        if published is None or not failing:
            continue
        if period != used:
            options: dict[str, Any] = {"base_period": period}
            if body.get("reference_period") is not None:
                options["reference_period"] = period
            return Hint(f"the published values equal {published:g} in {period}, where the "
                        f"recomputed ones do not: they were probably computed on base period "
                        f"{period}, while the recomputation took {used} ({why}).", options)
        recomputed = _reference_value_of(failing, "recomputed")
        if recomputed is not None and recomputed != published:
            return Hint(f"the published values equal {published:g} in {period}, where the "
                        f"recomputed ones equal {recomputed:g}.",
                        {"reference_value": int(published)})
    if rows and not any(r["passed"] for r in rows) and _no_base_given(body):
        return Hint(f"every published value differs. The recomputation took the panel's first "
                    f"period, {used}, as its base period: if the published values were computed "
                    f"on another base period, name it with --base-period.")
    return None


def _no_base_given(body: Mapping[str, Any]) -> bool:
    return body.get("base_period") is None and body.get("reference_period") is None


def hint_text(hint: Hint, body: dict[str, Any], run: Runner) -> str:
    """The hint, with the options it suggests tried once: whether all values then agree."""
    if not hint.options:
        return hint.text
    try:
        again = run(body | hint.options)
    except CheckError as exc:
        outcome = f"trying it failed: {exc}"
    else:
        outcome = (f"with it, all {again['checked']} values agree" if again["passed"] else
                   f"with it, {again['failed']} of {again['checked']} values still differ")
    return f"{hint.text} Run again with {hint.flags()} ({outcome})."


# -- reporting --------------------------------------------------------------------------------


def print_table(answer: Answer, out: TextIO) -> None:
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
    print(provenance_line(answer), file=out)
    warning = model_warning(answer)
    if warning:
        print(warning, file=out)


def model_warning(answer: Answer) -> str | None:
    """A line saying the model is outside its regular region, and where, or None."""
    validity = answer.get("model_validity")
    if not validity or validity.get("state") == "regular":
        return None
    periods = validity.get("periods_outside_regular_region", [])
    shown = ", ".join(p["period"] for p in periods[:10]) + (" ..." if len(periods) > 10 else "")
    reasons = sorted({r["code"] for p in periods for r in p["reasons"]})
    return (f"warning: the {validity['family']} model is outside its regular region in "
            f"{len(periods)} period(s) ({shown}; {', '.join(reasons)}): its demands there are "
            "not reliable weights, and neither is any value recomputed with them.")


def provenance_of(answer: Answer) -> dict[str, str] | None:
    """The answer's ``provenance`` (version and input digest), if it states one."""
    given = answer.get("provenance")
    if isinstance(given, dict) and "version" in given and "input_digest" in given:
        return {"version": str(given["version"]), "input_digest": str(given["input_digest"])}
    return None


def provenance_line(answer: Answer) -> str:
    """Which version recomputed the values, from which input (the audit request's digest)."""
    given = provenance_of(answer)
    if given is None:
        return "Recomputed by a dualcost service that does not state its version or input digest."
    return (f"Recomputed by dualcost {given['version']} from input {given['input_digest']} "
            f"(the audit request in RFC 8785 canonical form).")


def write_junit(answer: Answer, path: Path, hint: str | None = None) -> None:
    """JUnit XML: one test suite, one test case per published value; the hint, if any, as the
    suite's standard output."""
    suite = ET.Element("testsuite", name="dualcost check", tests=str(answer["checked"]),
                       failures=str(answer["failed"]), errors="0", skipped="0")
    given = provenance_of(answer)
    if given is not None:
        properties = ET.SubElement(suite, "properties")
        for name in ("version", "input_digest"):
            ET.SubElement(properties, "property", name=f"dualcost.{name}", value=given[name])
    for r in answer["rows"]:
        case = ET.SubElement(suite, "testcase", classname=f"dualcost.{r['series']}.{r['formula']}",
                             name=f"{r['formula']} {r['series']} {r['period']}")
        if not r["passed"]:
            failure = ET.SubElement(case, "failure", message=(
                f"published {r['published']} but recomputed {r['recomputed']} "
                f"(difference {r['difference']}, tolerance {r['tolerance']})"))
            failure.text = json.dumps(r)
    lines = [f"hint: {hint}"] if hint else []
    warning = model_warning(answer)
    if warning:
        lines.append(warning)
    if lines:
        ET.SubElement(suite, "system-out").text = "\n".join(lines)
    root = ET.Element("testsuites", tests=str(answer["checked"]), failures=str(answer["failed"]))
    root.append(suite)
    ET.ElementTree(root).write(path, encoding="utf-8", xml_declaration=True)


def check(args: Any, out: TextIO | None = None, err: TextIO | None = None) -> int:
    """The command: read, audit, explain, report; the exit code as the module says. Output goes
    to ``out`` and ``err``, by default the standard streams of the moment of the call."""
    out = sys.stdout if out is None else out
    err = sys.stderr if err is None else err
    run = runner(args)
    notices: list[str] = []
    try:
        body = request_from_args(args, notices)
        for notice in notices:
            print(f"dualcost check: {notice}", file=err)
        answer = run(body)
        found = None if answer["passed"] else diagnose(answer, body)
        hint = None if found is None else hint_text(found, body, run)
    except CheckError as exc:
        print(f"dualcost check: {exc}", file=err)
        return EXIT_CANNOT_CHECK
    print_table(answer, out)
    if hint:
        print(f"hint: {hint}", file=out)
    if args.junit:
        try:
            write_junit(answer, Path(args.junit), hint)
        except OSError as exc:
            print(f"dualcost check: cannot write the JUnit report: {exc}", file=err)
            return EXIT_CANNOT_CHECK
    return EXIT_AGREE if answer["passed"] else EXIT_DIFFERS
