"""POST /v1/uprating: uprating clauses run under each formula index and the Konüs index of a
series, answered as JSON or as a CSV table (one row per clause, uprating and index)."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Request
from fastapi.responses import Response

from .. import workload
from ..deps import settings_of
from ..inputs.panels import panel_from_json
from ..operations import series, tree_uprating, uprating
from ..operations.answers import scale_headers
from ..provenance import CAUTION_HEADER, header_text, of_body
from ..render import (
    CSV_ANSWER,
    Format,
    ProvenanceQuery,
    csv_response,
    format_query,
    json_response,
    negotiate,
)
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.common import CAUTION
from ..schemas.tree_uprating import TreeUpratingRequest, TreeUpratingResponse
from ..schemas.uprating import UpratingRequest, UpratingResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["uprating"])

RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The upratings as JSON, or as a CSV table with one row per clause, "
                         "uprating and index when asked (Accept: text/csv, or format=csv).",
          **CSV_ANSWER},
}
OFFERS: tuple[Format, ...] = ("json", "csv")
FormatParam = Annotated[Literal["json", "csv"] | None, format_query(OFFERS)]

DESCRIPTION = """\
**Caution: these are model-based figures. For wage, pension or benefit indexation, defer to
official statistics and to the applicable law or agreement.**

The request is an index-series request (`POST /v1/index-series`: a panel, the options, a
`model` for the Konüs index) with one or more uprating `clauses`, each described by data:
the `measure` (`twelve_month`: the 12-month change read in month or quarter `period_of_year`;
`annual_average`: a calendar year's average over the previous year's; `cumulative`: the change
since a period `since`, then since each uprating), the `rounding` of the percentage change
(`decimals` and `method`: `half_up`, `half_even`, `down`, `up`), a `floor` and a `cap` in percent
applied after rounding, and the `lag` in periods from the measure period to the first payment.

For each clause the answer gives every uprating (when measured, against which period, paid from
when) with its change, the change applied and the factor `1 + applied / 100` under each formula
series and under the Konüs series (`series_kind` fixed_base or chained; `konus_standard`). With an
`amount` (paid each period, such as a monthly pension) it gives the money paid under each index
per period, per calendar year and in total, and the running difference to the Konüs index.
Measure periods that give no uprating are listed in `not_computed` with the reason.
"""


@router.post("/uprating", operation_id="uprating",
             summary="Uprating clauses under each formula index and the Konüs index",
             description=DESCRIPTION, response_model=UpratingResponse, responses=RESPONSES)
@inline_when_cheap(workload.of_series)
def uprate(body: UpratingRequest, request: Request, format: FormatParam = None,
           provenance: ProvenanceQuery = "headers") -> Response:
    fmt = negotiate(request, OFFERS, format)
    settings = settings_of(request)
    loc = uprating.locator()
    panel = panel_from_json(body.periods, body.items, {"prices": body.prices,
                            "quantities": body.quantities, "expenditures": body.expenditures},
                            series.limits(settings), loc)
    outcome = uprating.run(body, panel, settings, loc)
    origin = of_body(body)
    if fmt == "csv":
        header, rows = uprating.table(outcome)
        scale = uprating.document(outcome)["scale"]
        return csv_response(header, rows, provenance=origin, trailer=provenance == "trailer",
                            filename="uprating.csv", headers=scale_headers(scale))
    # The caution goes in the headers of the JSON answer too: an indexation answer says it twice.
    return json_response(uprating.document(outcome), provenance=origin,
                         headers={CAUTION_HEADER: header_text(CAUTION)})


TREE_DESCRIPTION = """\
**Caution: these are model-based figures. For wage, pension or benefit indexation, defer to
official statistics and to the applicable law or agreement.**

"This is how our index is built" and "this is how our pensions are uprated" in one request: an
index-tree request (`POST /v1/index-tree`: the classification, the quotes, the links, the
formulas, the sigmas given or fitted) with a `node` (default: the root) and uprating `clauses`
as in `POST /v1/uprating`. The clauses read the node's published index (chained, from the first
link on; named by its upper formula, `lowe` or `young`) and the nested CES model's Konüs index
at the node, and the answer gives every uprating's change, applied change and factor under
each, and with an `amount` the money paid under each and the running difference to the Konüs
index; `Accept: text/csv` gives one row per clause, uprating and index.
"""


@router.post("/uprating/index-tree", operation_id="upratingFromIndexTree",
             summary="Uprating clauses on a node of an index tree, published and Konüs",
             description=TREE_DESCRIPTION, response_model=TreeUpratingResponse,
             responses=RESPONSES)
@inline_when_cheap(workload.of_index_tree)
def uprate_from_tree(body: TreeUpratingRequest, request: Request, format: FormatParam = None,
                     provenance: ProvenanceQuery = "headers") -> Response:
    """The clauses under the published index and the Konüs index at one node of the tree."""
    fmt = negotiate(request, OFFERS, format)
    outcome = tree_uprating.run(body, settings_of(request))
    origin = of_body(body)
    if fmt == "csv":
        header, rows = tree_uprating.table(outcome)
        scale = tree_uprating.document(outcome)["scale"]
        return csv_response(header, rows, provenance=origin, trailer=provenance == "trailer",
                            filename="uprating.csv", headers=scale_headers(scale))
    return json_response(tree_uprating.document(outcome), provenance=origin,
                         headers={CAUTION_HEADER: header_text(CAUTION)})
