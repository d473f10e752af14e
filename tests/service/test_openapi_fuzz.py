"""schemathesis against the service's own OpenAPI document: no request it generates gets a 5xx."""

from __future__ import annotations

import pytest
import schemathesis
from conftest import AUTH, TOKEN
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, settings
from schemathesis.checks import not_a_server_error

from detector.service.app import create_app
from detector.service.settings import Settings


@pytest.fixture(scope="module")
def api_schema(tmp_path_factory, model_path):
    app = create_app(Settings(data_dir=tmp_path_factory.mktemp("fuzz") / "data", token=TOKEN, model_path=model_path,
                              max_upload_bytes=4 * 1024 * 1024))
    with TestClient(app):  # runs the lifespan: store open, model loaded
        yield schemathesis.openapi.from_asgi("/openapi.json", app)


schema = schemathesis.pytest.from_fixture("api_schema")


@pytest.mark.slow
@schema.parametrize()
@settings(max_examples=30, deadline=None, suppress_health_check=list(HealthCheck))
def test_no_server_error_with_token(case):
    case.call_and_validate(headers=AUTH, checks=[not_a_server_error])


@schema.parametrize()
@settings(max_examples=8, deadline=None, suppress_health_check=list(HealthCheck))
def test_no_server_error_without_token(case):
    case.call_and_validate(checks=[not_a_server_error])
