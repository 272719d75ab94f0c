"""Schema-driven fuzzing of every operation with Schemathesis (generated cases and every
declared example), against the app in-process: no 5xx, and every answer conforms to the
OpenAPI document (status code declared, content type declared, body matches its schema)."""

from __future__ import annotations

import pytest

schemathesis = pytest.importorskip("schemathesis")
from hypothesis import HealthCheck, settings  # noqa: E402
from schemathesis.checks import (  # noqa: E402
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)

from dualcost.api.app import create_app  # noqa: E402
from dualcost.config import Settings  # noqa: E402
from tests.conftest import EXAMPLES  # noqa: E402


@schemathesis.serializer("application/vnd.apache.parquet")
def _parquet_bytes(ctx: object, value: object) -> bytes:
    """A household upload declared as Parquet: the generated value's bytes as they are (almost
    never a Parquet file, so the broken-file problem is what gets checked)."""
    if isinstance(value, bytes):
        return value
    return str(value).encode("utf-8", "surrogatepass")


APP = create_app(Settings(examples_dir=EXAMPLES))
SCHEMA = schemathesis.openapi.from_asgi("/openapi.json", APP)
CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance,
          response_schema_conformance]


@SCHEMA.parametrize()
@settings(max_examples=25, deadline=None, derandomize=True,
          suppress_health_check=list(HealthCheck))
def test_every_operation_conforms_and_never_fails(case) -> None:
    case.call_and_validate(checks=CHECKS)
