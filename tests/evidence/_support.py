"""Helpers shared by the evidence tests: an app settings factory and the response check.

The app runs as a local trial (auth off, any fhirServer allowed) on a SQLite file, so the fuzz
reaches validation, ingestion, the clinical core and the card log. :func:`assert_clean` checks
what must never happen on every response: no 5xx, and every error an OperationOutcome with at
least one issue. :data:`CASES` counts the cases, printed at the end of the session.
"""

from __future__ import annotations

from collections import Counter
from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient

from cds_service.app import create_app
from cds_service.config import Settings, load_settings

CASES: Counter[str] = Counter()


def trial_settings(folder: Path, **overrides: Any) -> Settings:
    base: dict[str, Any] = {
        "storage": {"url": f"sqlite:///{folder / 'evidence.db'}"},
        "auth": {"required": False},
        "local_trial": True,
        "logging": {"level": "WARNING", "patient_id_salt": "evidence-salt"},
    }
    base.update(overrides)
    return load_settings(None, **base)


def open_client(settings: Settings) -> TestClient:
    return TestClient(create_app(settings), raise_server_exceptions=False)


def assert_clean(response: Any, what: str = "") -> None:
    """No server error; an error answer is a FHIR OperationOutcome with an issue."""
    CASES[what or "requests"] += 1
    assert response.status_code < 500, f"{what}: {response.status_code} {response.text[:300]}"
    if response.status_code >= 400:
        body = response.json()
        assert body.get("resourceType") == "OperationOutcome", response.text[:300]
        assert body.get("issue"), response.text[:300]
