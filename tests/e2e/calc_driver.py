"""Open spreadsheets in LibreOffice Calc, headless, and report every cell after it recalculated.

Run by a Python that has LibreOffice's Python-UNO bridge (Debian: /usr/bin/python3 with the
python3-uno package), not by the test's own interpreter:

    python3 calc_driver.py PROFILE_URL OUT_DIR DOCUMENT [DOCUMENT ...]

PROFILE_URL is the user profile LibreOffice runs with (``file:///...``; the test writes its
settings: locale, recalculation and link updates on load). A DOCUMENT is a path, or
``path::filter options`` for a CSV file opened with those import options. For each document
the driver writes, into OUT_DIR, ``<name>.cells.json`` (every cell of every sheet: formula, the
text Calc shows, the number, the error code, what kind of result), the recalculated document
as ``<name>.fods`` and each sheet as ``<name>-<sheet>.csv``.

The document is loaded with ``UpdateDocMode=ACCORDING_TO_CONFIG``, as a person opening it
would: whether WEBSERVICE and linked sheets fetch on load is decided by the profile's settings,
nothing here forces it. (``soffice --convert-to`` cannot be used for this: it loads documents
without updating any links, so every WEBSERVICE cell keeps its saved value.)
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
import uuid
from pathlib import Path
from typing import Any

import uno  # type: ignore[import-not-found]
from com.sun.star.beans import PropertyValue  # type: ignore[import-not-found]

ACCORDING_TO_CONFIG = 2  # com.sun.star.document.UpdateDocMode
CSV_FILTER = "Text - txt - csv (StarCalc)"
#: com.sun.star.table.CellContentType, and com.sun.star.sheet.FormulaResult bits.
EMPTY, VALUE, TEXT, FORMULA = 0, 1, 2, 3
RESULT_VALUE, RESULT_STRING, RESULT_ERROR = 1, 2, 4


def prop(name: str, value: Any) -> Any:
    p = PropertyValue()
    p.Name, p.Value = name, value
    return p


def connect(profile: str) -> tuple[subprocess.Popen[bytes], Any]:
    """A headless LibreOffice on a pipe of its own, and its desktop."""
    pipe = f"dualcost-{uuid.uuid4().hex}"
    office = subprocess.Popen(
        ["soffice", f"-env:UserInstallation={profile}", "--headless", "--invisible",
         "--norestore", "--nologo", "--nodefault", "--nolockcheck",
         f"--accept=pipe,name={pipe};urp;"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    local = uno.getComponentContext()
    resolver = local.ServiceManager.createInstanceWithContext(
        "com.sun.star.bridge.UnoUrlResolver", local)
    deadline = time.monotonic() + 90
    while True:
        try:
            context = resolver.resolve(f"uno:pipe,name={pipe};urp;StarOffice.ComponentContext")
            break
        except Exception as exc:
            if office.poll() is not None or time.monotonic() > deadline:
                office.kill()
                raise SystemExit("LibreOffice did not start (or did not accept a connection)"
                                 ) from exc
            time.sleep(0.2)
    desktop = context.ServiceManager.createInstanceWithContext("com.sun.star.frame.Desktop",
                                                               context)
    return office, desktop


def cell_record(cell: Any) -> dict[str, Any]:
    kind = cell.Type.value if hasattr(cell.Type, "value") else str(cell.Type)
    kind = {"EMPTY": "empty", "VALUE": "number", "TEXT": "text", "FORMULA": "formula"}[kind]
    record = {"formula": cell.Formula if kind == "formula" else "", "text": cell.String,
              "value": cell.Value, "error": cell.getError(), "kind": kind}
    if kind == "formula":
        result = cell.FormulaResultType2
        record["result"] = ("error" if record["error"] or result == RESULT_ERROR
                            else "number" if result == RESULT_VALUE else "text")
    return record


def cells(document: Any) -> dict[str, list[list[dict[str, Any]]]]:
    out = {}
    for sheet in document.Sheets:
        cursor = sheet.createCursor()
        cursor.gotoEndOfUsedArea(False)
        end = cursor.getRangeAddress()
        out[sheet.Name] = [[cell_record(sheet.getCellByPosition(c, r))
                            for c in range(end.EndColumn + 1)] for r in range(end.EndRow + 1)]
    return out


def report(desktop: Any, spec: str, out_dir: Path) -> None:
    path, _, options = spec.partition("::")
    source = Path(path).resolve()
    arguments = [prop("Hidden", True), prop("UpdateDocMode", ACCORDING_TO_CONFIG)]
    if options:
        arguments += [prop("FilterName", CSV_FILTER), prop("FilterOptions", options)]
    document = desktop.loadComponentFromURL(uno.systemPathToFileUrl(str(source)), "_blank", 0,
                                            tuple(arguments))
    if document is None:
        raise SystemExit(f"LibreOffice could not open {source}")
    try:
        name = source.stem
        (out_dir / f"{name}.cells.json").write_text(
            json.dumps({"sheets": cells(document)}, indent=1, ensure_ascii=False),
            encoding="utf-8")
        target = out_dir / f"{name}.fods"
        document.storeToURL(uno.systemPathToFileUrl(str(target)),
                            (prop("FilterName", "OpenDocument Spreadsheet Flat XML"),))
        # -1: every sheet to a file of its own, <name>-<sheet>.csv; values as shown.
        document.storeToURL(uno.systemPathToFileUrl(str(out_dir / f"{name}.csv")),
                            (prop("FilterName", CSV_FILTER),
                             prop("FilterOptions", "44,34,76,1,,0,false,true,false,false,false,-1")))
    finally:
        document.close(True)


def main(argv: list[str]) -> int:
    profile, out_dir, documents = argv[0], Path(argv[1]), argv[2:]
    out_dir.mkdir(parents=True, exist_ok=True)
    office, desktop = connect(profile)
    try:
        for spec in documents:
            report(desktop, spec, out_dir)
    finally:
        try:
            desktop.terminate()
        except Exception:
            pass  # the bridge closes as the office exits
        try:
            office.wait(timeout=30)
        except subprocess.TimeoutExpired:
            office.kill()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
