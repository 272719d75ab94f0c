"""POST /v1/tables: an uploaded table (CSV or Parquet) read as the service reads uploads, for a
page or a script that wants its cells."""

from __future__ import annotations

from pydantic import Field

from .common import NoticeOut, ProvenanceOut, StrictModel

Cell = float | int | bool | str | None


class TableResponse(StrictModel):
    """The table's columns and rows, numbers as numbers and text as text."""

    columns: list[str] = Field(description="The column names, in the file's order (a CSV's "
                                           "header row).")
    rows: list[list[Cell]] = Field(description="One list of cells per row, in the order of "
                                               "`columns`: numbers as JSON numbers, text as "
                                               "strings, booleans as booleans, an empty cell "
                                               "as null.")
    row_numbers: list[int] = Field(description="Where each row is in the file, as a problem "
                                               "names it: a CSV record (the header is 1; blank "
                                               "lines are left out), a Parquet row (from 1).")
    numeric: list[str] = Field(description="The columns read as numbers.")
    notices: list[NoticeOut] = Field(description="How a CSV was read (its separator and decimal "
                                                 "mark, when detected).")
    provenance: ProvenanceOut
