"""The OpenAPI document, with every error answer described as what it is: a problem.

FastAPI describes a validation error as ``application/json`` with its own error shape. This
service answers every error with RFC 9457 problem details (``application/problem+json``), so the
document is rewritten to say so: for every operation, each 4xx/5xx answer it can give points at
one ``Problem`` schema.
"""

from __future__ import annotations

from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi
from pydantic import BaseModel, Field

from .examples import add_examples
from .problems import PROBLEM_MEDIA_TYPE
from .runs import SAVE_TEXT, saves


class FieldErrorOut(BaseModel):
    pointer: str = Field(description="JSON Pointer into the body, '#/query/<name>' for a query "
                                     "parameter, or an RFC 7111 fragment ('#cell=row,col') for CSV.")
    detail: str


class ProblemOut(BaseModel):
    """RFC 9457 problem details."""

    type: str
    title: str
    status: int
    detail: str
    instance: str | None = None
    errors: list[FieldErrorOut] | None = None
    acceptable: list[str] | None = Field(
        None, description="406 only: the media types the operation answers.")


#: Error answers every operation can give (the request's limits, malformed input, a bug).
_ALWAYS = {
    "400": "The body is not valid JSON.",
    "408": "The request (its header fields or its body) did not arrive within the read time.",
    "413": "The request body is larger than the limit.",
    "431": "The request's header fields are too large or too many.",
    "422": "The request breaks a rule (`errors` points at each field), or the computation "
           "left the floating-point range (`errors` names the likely input).",
    "500": "Internal error (a bug: please report it).",
}
_PROTECTED = {
    "401": "An API key is needed (when the service is configured with keys).",
    "429": "The rate limit of this API key (or, without a valid key, of this client address) "
           "is used up (when configured); see Retry-After.",
}
_COMPUTING = {"503": "The computation ran past the service's compute deadline."}
#: Every operation under /v1 that answers with a body honours the Accept header.
_NEGOTIATED = {"406": "The Accept header admits none of the media types this operation "
                      "answers (listed in `acceptable`)."}
_JSON_BODY = "The body was sent with a Content-Type other than JSON (application/json)."
_STORAGE = {"503": "The computation ran past the service's compute deadline, or (with save=true) "
                   "the database that keeps runs cannot be reached (see Retry-After)."}
#: The ``save`` query parameter, handled for every operation by dualcost.api.runs.
_SAVE = {"name": "save", "in": "query", "required": False, "description": SAVE_TEXT,
         "schema": {"type": "boolean", "default": False}}


def problem_openapi(app: FastAPI) -> dict[str, Any]:
    """Build (once) the document with problem responses on every operation."""
    if app.openapi_schema:
        return app.openapi_schema
    doc = get_openapi(title=app.title, version=app.version, description=app.description,
                      routes=app.routes, tags=app.openapi_tags)
    add_examples(doc, app.state.settings.examples_dir)
    schemas = doc.setdefault("components", {}).setdefault("schemas", {})
    problem_schema = ProblemOut.model_json_schema(ref_template="#/components/schemas/{model}")
    schemas.update(problem_schema.pop("$defs", {}))
    schemas["Problem"] = problem_schema
    problem = {PROBLEM_MEDIA_TYPE: {"schema": {"$ref": "#/components/schemas/Problem"}}}
    for path, item in doc.get("paths", {}).items():
        for method, op in item.items():
            if saves(path, method):
                op.setdefault("parameters", []).append(dict(_SAVE))
                op.setdefault("responses", {}).setdefault("503", {"description": _STORAGE["503"]})
            responses = op.setdefault("responses", {})
            extra = dict(_ALWAYS)
            if path.startswith("/v1/"):
                extra |= _PROTECTED | (_COMPUTING | _NEGOTIATED if method in ("get", "post")
                                       else {})
            if "application/json" in op.get("requestBody", {}).get("content", {}):
                extra["415"] = _JSON_BODY
            for code, text in extra.items():
                responses.setdefault(code, {"description": text})
            for code, response in responses.items():
                if code[0] in "45":
                    response["content"] = problem
    for unused in ("HTTPValidationError", "ValidationError"):
        schemas.pop(unused, None)
    app.openapi_schema = doc
    return doc
