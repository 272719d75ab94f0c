"""The spreadsheet forms in a real spreadsheet: LibreOffice Calc, headless, in a locale that writes
decimal points (en-US) and in two that write decimal commas (de-DE, fr-FR).

The service runs on a free loopback port. For each locale the test writes a Calc profile (the
locale, recalculation and link updates on load: see tests/e2e/calc.py) and opens, through
LibreOffice's Python-UNO bridge (tests/e2e/calc_driver.py, run by the Python that has it):

- the README's worked example sheet of the locale's convention
  (docs/spreadsheets/wrenmouth-sheet.csv, or -comma.csv), pointed at the test's service;
- a probe sheet written by the test: every measure of two Wrenmouth comparisons, with and
  without ``digits``, in both conventions, fetched with WEBSERVICE and read with VALUE and with
  NUMBERVALUE; and linked CSV tables of ``/v1/sheet/comparison`` in both conventions, imported
  with the locale's language, as a person in that locale would link them.

Every fetched number is compared with the JSON API's figure, to the digits asked. A cell that
reads an answer of the other convention must be an error or the right number, never another
number. That the cells really fetched: each formula cell is saved as the text "not fetched",
each linked sheet as that text alone, and the service's log must show LibreOffice asking for
every URL of the sheets; the figures are ones only the service computes. Calc's own files (the
sheets as written, recalculated, and as CSV) are kept in test-artifacts/spreadsheet-locales/.

Without soffice or the Python-UNO bridge the test is skipped, except under CI (CI set), where
it fails: CI installs Debian's libreoffice-calc-nogui and python3-uno (see README).
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import subprocess
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import unquote

import httpx
import pytest
import uvicorn

from dualcost.api.app import create_app
from dualcost.api.operations.compare import MEASURES
from dualcost.config import Settings
from tests.conftest import EXAMPLES, ROOT, free_port
from tests.e2e.calc import (
    LOCALES,
    NOT_FETCHED,
    Formula,
    LinkedTable,
    Locale,
    Sheet,
    csv_import_options,
    fods,
    text,
    webservice,
    write_profile,
)

ARTIFACTS = ROOT / "test-artifacts" / "spreadsheet-locales"
DRIVER = Path(__file__).with_name("calc_driver.py")
DOCS = ROOT / "docs" / "spreadsheets"


def _uno_python() -> str | None:
    """The Python that has LibreOffice's UNO bridge (Debian: the system python3 with
    python3-uno; LibreOffice's own builds bring one in their program folder)."""
    for candidate in ("/usr/bin/python3", "/usr/lib/libreoffice/program/python",
                      "/opt/libreoffice/program/python"):
        if Path(candidate).exists() and subprocess.run(
                [candidate, "-c", "import uno"], capture_output=True, env=_clean_env(),
                timeout=60).returncode == 0:
            return candidate
    return None


def _clean_env() -> dict[str, str]:
    """The environment without this interpreter's Python settings (another Python runs)."""
    return {k: v for k, v in os.environ.items()
            if k not in ("PYTHONPATH", "PYTHONHOME", "VIRTUAL_ENV")}


SOFFICE = shutil.which("soffice")
UNO_PYTHON = _uno_python() if SOFFICE else None
if not (SOFFICE and UNO_PYTHON):
    if os.environ.get("CI"):
        raise RuntimeError("CI must install Debian's libreoffice-calc-nogui and python3-uno "
                           "(see README)")
    pytest.skip("LibreOffice Calc (soffice) with the Python-UNO bridge is not installed",
                allow_module_level=True)


# -- the service, with a log of what was asked ------------------------------------------------


@dataclass
class Service:
    url: str
    asked: list[tuple[str, str, str]]  # (method, path?query unquoted, user agent)


@pytest.fixture(scope="module")
def service() -> Iterator[Service]:
    app = create_app(Settings(examples_dir=EXAMPLES))
    asked: list[tuple[str, str, str]] = []

    async def logged(scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] == "http":
            agent = dict(scope["headers"]).get(b"user-agent", b"").decode("latin-1")
            target = unquote(scope["path"] + "?" + scope["query_string"].decode("latin-1"))
            asked.append((scope["method"], target, agent))
        await app(scope, receive, send)

    config = uvicorn.Config(logged, host="127.0.0.1", port=free_port(), log_level="warning")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        assert time.monotonic() < deadline, "the service did not start"
        time.sleep(0.05)
    yield Service(f"http://127.0.0.1:{config.port}", asked)
    server.should_exit = True
    thread.join(timeout=10)


# -- what the sheets ask for ------------------------------------------------------------------

