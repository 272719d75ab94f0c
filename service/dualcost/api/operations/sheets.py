"""The spreadsheet forms: GET requests whose query parameters carry a comparison or a short
panel, answered as one number (text) or as a CSV table.

A spreadsheet can only send a GET with a URL and read the body back as text, so vectors travel
as short comma-separated lists in the order given by ``items``; with ``decimal=comma`` numbers
have decimal commas and are separated by semicolons (see ``inputs/query.py``). The query is
turned into the JSON body of the same operation, validated by the same models, and run by the
same operation with a locator in its query-string form: every error names the query parameter
(``#/query/p0/2``). That body, validated, is the answer's canonical input (see
:mod:`dualcost.api.provenance`): a form and ``POST`` of the body it stands for share a digest.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ..inputs.query import names, number, rows, vector
from ..problems import RequestProblem


def comparison_body(params: Mapping[str, Any]) -> dict[str, Any]:
    """The JSON body of a comparison, from the spreadsheet form's query parameters."""
    decimal = params["decimal"]

    def given(*pairs: tuple[str, str]) -> dict[str, Any]:
        """``{key: value}`` for each ``(key, parameter)`` given, numbers read as declared."""
        out = {}
        for key, name in pairs:
            if params[name] is not None:
                read = vector if key in VECTORS else number
                out[key] = read(name, params[name], decimal)
        return out

    base = {"prices": vector("p0", params["p0"], decimal)}
    base |= given(("quantities", "q0"), ("shares", "w0"), ("expenditure", "m0"))
    current = {"prices": vector("p1", params["p1"], decimal)}
    current |= given(("quantities", "q1"), ("expenditure", "m1"))
    model: dict[str, Any] = {"family": params["family"]}
    model |= given(("sigma", "sigma"), ("frisch", "frisch"),
                   ("subsistence_quantities", "subsistence"),
                   ("expenditure_elasticities", "elasticities"))
    body: dict[str, Any] = {"items": names(params["items"], decimal), "base": base,
                            "current": current, "model": model}
    # Options given only when they differ from their defaults: the body a caller would write.
    if params["normalise_shares"]:
        body["normalise_shares"] = True
    if params["share_unit"] != "fraction":
        body["share_unit"] = params["share_unit"]
    if params.get("formulas"):
        body["formulas"] = names(params["formulas"], decimal)
    return body | given(("reference_income", "reference_income"))


#: The body keys that hold a vector (the others given as query parameters are single numbers).
VECTORS = frozenset({"prices", "quantities", "shares", "subsistence_quantities",
                     "expenditure_elasticities"})


def series_body(query: Mapping[str, Any], prices: list[str], quantities: list[str] | None,
                ) -> dict[str, Any]:
    """The JSON body of an index series, from the spreadsheet form's query parameters: each
    period's prices (and quantities) as one repeated parameter, in period order."""
    decimal = query["decimal"]
    items, periods = names(query.get("items"), decimal), names(query.get("periods"), decimal)
    body: dict[str, Any] = {"items": items, "periods": periods,
                            "prices": rows("prices", prices, len(periods), decimal) or []}
    given = rows("quantities", quantities, len(periods), decimal)
    if given is not None:
        body["quantities"] = given
    for key in ("base_period", "reference_period", "reference_value"):
        if query.get(key):
            body[key] = query[key]
    if query.get("formulas"):
        body["formulas"] = names(query["formulas"], decimal)
    if query.get("rebase_period") or query.get("rebase_year") is not None:
        body["rebase"] = {key: query[f"rebase_{key}"] for key in ("period", "year")
                          if query.get(f"rebase_{key}") is not None}
    if query.get("family"):
        body["model"] = {"family": query["family"]}
        if query.get("sigma") is not None:
            body["model"]["sigma"] = number("sigma", query["sigma"], decimal)
    return body


#: The clause form's query parameters and the clause fields they fill.
CLAUSE_FIELDS = ("measure", "period_of_year", "since", "lag", "floor", "cap")


def uprating_body(query: Mapping[str, Any], prices: list[str], quantities: list[str] | None,
                  ) -> dict[str, Any]:
    """The JSON body of an uprating with one clause, from the clause form's query parameters:
    the series as :func:`series_body` reads it, and the clause's fields."""
    decimal = query["decimal"]
    body = series_body(query, prices, quantities)
    clause: dict[str, Any] = {}
    for key in CLAUSE_FIELDS:
        value = query.get(key)
        if value is None:
            continue
        clause[key] = number(key, value, decimal) if key in ("floor", "cap") else value
    if query.get("decimals") is not None or query.get("rounding") is not None:
        clause["rounding"] = {key: query[name] for key, name in (
            ("decimals", "decimals"), ("method", "rounding")) if query.get(name) is not None}
    body["clauses"] = [clause]
    for key in ("series_kind", "konus_standard"):
        if query.get(key) is not None:
            body[key] = query[key]
    return body


def sweep_body(params: Mapping[str, Any], parameter: str, values: str | None
               ) -> dict[str, Any]:
    """The JSON body of a sensitivity sweep from the sweep form: the comparison form's budget
    and model (the one model of the sweep), and ``parameter`` run over ``values``."""
    if not values:
        raise RequestProblem.at("#/query/values", "give the values of the grid, separated by "
                                "commas (or semicolons with decimal=comma)")
    body = comparison_body(params)
    body["models"] = [body.pop("model")]
    body["grid"] = {"parameter": parameter,
                    "values": vector("values", values, params["decimal"])}
    return body
