"""POST /v1/revealed-preference: GARP, WARP, SARP, Afriat's efficiency index and model-free bounds
on the Konüs index for a panel of prices and quantities."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Request
from fastapi.responses import Response

from ..deps import settings_of
from ..operations import revealed
from ..operations.answers import SCALE_RATIO, scale_headers
from ..provenance import of_body
from ..render import CSV_ANSWER, Format, ProvenanceQuery, csv_response, format_query, json_response, negotiate
from ..routing import JsonRoute
from ..schemas.revealed import RevealedRequest, RevealedResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["revealed preference"])

OFFERS: tuple[Format, ...] = ("json", "csv")
RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "As JSON; or, asked for (Accept: text/csv, or format=csv), the bounds "
                         "as a CSV table with one row per period: " + ",".join(
                             revealed.TABLE_COLUMNS) + "; the verdicts in the headers "
                         "Dualcost-Garp (pass or fail) and Dualcost-Efficiency-Index.",
          **CSV_ANSWER},
}
DESCRIPTION = """\
Without any preference model: whether the panel's choices can come from one utility function
(**GARP**, Varian 1982; and WARP, SARP), every violation with a cycle of periods revealing it,
and **Afriat's efficiency index** (the largest e <= 1 at which the data pass with every budget
scaled by e). Then, for every period against `base_period`, **bounds on the Konüs index** at the
living standard of `utility_period` that hold for every utility function explaining the data
(Varian 1982, 1983; the lower bound by linear programming, scipy HiGHS), beside Laspeyres and
Paasche. Where the data fail GARP the bounds are at an efficiency level where they pass, and the
answer says so. Varian's bounds only: the tighter bounds of Blundell, Browning and Crawford
(2003, 2008) need expansion paths and are not computed.
"""


@router.post("/revealed-preference", operation_id="revealedPreference",
             summary="Model-free: GARP, WARP, SARP, Afriat's efficiency index, bounds on the "
                     "Konüs index", description=DESCRIPTION,
             response_model=RevealedResponse, responses=RESPONSES)
def revealed_preference(body: RevealedRequest, request: Request,
                        format: Annotated[Literal["json", "csv"] | None,
                                          format_query(OFFERS)] = None,
                        provenance: ProvenanceQuery = "headers") -> Response:
    # A plain def: the closure and the linear programmes run in the compute threads.
    fmt = negotiate(request, OFFERS, format)
    outcome = revealed.run(body, settings_of(request))
    if fmt == "csv":
        header, rows = revealed.table(outcome)
        return csv_response(header, rows, provenance=of_body(body),
                            trailer=provenance == "trailer", filename="revealed-preference.csv",
                            headers=scale_headers(SCALE_RATIO) | revealed.headers(outcome))
    return json_response(revealed.document(outcome), provenance=of_body(body))