ITEMS = ["rye_loaf", "peat_briquettes", "ferry_pass"]
#: Two comparisons of the invented Wrenmouth basket: 2025 and 2026 prices, base quantities.
SCENARIOS: dict[str, dict[str, Any]] = {
    "ces": {"p0": [2.40, 9.0, 38.0], "p1": [2.52, 12.15, 41.0], "q0": [12.0, 6.0, 1.0],
            "model": {"family": "ces", "sigma": 0.6}, "reference_income": 100.0},
    "stone_geary": {"p0": [2.40, 9.0, 38.0], "p1": [2.52, 12.15, 41.0], "q0": [12.0, 6.0, 1.0],
                    "model": {"family": "stone_geary", "frisch": -2.0}, "reference_income": 90.5},
}
DIGITS = (None, 3, 6)


def query(scenario: str, decimal: str) -> str:
    """The comparison's query string as a sheet of that convention writes it."""
    s = SCENARIOS[scenario]

    def num(x: float) -> str:
        return repr(x).replace(".", ",") if decimal == "comma" else repr(x)

    join = ";" if decimal == "comma" else ","
    parts = [f"items={join.join(ITEMS)}"]
    parts += [f"{key}={join.join(num(x) for x in s[key])}" for key in ("p0", "p1", "q0")]
    parts += [f"{k}={v if isinstance(v, str) else num(v)}" for k, v in s["model"].items()]
    parts.append(f"reference_income={num(s['reference_income'])}")
    if decimal == "comma":
        parts.append("decimal=comma")
    return "&".join(parts)


@dataclass(frozen=True)
class Probe:
    scenario: str
    measure: str
    digits: int | None
    decimal: str

    def url(self, base: str) -> str:
        digits = "" if self.digits is None else f"&digits={self.digits}"
        return (f"{base}/v1/sheet/value?{query(self.scenario, self.decimal)}"
                f"&measure={self.measure}{digits}")


def probes(answers: dict[str, dict[str, Any]]) -> list[Probe]:
    """Every measure the JSON API gives for each scenario, with each ``digits``, in both
    conventions."""
    return [Probe(s, m, d, c) for s in SCENARIOS for m in MEASURES
            if figure(answers[s], m) is not None for d in DIGITS for c in ("point", "comma")]


LINKED = {f"linked-{decimal}{'' if d is None else f'-{d}'}": (decimal, d)
          for decimal in ("point", "comma") for d in (None, 3)}


def linked_url(base: str, decimal: str, digits: int | None) -> str:
    return (f"{base}/v1/sheet/comparison?{query('ces', decimal)}"
            + ("" if digits is None else f"&digits={digits}"))


def probe_document(base: str, locale: Locale, wanted: list[Probe]) -> str:
    """The probe sheet: one row per probe (VALUE, NUMBERVALUE and the bare text of one fetch),
    then one linked CSV table per convention and digits."""
    rows: list[list[str | float | Formula]] = [
        ["scenario", "measure", "digits", "decimal", "VALUE", "NUMBERVALUE", "WEBSERVICE"]]
    for p in wanted:
        fetch = webservice(p.url(base))
        mark = "," if p.decimal == "comma" else "."
        rows.append([p.scenario, p.measure, "" if p.digits is None else float(p.digits), p.decimal,
                     Formula(f"VALUE({fetch})"), Formula(f"NUMBERVALUE({fetch};{text(mark)})"),
                     Formula(fetch)])
    sheets = [Sheet("values", rows)]
    for name, (decimal, digits) in LINKED.items():
        separator = ord(";") if decimal == "comma" else ord(",")
        sheets.append(Sheet(name, link=LinkedTable(linked_url(base, decimal, digits),
                                                   csv_import_options(separator, locale))))
    return fods(sheets)


# -- running Calc -----------------------------------------------------------------------------


@dataclass
class CalcRun:
    locale: Locale
    cells: dict[str, dict[str, list[list[dict[str, Any]]]]]  # document -> sheet -> rows
    asked: list[tuple[str, str, str]]  # what the service was asked during the run
    answers: dict[str, dict[str, Any]]  # scenario -> the JSON API's answer
    probes: list[Probe]
    base: str


def docs_sheet(locale: Locale) -> Path:
    return DOCS / ("wrenmouth-sheet-comma.csv" if locale.decimal == "comma"
                   else "wrenmouth-sheet.csv")


