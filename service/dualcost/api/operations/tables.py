"""An uploaded table read as the service reads uploads (POST /v1/tables): the page loads a
file it cannot read itself (a Parquet file) into a view's grid this way, and any CSV it can.

CSV: :func:`dualcost.api.inputs.csv.read_cells` (the records by the CSV reader's rules, the
dialect declared or detected, a column numeric when every cell in it is a number). Parquet:
:func:`dualcost.api.inputs.parquet_tables.cells` (the file's own column types). Both are held
to ``max_panel_cells`` cells, the most a panel upload may have, besides the body's size limit
(``max_body_bytes``, 413).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from ...config import Settings
from ..inputs.csv import DeclaredDialect, dialect_notices, read_cells
from ..inputs.uploads import TableUpload


@dataclass
class Outcome:
    """The table: column names, rows of cells, each row's place in the file, the numeric
    columns and the notices."""

    columns: list[str]
    rows: list[list[Any]]
    row_numbers: list[int]
    numeric: list[str]
    notices: list[dict[str, Any]] = field(default_factory=list)


def run(upload: TableUpload, declared: DeclaredDialect, settings: Settings) -> Outcome:
    """The upload's table (one reading: nothing is computed)."""
    if upload.data is not None:
        from ..inputs.parquet_tables import cells  # pyarrow only for Parquet uploads

        names, rows = cells(upload.data, settings.max_panel_cells)
        numeric = [n for j, n in enumerate(names)
                   if rows and all(isinstance(r[j], (int, float)) and not isinstance(r[j], bool)
                                   for r in rows if r[j] is not None)
                   and any(r[j] is not None for r in rows)]
        return Outcome(names, rows, list(range(1, len(rows) + 1)), numeric)
    table, numbers = read_cells(upload.text or "", max_cells=settings.max_panel_cells,
                                declared=declared)
    rows = [list(row) for row in zip(*table.columns.values(), strict=True)]
    return Outcome(table.header, rows, table.records,
                   [n for n in table.header if n in numbers], dialect_notices(table.dialect))


def document(outcome: Outcome) -> dict[str, Any]:
    return {"columns": outcome.columns, "rows": outcome.rows,
            "row_numbers": outcome.row_numbers, "numeric": outcome.numeric,
            "notices": outcome.notices}
