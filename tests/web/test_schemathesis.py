"""Property-based run of the API against its own OpenAPI document (schemathesis): no 5xx, and every answer
fits the documented status codes, content types and schemas.

Bounded: a few examples per operation, small limits (cells, events, duration, time budget) so that generated
maps and simulations stay cheap; a 413 or 503 is a documented answer, a 500 is a failure.
"""

from __future__ import annotations

import pytest
import schemathesis
from exomap.web.app import create_app
from exomap.web.settings import Settings
from hypothesis import HealthCheck, settings
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)
from web_scenarios import ADIABATIC


@pytest.fixture
def api_schema(tmp_path):
    app = create_app(
        Settings(
            data_dir=tmp_path / "data",
            executor="thread",
            workers=2,
            max_map_cells=400,
            max_events=5,
            max_duration_s=3600.0,
            request_time_budget_s=3.0,
            allowed_hosts=["testserver", "localhost"],
        )
    )
    from fastapi.testclient import TestClient

    with TestClient(app) as client:
        assert client.post("/api/v1/scenarios", json=ADIABATIC).status_code == 201
        yield schemathesis.openapi.from_asgi("/api/v1/openapi.json", app)


schema = schemathesis.pytest.from_fixture("api_schema")


@schema.parametrize()
@settings(max_examples=6, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
def test_api_conforms_to_its_openapi(case) -> None:
    case.call_and_validate(
        checks=[not_a_server_error, status_code_conformance, content_type_conformance, response_schema_conformance]
    )