@pytest.fixture(scope="module", params=list(LOCALES))
def calc(request: pytest.FixtureRequest, service: Service,
         tmp_path_factory: pytest.TempPathFactory) -> CalcRun:
    locale = LOCALES[request.param]
    work = ARTIFACTS / locale.tag
    shutil.rmtree(work, ignore_errors=True)
    (work / "out").mkdir(parents=True)
    answers = {s: _answer(service.url, s) for s in SCENARIOS}
    probe_list = probes(answers)
    (work / "probe.fods").write_text(probe_document(service.url, locale, probe_list),
                                     encoding="utf-8")
    example = work / docs_sheet(locale).name
    example.write_text(docs_sheet(locale).read_text(encoding="utf-8")
                       .replace("http://127.0.0.1:8000", service.url), encoding="utf-8")
    profile = write_profile(tmp_path_factory.mktemp(f"calc-profile-{locale.tag}"), locale, work)
    start = len(service.asked)
    assert UNO_PYTHON is not None
    done = subprocess.run(
        [UNO_PYTHON, str(DRIVER), profile, str(work / "out"), str(work / "probe.fods"),
         f"{example}::{csv_import_options(locale.csv_separator, locale)}"],
        capture_output=True, text=True, timeout=300, env=_clean_env())
    assert done.returncode == 0, done.stdout + done.stderr
    asked = service.asked[start:]
    (work / "requests.txt").write_text("".join(f"{m} {t}  [{a}]\n" for m, t, a in asked),
                                       encoding="utf-8")
    cells = {name: json.loads((work / "out" / f"{name}.cells.json").read_text("utf-8"))["sheets"]
             for name in ("probe", example.stem)}
    return CalcRun(locale, cells, asked, answers, probe_list, service.url)


def _answer(base: str, scenario: str) -> dict[str, Any]:
    """The JSON API's answer to the same comparison."""
    s = SCENARIOS[scenario]
    body = {"items": ITEMS, "base": {"prices": s["p0"], "quantities": s["q0"]},
            "current": {"prices": s["p1"]}, "model": s["model"],
            "reference_income": s["reference_income"]}
    r = httpx.post(f"{base}/v1/comparisons", json=body, timeout=30)
    assert r.status_code == 200, r.text
    return r.json()  # type: ignore[no-any-return]


def figure(answer: dict[str, Any], measure: str) -> float | None:
    """One measure from the JSON answer, by the name the spreadsheet forms give it (None: not
    computed for this comparison)."""
    if measure.startswith("konus_"):
        value = answer["konus"][measure.removeprefix("konus_")]
    elif measure == "laspeyres_bias_points":
        value = answer["laspeyres_gap_points"]
    elif measure in answer["compensation"]:
        value = answer["compensation"][measure]
    else:
        value = next((f["value"] for f in answer["formulas"] if f["formula"] == measure), None)
    return None if value is None else float(value)


def agrees(read: float, exact: float, digits: int | None) -> bool:
    """``read`` is ``exact`` as written to ``digits`` decimals (or in full)."""
    if digits is None:
        return math.isclose(read, exact, rel_tol=1e-15, abs_tol=1e-300)
    return abs(read - exact) <= 0.5 * 10.0 ** -digits * (1 + 1e-9) + 1e-15 * abs(exact)


# -- the checks -------------------------------------------------------------------------------


def _formula_cells(rows: list[list[dict[str, Any]]]) -> Iterator[dict[str, Any]]:
    return (c for row in rows for c in row if c["kind"] == "formula")


def test_calc_recalculated_and_fetched_every_cell(calc: CalcRun) -> None:
    """No formula cell still shows what the file was saved with, no linked sheet is left as
    written, and the service was asked, by LibreOffice, for every URL in the sheets."""
    for document in calc.cells.values():
        for name, rows in document.items():
            assert all(c["text"] != NOT_FETCHED for c in _formula_cells(rows)), name
            assert rows[0][0]["text"] != NOT_FETCHED, f"linked sheet {name} was not updated"
    wanted = {unquote(p.url(calc.base)) for p in calc.probes}
    wanted |= {unquote(linked_url(calc.base, *spec)) for spec in LINKED.values()}
    fetched = {target for method, target, agent in calc.asked
               if method == "GET" and "LibreOffice" in agent}
    missing = {w.removeprefix(calc.base) for w in wanted} - fetched
    assert not missing, sorted(missing)[:5]


