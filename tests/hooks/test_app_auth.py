"""The app with authentication on: every /cds-services route demands the client's JWT, and the
FHIR server is contacted only when it is on the calling client's allowlist.

HL7 CDS Hooks 2.0, Security (open standard): the client signs a JWT whose ``aud`` is the
service endpoint, sent as ``Authorization: Bearer``; the FHIR access token travels separately
in ``fhirAuthorization`` and is what the service uses against ``fhirServer``. RFC 6750 §3
(open standard): a refused bearer credential is answered 401 with ``WWW-Authenticate: Bearer``.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Iterator
from pathlib import Path

import pytest
import respx
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import ec
from fastapi.testclient import TestClient
from jwt.algorithms import ECAlgorithm
from sqlalchemy import select

from cds_service.app import LOCAL_TRIAL_HEADER, create_app
from cds_service.config import Settings, load_settings
from cds_service.hooks.auth import sign_token
from cds_service.store.schema import CardLog
from tests.hooks.conformance import check_response
from tests.hooks.fhirdata import FHIR_BASE, hook_request, patient, searchset, sodium_series

ISSUER = "https://ehr.larkspur-valley.example.org"
BASE = "https://cds.larkspur-valley.example.org"
KID = "lvh-ehr-2026"
FHIR_TOKEN = "opaque-fhir-access-token-for-tests"


@pytest.fixture
def private_pem(tmp_path: Path) -> str:
    key = ec.generate_private_key(ec.SECP384R1())
    jwk = json.loads(ECAlgorithm.to_jwk(key.public_key()))
    jwk.update(kid=KID, alg="ES384", use="sig")
    (tmp_path / "ehr-jwks.json").write_text(json.dumps({"keys": [jwk]}))
    return key.private_bytes(
        serialization.Encoding.PEM,
        serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption(),
    ).decode()


@pytest.fixture
def secure_settings(tmp_path: Path, private_pem: str) -> Settings:
    return load_settings(
        None,
        server={"public_base_url": BASE},
        storage={"url": f"sqlite:///{tmp_path / 'secure.db'}"},
        auth={
            "required": True,
            "clients": [
                {
                    "issuer": ISSUER,
                    "jwks_file": str(tmp_path / "ehr-jwks.json"),
                    "fhir_servers": [FHIR_BASE],
                }
            ],
        },
    )


@pytest.fixture
def secure(secure_settings: Settings) -> Iterator[TestClient]:
    with TestClient(create_app(secure_settings), raise_server_exceptions=False) as c:
        yield c


def _bearer(pem: str, path: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {sign_token(pem, ISSUER, f'{BASE}{path}', KID)}"}


def test_every_route_refuses_a_missing_token(secure: TestClient) -> None:
    for method, path in (
        ("GET", "/cds-services"),
        ("POST", "/cds-services/sodium-workup"),
        ("POST", "/cds-services/sodium-workup/feedback"),
    ):
        response = secure.request(method, path, json={})
        assert response.status_code == 401, (path, response.text)
        assert response.headers["www-authenticate"].startswith("Bearer")
        assert response.json()["resourceType"] == "OperationOutcome"
        assert LOCAL_TRIAL_HEADER not in response.headers


def test_token_for_another_endpoint_is_refused_and_audited(
    secure: TestClient, private_pem: str, caplog: pytest.LogCaptureFixture
) -> None:
    caplog.set_level(logging.INFO)
    headers = _bearer(private_pem, "/cds-services/sodium-order-sign")
    response = secure.post("/cds-services/sodium-workup", json=hook_request(), headers=headers)
    assert response.status_code == 401
    audit = [r.fields for r in caplog.records if r.name == "tonicity.audit"]  # type: ignore[attr-defined]
    assert [(a["service"], a["status"], a["client"]) for a in audit] == [
        ("sodium-workup", 401, "anonymous")
    ]


def test_discovery_with_a_valid_token(secure: TestClient, private_pem: str) -> None:
    response = secure.get("/cds-services", headers=_bearer(private_pem, "/cds-services"))
    assert response.status_code == 200 and len(response.json()["services"]) >= 3


@respx.mock(assert_all_called=False)
def test_allowed_fhir_server_is_fetched_with_the_fhir_token(
    respx_mock: respx.MockRouter, secure: TestClient, private_pem: str
) -> None:
    path = "/cds-services/sodium-workup"
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=FHIR_TOKEN)
    respx_mock.get(f"{FHIR_BASE}/Patient/lvh-pt-1042").respond(200, json=patient())
    obs = respx_mock.get(f"{FHIR_BASE}/Observation").respond(
        200, json=searchset(sodium_series(124))
    )
    for rtype in ("MedicationRequest", "MedicationStatement", "Condition"):
        respx_mock.get(f"{FHIR_BASE}/{rtype}").respond(200, json=searchset([]))
    response = secure.post(path, json=body, headers=_bearer(private_pem, path))
    assert response.status_code == 200, response.text
    check_response(response.json())
    assert response.json()["cards"]
    assert obs.calls.last.request.headers["authorization"] == f"Bearer {FHIR_TOKEN}"
    with secure.app.state.store.session() as s:
        assert {r.client_id for r in s.scalars(select(CardLog))} == {ISSUER}


@respx.mock
def test_fhir_server_off_the_allowlist_is_never_contacted(
    secure: TestClient, private_pem: str
) -> None:
    path = "/cds-services/sodium-workup"
    body = hook_request(
        with_prefetch=False, fhir_server="https://elsewhere.example.net/fhir", token=FHIR_TOKEN
    )
    response = secure.post(path, json=body, headers=_bearer(private_pem, path))
    assert response.status_code == 412
    assert not respx.calls
    assert FHIR_TOKEN not in response.text


def test_replayed_token_is_refused(secure: TestClient, private_pem: str) -> None:
    headers = _bearer(private_pem, "/cds-services")
    assert secure.get("/cds-services", headers=headers).status_code == 200
    assert secure.get("/cds-services", headers=headers).status_code == 401


def test_cors_preflight_needs_no_token_and_allows_the_bearer_header(secure: TestClient) -> None:
    """CDS Hooks 2.0, Security and Safety: browser-based CDS clients require CORS (W3C Fetch
    standard, CORS protocol: a preflight OPTIONS carries no credentials)."""
    origin = "https://sandbox.larkspur-valley.example.org"
    response = secure.options(
        "/cds-services/sodium-workup",
        headers={
            "Origin": origin,
            "Access-Control-Request-Method": "POST",
            "Access-Control-Request-Headers": "authorization, content-type",
        },
    )
    assert response.status_code == 200
    assert "authorization" in response.headers["access-control-allow-headers"].lower()
    refused = secure.get("/cds-services", headers={"Origin": origin})
    assert refused.status_code == 401  # CORS opens the door to the browser, not to the service
    assert refused.headers["access-control-allow-origin"] == "*"
