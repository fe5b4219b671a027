"""Property-based fuzzing of the server from its own OpenAPI schema (schemathesis): no call gets a 5xx."""

from __future__ import annotations

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from local_server import serving
from schemathesis.checks import not_a_server_error

from sheetnet import server

TOKEN = "fuzz-token-0123456789abcdef"
AUTH = {"Authorization": f"Bearer {TOKEN}"}


@pytest.fixture(scope="module")
def api_schema():
    with serving(server.create_app(TOKEN)) as address:
        yield schemathesis.openapi.from_url(f"{address}/openapi.json", headers=AUTH)


def test_no_request_the_schema_allows_gets_a_server_error(api_schema):
    # each operation of the published schema, with cases generated from it, authorised
    operations = [result.ok() for result in api_schema.get_all_operations()]
    assert {op.path for op in operations} >= {"/v1/functions", "/v1/functions/{name}", "/v1/jobs", "/v1/jobs/{job_id}", "/v1/models", "/v1/placements"}
    for operation in operations:

        @settings(max_examples=30, deadline=None, suppress_health_check=list(HealthCheck), database=None)
        @given(case=operation.as_strategy())
        def check(case):
            case.call_and_validate(headers=AUTH, checks=[not_a_server_error])

        check()
