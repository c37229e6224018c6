"""schemathesis against the app's own OpenAPI schema (schemathesis 4, in-process ASGI).

Law: for every operation the schema declares, generated requests (valid and invalid) never get
a 5xx, and every error is a FHIR OperationOutcome. Responses are not checked against the schema
because the hook routes read their bodies themselves (CDS Hooks JSON, not a FastAPI model).
"""

from __future__ import annotations

import tempfile
from pathlib import Path
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, settings

from cds_service.app import create_app
from tests.evidence._support import assert_clean, trial_settings

# Built at import: schemathesis.pytest.from_fixture fails under pytest 9 (schemathesis 4.32
# reads the private ``Function._nodeid``), so the schema is loaded directly. schemathesis runs
# the app's lifespan itself.
_STORE_DIR = tempfile.TemporaryDirectory(prefix="tonicity-schemathesis-")
schema = schemathesis.openapi.from_asgi(
    "/openapi.json", create_app(trial_settings(Path(_STORE_DIR.name)))
)


@schema.parametrize()
@settings(max_examples=25, deadline=None, suppress_health_check=list(HealthCheck))
def test_openapi_operations(case: Any) -> None:
    response = case.call()
    assert_clean(response, "schemathesis")


@pytest.mark.slow
@schema.parametrize()
@settings(max_examples=500, deadline=None, suppress_health_check=list(HealthCheck))
def test_openapi_operations_long(case: Any) -> None:
    response = case.call()
    assert_clean(response, "schemathesis")
