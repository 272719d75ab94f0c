"""POST /v1/tables: an uploaded table, CSV or Parquet, read as the service reads uploads and
answered as JSON cells (or as a CSV table or a Parquet file)."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Request
from fastapi.responses import Response

from ..deps import settings_of
from ..inputs.csv import DecimalParam, DeclaredDialect, SeparatorParam
from ..inputs.uploads import TABLE_REQUEST_BODY, TableUpload, table_upload
from ..operations import tables
from ..provenance import UploadSha256, of_upload, query_of
from ..render import (
    PARQUET_ANSWER,
    Format,
    ProvenanceQuery,
    csv_response,
    format_query,
    json_response,
    negotiate,
    parquet_response,
)
from ..routing import JsonRoute
from ..schemas.tables import TableResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["uploads"])

OFFERS: tuple[Format, ...] = ("json", "csv", "parquet")
FormatParam = Annotated[Literal["json", "csv", "parquet"] | None, format_query(OFFERS)]
RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The table as JSON cells; as a CSV table or a Parquet file when asked "
                         "(Accept or format).", **PARQUET_ANSWER},
}

DESCRIPTION = """\
Reads an uploaded table the way the service reads its uploads and answers its cells, so that a
page or a script can load any file the service can read (the built-in page sends the files it
cannot read as text, Parquet files, here, and fills its grids from the answer).

- **CSV** (`text/csv`): records by RFC 4180, fields separated by `,`, `;` or a tab and numbers
  with `.` or `,` as decimal mark, declared by `separator` and `decimal` or detected (stated in
  `notices`). A column is numeric when every cell in it that is not empty is a number (no
  grouping of thousands) and none is a whole number written with a leading zero (an id such as
  `007` stays text); its empty cells are null. Blank lines are left out; `row_numbers` gives
  each row's record (the header is record 1).
- **Parquet** (`application/vnd.apache.parquet`): every column by its type: integers and floats
  as numbers (decimals as floats), booleans as booleans, text, dates and anything else with a
  text form as text, null as null. A float that is NaN or infinite is refused at its cell; a
  column without a text form (binary, lists, structures) is refused by name.

Problems name the place as the uploads do: `#cell=row,column` or `#row=n` in a CSV,
`#row=n&column=name` or `#column=name` in a Parquet file, the byte where a file that cannot be
read breaks. At most `max_panel_cells` cells (rows times columns), besides the body's size limit.
Nothing is computed and nothing is changed: the cells are the file's.
"""


@router.post("/tables", operation_id="readTable", response_model=TableResponse,
             responses=RESPONSES, openapi_extra=TABLE_REQUEST_BODY,
             summary="Read an uploaded table (CSV or Parquet) into its columns and rows",
             description=DESCRIPTION)
def read_table(
    upload: Annotated[TableUpload, Depends(table_upload)],
    csv_sha256: UploadSha256,
    request: Request,
    separator: SeparatorParam = None,
    decimal: DecimalParam = None,
    format: FormatParam = None,
    provenance: ProvenanceQuery = "headers",
) -> Response:
    names = set(locals())
    fmt = negotiate(request, OFFERS, format)
    declared = upload.dialect(DeclaredDialect(separator, decimal))
    outcome = tables.run(upload, declared, settings_of(request))
    origin = of_upload(csv_sha256, query_of(request.query_params.multi_items(), names))
    if fmt == "csv":
        return csv_response(outcome.columns, outcome.rows, provenance=origin,
                            trailer=provenance == "trailer", filename="table.csv")
    if fmt == "parquet":
        return parquet_response(outcome.columns, outcome.rows, provenance=origin,
                                filename="table.parquet")
    return json_response(tables.document(outcome), provenance=origin)
