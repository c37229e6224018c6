"""Authentication through the ASGI app (issue 5): every attack of the matrix is answered 401
with ``WWW-Authenticate: Bearer`` and an OperationOutcome naming the class of problem, never
key material (RFC 6750 section 3, open standard); a token used at one replica is refused at
another sharing the database (SQLite file and PostgreSQL)."""

from __future__ import annotations

import json
from collections.abc import Iterator
from contextlib import contextmanager

import pytest
from fastapi.testclient import TestClient

from cds_service.app import create_app
from cds_service.config import Settings, StorageSettings
from tests.fixtures.auth_kit import (
    BASE,
    ENDPOINT,
    NOW,
    KeyPair,
    claims,
    new_key,
    settings_for,
    sign,
)
from tests.hooks.test_auth import ATTACKS

PATH = ENDPOINT.removeprefix(BASE)  # /cds-services/sodium-workup


@contextmanager
def _app(config: Settings) -> Iterator[TestClient]:
    with TestClient(create_app(config), raise_server_exceptions=False) as client:
        client.app.state.authenticator._now = lambda: NOW  # tokens are minted at NOW
        yield client


def _config(tmp_path, key: KeyPair, url: str) -> Settings:
    return settings_for(tmp_path, key).model_copy(update={"storage": StorageSettings(url=url)})


def _leaks(text: str, key: KeyPair) -> bool:
    (public,) = key.jwks()["keys"]
    return any(s in text for s in ("eyJ", "BEGIN", public["x"], public["y"], "Traceback"))


@pytest.mark.parametrize("attack", list(ATTACKS), ids=list(ATTACKS))
def test_attack_answered_401_with_operation_outcome(attack, tmp_path, sqlite_url) -> None:
    key = new_key()
    forger, reason = ATTACKS[attack]
    with _app(_config(tmp_path, key, sqlite_url)) as client:
        response = client.post(
            PATH, content=b"{}", headers={"Authorization": f"Bearer {forger(key)}"}
        )
    assert response.status_code == 401
    assert response.headers["www-authenticate"].startswith("Bearer")
    body = response.json()
    assert body["resourceType"] == "OperationOutcome"
    assert reason in json.dumps(body)
    assert not _leaks(response.text, key)


def test_replay_across_two_app_instances_sharing_one_database(tmp_path, store_url) -> None:
    key = new_key()
    config = _config(tmp_path, key, store_url)
    headers = {"Authorization": f"Bearer {sign(key, claims(aud=ENDPOINT.rsplit('/', 1)[0]))}"}
    with _app(config) as first, _app(config) as second:
        assert first.get("/cds-services", headers=headers).status_code == 200
        refused = second.get("/cds-services", headers=headers)
    assert refused.status_code == 401 and "token replayed" in refused.text
