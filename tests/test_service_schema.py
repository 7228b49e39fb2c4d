"""Schemathesis against the live service's OpenAPI schema: no generated request may get a 500.

Each generated request (random form fields, random file bytes) must be
answered with a status the schema lists, the content type it declares and a
body matching its schema. Few examples per operation keep this under a minute.
"""

from __future__ import annotations

import pytest

schemathesis = pytest.importorskip("schemathesis")
pytest.importorskip("fastapi")

from hypothesis import HealthCheck, given, settings  # noqa: E402
from schemathesis.checks import (  # noqa: E402
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)

from tests.live_service import serve_command  # noqa: E402

CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance, response_schema_conformance]


@pytest.fixture(scope="module")
def live_schema(tmp_path_factory):
    with serve_command(tmp_path_factory.mktemp("schema")) as (url, _):
        yield schemathesis.openapi.from_url(f"{url}/openapi.json")


@pytest.mark.parametrize("method, path", [("GET", "/health"), ("POST", "/analyze")])
def test_no_generated_request_breaks_the_service(live_schema, method, path):
    operation = live_schema[path][method]

    @given(case=operation.as_strategy())
    @settings(max_examples=40, deadline=None, suppress_health_check=list(HealthCheck), database=None)
    def call(case):
        case.call_and_validate(checks=CHECKS)

    call()
