"""The spreadsheet forms: GET requests whose query parameters carry a comparison or a short
panel, answered as one number (text) or as a CSV table.

A spreadsheet can only send a GET with a URL and read the body back as text, so vectors travel
as short comma-separated lists in the order given by ``items`` (or separated by semicolons, for
sheets whose locale writes decimal commas). The query is turned into the JSON body of the same
operation, validated by the same models, and run by the same operation with a locator in its
query-string form: every error names the query parameter (``#/query/p0/2``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ..inputs.query import names, rows, vector


def comparison_body(params: Mapping[str, Any]) -> dict[str, Any]:
    """The JSON body of a comparison, from the spreadsheet form's query parameters."""
    base: dict[str, Any] = {"prices": vector("p0", params["p0"])}
    for key, name in (("quantities", "q0"), ("shares", "w0")):
        if params[name] is not None:
            base[key] = vector(name, params[name])
    if params["m0"] is not None:
        base["expenditure"] = params["m0"]
    current: dict[str, Any] = {"prices": vector("p1", params["p1"])}
    if params["q1"] is not None:
        current["quantities"] = vector("q1", params["q1"])
    if params["m1"] is not None:
        current["expenditure"] = params["m1"]
    model: dict[str, Any] = {"family": params["family"]}
    for key in ("sigma", "frisch"):
        if params[key] is not None:
            model[key] = params[key]
    for key, name in (("subsistence_quantities", "subsistence"),
                      ("expenditure_elasticities", "elasticities")):
        if params[name] is not None:
            model[key] = vector(name, params[name])
    body: dict[str, Any] = {"items": names(params["items"]), "base": base, "current": current,
                            "model": model, "normalise_shares": params["normalise_shares"]}
    if params["reference_income"] is not None:
        body["reference_income"] = params["reference_income"]
    return body


def series_body(query: Mapping[str, Any], prices: list[str], quantities: list[str] | None,
                ) -> dict[str, Any]:
    """The JSON body of an index series, from the spreadsheet form's query parameters: each
    period's prices (and quantities) as one repeated parameter, in period order."""
    items, periods = names(query.get("items")), names(query.get("periods"))
    body: dict[str, Any] = {"items": items, "periods": periods,
                            "prices": rows("prices", prices, len(periods)) or []}
    given = rows("quantities", quantities, len(periods))
    if given is not None:
        body["quantities"] = given
    for key in ("base_period", "reference_period", "reference_value"):
        if query.get(key):
            body[key] = query[key]
    if query.get("formulas"):
        body["formulas"] = names(query["formulas"])
    if query.get("family"):
        body["model"] = {"family": query["family"]}
        if query.get("sigma") is not None:
            body["model"]["sigma"] = query["sigma"]
    return body
