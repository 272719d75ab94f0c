"""Spreadsheets for LibreOffice Calc, written by the tests: flat ODF documents (``.fods``) whose
cells fetch from the service, and the user profile Calc opens them with.

The profile sets, in Calc's own configuration (no system locale is needed):

- ``/org.openoffice.Setup/L10N/ooSetupSystemLocale``: the locale setting that decides the
  decimal mark and the thousands separator Calc reads and writes numbers with;
- ``/org.openoffice.Office.Calc/Formula/Load/ODFRecalcMode`` = 0: recalculate every formula
  on load (default 1, never: a sheet would show the values it was saved with);
- ``/org.openoffice.Office.Calc/Content/Update/Link`` = 0: update links on load (default 2,
  on request: headless, nobody answers, and WEBSERVICE stays unfetched);
- ``/org.openoffice.Office.Common/Security/Scripting/SecureURL``: the folder of the sheets as
  a trusted location, since Calc updates links on load only for documents there;
- ``/org.openoffice.Inet/Settings/ooInetProxyType`` = 0: no proxy, so loopback is reached
  directly whatever the environment's proxy variables say.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from xml.sax.saxutils import escape, quoteattr


@dataclass(frozen=True)
class Locale:
    """A locale as Calc names it, its Windows language id (what CSV import options name), and
    the decimal convention of its numbers."""

    tag: str
    language_id: int
    decimal: str  # "point" or "comma"

    @property
    def mark(self) -> str:
        return "," if self.decimal == "comma" else "."

    @property
    def csv_separator(self) -> int:
        """The field separator a CSV of this convention uses, as a character code."""
        return ord(";") if self.decimal == "comma" else ord(",")


LOCALES = {"en-US": Locale("en-US", 1033, "point"), "de-DE": Locale("de-DE", 1031, "comma"),
           "fr-FR": Locale("fr-FR", 1036, "comma")}


def csv_import_options(separator: int, locale: Locale) -> str:
    """Calc's CSV filter options: separator, '"' quotes, UTF-8, from line 1, no column
    formats, the locale's language, then (token 13) formulas evaluated."""
    return f"{separator},34,76,1,,{locale.language_id},false,false,false,false,false,0,true"


def write_profile(directory: Path, locale: Locale, trusted: Path) -> str:
    """A LibreOffice user profile with the settings above; its file URL."""
    settings = [
        ("/org.openoffice.Setup/L10N", "ooSetupSystemLocale", f"<value>{locale.tag}</value>"),
        ("/org.openoffice.Setup/L10N", "ooLocale", "<value>en-US</value>"),
        ("/org.openoffice.Office.Calc/Formula/Load", "ODFRecalcMode", "<value>0</value>"),
        ("/org.openoffice.Office.Calc/Formula/Load", "OOXMLRecalcMode", "<value>0</value>"),
        ("/org.openoffice.Office.Calc/Content/Update", "Link", "<value>0</value>"),
        ("/org.openoffice.Office.Common/Security/Scripting", "SecureURL",
         f"<value><it>{escape(trusted.resolve().as_uri())}</it></value>"),
        ("/org.openoffice.Inet/Settings", "ooInetProxyType", "<value>0</value>"),
    ]
    items = "".join(f'<item oor:path="{path}"><prop oor:name="{name}" oor:op="fuse">{value}'
                    "</prop></item>\n" for path, name, value in settings)
    user = directory / "user"
    user.mkdir(parents=True, exist_ok=True)
    (user / "registrymodifications.xcu").write_text(
        '<?xml version="1.0" encoding="UTF-8"?>\n<oor:items '
        'xmlns:oor="http://openoffice.org/2001/registry" '
        'xmlns:xs="http://www.w3.org/2001/XMLSchema" '
        'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">\n'
        f"{items}</oor:items>\n", encoding="utf-8")
    return directory.resolve().as_uri()


# -- flat ODF documents -----------------------------------------------------------------------

#: What every formula cell holds when the file is written: a cell still showing it after Calc
#: opened the file was not recalculated.
NOT_FETCHED = "not fetched"


@dataclass(frozen=True)
class Formula:
    """A formula in OpenFormula syntax (ODF 1.2), without the leading ``of:=``."""

    expression: str


@dataclass(frozen=True)
class LinkedTable:
    """A sheet whose contents come from a URL (Calc: Sheet ▸ Insert Sheet from File, Link)."""

    url: str
    filter_options: str


@dataclass
class Sheet:
    name: str
    rows: Sequence[Sequence[str | float | Formula]] = ()
    link: LinkedTable | None = None


def text(value: str) -> str:
    """A text literal in a formula."""
    return '"' + value.replace('"', '""') + '"'


def webservice(url: str) -> str:
    """WEBSERVICE as ODF files name it (the function came from another spreadsheet program)."""
    return f"COM.MICROSOFT.WEBSERVICE({text(url)})"


def _cell(value: str | float | Formula) -> str:
    if isinstance(value, Formula):
        return (f'<table:table-cell table:formula={quoteattr("of:=" + value.expression)} '
                f'office:value-type="string" office:string-value="{NOT_FETCHED}">'
                f"<text:p>{NOT_FETCHED}</text:p></table:table-cell>")
    if isinstance(value, str):
        return (f'<table:table-cell office:value-type="string"><text:p>{escape(value)}</text:p>'
                "</table:table-cell>")
    return (f'<table:table-cell office:value-type="float" office:value="{value!r}">'
            f"<text:p>{value!r}</text:p></table:table-cell>")


def _sheet(sheet: Sheet) -> str:
    source = ""
    rows = sheet.rows
    if sheet.link is not None:
        source = (f'<table:table-source xlink:type="simple" xlink:href={quoteattr(sheet.link.url)} '
                  'table:filter-name="Text - txt - csv (StarCalc)" '
                  f"table:filter-options={quoteattr(sheet.link.filter_options)} "
                  'table:mode="copy-results-only"/>')
        rows = [[NOT_FETCHED]]  # what the sheet holds until the link is updated
    body = "".join("<table:table-row>" + "".join(_cell(c) for c in row) + "</table:table-row>"
                   for row in rows)
    return f"<table:table table:name={quoteattr(sheet.name)}>{source}{body}</table:table>"


def fods(sheets: Sequence[Sheet]) -> str:
    """A flat ODF spreadsheet document with these sheets."""
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n<office:document '
        'xmlns:office="urn:oasis:names:tc:opendocument:xmlns:office:1.0" '
        'xmlns:table="urn:oasis:names:tc:opendocument:xmlns:table:1.0" '
        'xmlns:text="urn:oasis:names:tc:opendocument:xmlns:text:1.0" '
        'xmlns:xlink="http://www.w3.org/1999/xlink" '
        'xmlns:of="urn:oasis:names:tc:opendocument:xmlns:of:1.2" office:version="1.3" '
        'office:mimetype="application/vnd.oasis.opendocument.spreadsheet">'
        "<office:body><office:spreadsheet>"
        + "".join(_sheet(s) for s in sheets)
        + "</office:spreadsheet></office:body></office:document>\n")
