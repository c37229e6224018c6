"""Fixtures for the hooks tests: local-trial settings with a throwaway store, the ASGI app
(lifespan run by TestClient), the clinical thresholds."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from cds_service.config import Settings, load_settings

# --- fixtures ------------------------------------------------------------------------------


@pytest.fixture
def settings(tmp_path: Path) -> Settings:
    """Local-trial settings with a throwaway SQLite store."""
    return load_settings(
        None,
        storage={"url": f"sqlite:///{tmp_path / 'hooks.db'}"},
        auth={"required": False},
        local_trial=True,
        server={
            "public_base_url": "https://cds.larkspur-valley.example.org",
            "max_body_bytes": 4096 * 64,
        },
    )


@pytest.fixture
def client(settings: Settings) -> Iterator[TestClient]:
    from cds_service.app import create_app

    with TestClient(create_app(settings), raise_server_exceptions=False) as c:
        yield c


@pytest.fixture
def thresholds() -> object:
    from cds_service.clinical.thresholds import load_thresholds

    return load_thresholds({})