def test_values_read_right_in_their_convention_and_never_wrong_in_the_other(calc: CalcRun) -> None:
    """VALUE of an answer in the locale's own convention, and NUMBERVALUE with the answer's
    decimal mark in any locale, give the JSON API's figure to the digits asked. VALUE of an
    answer in the other convention gives an error or that figure, never another number."""
    rows = calc.cells["probe"]["values"][1:]
    assert len(rows) == len(calc.probes) > 100
    other_errors = 0
    for probe, row in zip(calc.probes, rows, strict=True):
        exact = figure(calc.answers[probe.scenario], probe.measure)
        assert exact is not None
        value, numbervalue, fetched = row[4], row[5], row[6]
        assert fetched["result"] == "text" and not fetched["text"].startswith("ERROR"), fetched
        assert numbervalue["result"] == "number", (probe, numbervalue)
        assert agrees(numbervalue["value"], exact, probe.digits), (probe, numbervalue, exact)
        if probe.decimal == calc.locale.decimal:
            assert value["result"] == "number", (probe, value)
            assert agrees(value["value"], exact, probe.digits), (probe, value, exact)
        elif value["result"] == "error":
            other_errors += 1
        else:
            assert agrees(value["value"], exact, probe.digits), ("misread", probe, value, exact)
    # The other convention's text is mostly no number at all in this locale: the point of the
    # option (an error shows; a wrong figure would not).
    assert other_errors > len(calc.probes) // 4


def test_the_locale_setting_took_effect(calc: CalcRun) -> None:
    """Calc shows numbers with the locale's decimal mark: the profile's locale, not the
    machine's, decided how the sheets were read."""
    row = calc.cells["probe"]["values"][1]
    shown = row[5]["text"]  # a NUMBERVALUE cell, as Calc displays it
    other = "." if calc.locale.mark == "," else ","
    assert calc.locale.mark in shown and other not in shown, shown


def _table_checks(calc: CalcRun, name: str) -> tuple[int, int]:
    """(numbers that agree, cells that are not numbers) in one linked table; fails on a
    number that disagrees with the JSON API."""
    decimal, digits = LINKED[name]
    rows = calc.cells["probe"][name]
    assert [c["text"] for c in rows[0]] == ["measure", "value", "compared_with", "bias_points",
                                            "bias_percent"]
    answer = calc.answers["ces"]
    formulas = {f["formula"]: f for f in answer["formulas"]}
    good = not_numbers = 0
    for row in rows[1:]:
        measure = row[0]["text"]
        expected = [figure(answer, measure), None,
                    formulas.get(measure, {}).get("bias_points"),
                    formulas.get(measure, {}).get("bias_percent")]
        for cell, exact in zip(row[1:], expected, strict=True):
            if exact is None:
                continue
            if cell["kind"] == "number":
                assert agrees(cell["value"], exact, digits), (name, measure, cell, exact)
                good += 1
            else:
                not_numbers += 1
    return good, not_numbers


def test_linked_csv_tables_import_numbers_in_their_convention(calc: CalcRun) -> None:
    """A linked CSV table of the locale's convention imports every figure as the right number;
    one of the other convention imports text or right numbers, never a wrong number (before,
    '0.498' came in as 498 where '.' groups thousands)."""
    for name, (decimal, _digits) in LINKED.items():
        good, not_numbers = _table_checks(calc, name)
        if decimal == calc.locale.decimal:
            assert not_numbers == 0 and good > 30, (name, good, not_numbers)


def test_the_readme_example_sheet_reads_the_right_numbers(calc: CalcRun) -> None:
    """The worked example of the locale's convention (docs/spreadsheets), opened as its CSV
    with the locale's import options: every fetched cell holds the JSON API's figure."""
    rows = calc.cells[docs_sheet(calc.locale).stem][docs_sheet(calc.locale).stem]
    answer = _docs_answer(calc.base)
    checked = 0
    for row in rows[5:]:
        cell = row[6]
        match = re.search(r"measure=(\w+)(?:&digits=(\d+))?", cell["formula"])
        if cell["formula"].startswith("=WEBSERVICE"):
            query_text = rows[4][6]["text"]
            expected = httpx.get(f"{calc.base}/v1/sheet/value?{query_text}").text
            assert cell["text"] == expected and not expected.startswith("ERROR"), cell
            continue
        assert match is not None and cell["result"] == "number", cell
        digits = None if match.group(2) is None else int(match.group(2))
        assert agrees(cell["value"], figure(answer, match.group(1)), digits), cell
        checked += 1
    assert checked >= 5


def _docs_answer(base: str) -> dict[str, Any]:
    """The JSON API's answer for the example sheet's basket (CES, sigma 0.6)."""
    body = {"items": ITEMS, "base": {"prices": [2.40, 9.0, 38.0], "quantities": [12, 6, 1]},
            "current": {"prices": [2.52, 12.15, 41.0]}, "model": {"family": "ces", "sigma": 0.6}}
    r = httpx.post(f"{base}/v1/comparisons", json=body, timeout=30)
    assert r.status_code == 200, r.text
    return r.json()  # type: ignore[no-any-return]
