"""Property-based fuzzing of the server from its own OpenAPI schema (schemathesis): no call gets a 5xx."""

from __future__ import annotations

import threading
import time

import pytest
import schemathesis
import uvicorn
from hypothesis import HealthCheck, given, settings
from schemathesis.checks import not_a_server_error

from sheetnet import server

TOKEN = "fuzz-token-0123456789abcdef"
AUTH = {"Authorization": f"Bearer {TOKEN}"}


@pytest.fixture(scope="module")
def api_schema():
    app = server.create_app(TOKEN)
    running = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=0, log_level="warning"))
    thread = threading.Thread(target=running.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not running.started and time.monotonic() < deadline:
        time.sleep(0.05)
    port = running.servers[0].sockets[0].getsockname()[1]
    yield schemathesis.openapi.from_url(f"http://127.0.0.1:{port}/openapi.json", headers=AUTH)
    running.should_exit = True
    thread.join(10)


def test_no_request_the_schema_allows_gets_a_server_error(api_schema):
    # each operation of the published schema, with cases generated from it, authorised
    operations = [result.ok() for result in api_schema.get_all_operations()]
    assert {op.path for op in operations} >= {"/v1/functions", "/v1/functions/{name}", "/v1/jobs", "/v1/jobs/{job_id}", "/v1/models"}
    for operation in operations:

        @settings(max_examples=30, deadline=None, suppress_health_check=list(HealthCheck), database=None)
        @given(case=operation.as_strategy())
        def check(case):
            case.call_and_validate(headers=AUTH, checks=[not_a_server_error])

        check()
