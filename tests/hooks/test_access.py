"""fhirServer and fhirAuthorization are checked before any FHIR request leaves the service.

Sources: CDS Hooks 2.0.1, "Calling a CDS Service" (``fhirServer``: the scheme MUST be https
when production data is exchanged) and "Passing the Access Token to the CDS Service"
(``token_type`` fixed value Bearer; ``scope``: SMART scopes; ``patient``: the patient the token
is restricted to); SMART App Launch 1.0.0 "Scopes and Launch Context" (v1 ``.read``, ``.*``,
``*`` resource wildcard) and 2.0.0 "Scopes for requesting FHIR resources" (v2
``.c r u d s`` permissions in that order, ``?param=value`` narrowing); RFC 6749 section 7.1
(the token type is case-insensitive).
"""

from __future__ import annotations

import asyncio

import httpx
import pytest
import respx
from hypothesis import given
from hypothesis import strategies as st

from cds_service.config import load_settings
from cds_service.hooks.access import Grant, query_interaction
from cds_service.hooks.registry import prefetch_templates
from cds_service.hooks.service import HookError, _require, gather_data, parse_call
from tests.hooks.fhirdata import FHIR_BASE, PATIENT_ID, hook_request, patient, searchset

TOKEN = "lvh-access-token-not-a-real-one"
TYPES = ("Patient", "Observation", "MedicationRequest", "MedicationStatement", "Condition")


@pytest.mark.parametrize(
    ("scope", "rtype", "interaction", "covered"),
    [
        ("patient/Observation.read", "Observation", "search", True),  # v1
        ("user/Observation.read", "Observation", "read", True),
        ("patient/Observation.*", "Observation", "search", True),  # v1 read and write
        ("patient/*.read", "Condition", "search", True),  # v1 wildcard type
        ("patient/Observation.write", "Observation", "search", False),
        ("patient/Observation.rs", "Observation", "search", True),  # v2
        ("patient/Observation.s", "Observation", "search", True),
        ("patient/Observation.r", "Observation", "search", False),  # read is not search
        ("patient/Patient.r", "Patient", "read", True),
        ("patient/Patient.s", "Patient", "read", False),
        ("patient/*.rs", "MedicationRequest", "search", True),  # v2 wildcard type
        ("user/*.cruds", "Condition", "search", True),
        ("patient/Observation.cu", "Observation", "search", False),
        ("patient/Observation.sr", "Observation", "search", False),  # v2: order is c r u d s
        ("patient/Observation.rs?category=laboratory", "Observation", "search", False),
        ("patient/Condition.rs", "Observation", "search", False),  # another type
        ("Observation.read", "Observation", "search", False),  # no context
        ("launch/patient openid fhirUser", "Observation", "search", False),
    ],
)
def test_scope_covers(scope: str, rtype: str, interaction: str, covered: bool) -> None:
    assert Grant(tuple(scope.split())).covers(rtype, interaction) is covered


@given(st.permutations(["patient/Observation.rs", "openid", "launch", "patient/Patient.r"]))
def test_scope_order_does_not_matter(scopes: list[str]) -> None:
    """Law: a scope string is a space-separated set (RFC 6749 section 3.3)."""
    grant = Grant(tuple(scopes))
    assert grant.covers("Observation", "search") and grant.covers("Patient", "read")
    assert not grant.covers("Condition", "search")


def test_every_template_names_its_resource_type_and_interaction() -> None:
    found = {query_interaction(q) for q in prefetch_templates().values()}
    assert ("Patient", "read") in found
    assert {t for t, i in found if i == "search"} == set(TYPES) - {"Patient"}


class _Allow:
    def fhir_server_allowed(self, caller: object, server: str) -> bool:
        return True


def _gather(body: dict, settings):  # type: ignore[no-untyped-def]
    async def go():  # type: ignore[no-untyped-def]
        async with httpx.AsyncClient() as http:
            state = await gather_data(
                parse_call(body), settings, http=http, caller=None, authenticator=_Allow()
            )
            _require(state)
            return state

    return asyncio.run(go())


@pytest.fixture
def production(tmp_path):  # type: ignore[no-untyped-def]
    """Settings of a configured deployment: not a local trial, authentication required."""
    return load_settings(
        None, storage={"url": f"sqlite:///{tmp_path / 'p.db'}"}, auth={"required": True}
    )


@respx.mock
def test_http_fhir_server_is_never_contacted_outside_a_local_trial(production) -> None:  # type: ignore[no-untyped-def]
    server = "http://fhir.larkspur-valley.example.org/r4"
    route = respx.route(host="fhir.larkspur-valley.example.org")
    body = hook_request(with_prefetch=False, fhir_server=server, token=TOKEN)
    with pytest.raises(HookError) as info:
        _gather(body, production)
    assert info.value.status == 412 and "https" in info.value.message
    assert not route.called


@respx.mock
def test_http_fhir_server_is_contacted_in_a_local_trial(settings) -> None:  # type: ignore[no-untyped-def]
    server = "http://127.0.0.1:9/fhir"
    respx.get(f"{server}/Patient/{PATIENT_ID}").respond(200, json=patient())
    respx.route(host="127.0.0.1").respond(200, json=searchset([]))
    state = _gather(hook_request(with_prefetch=False, fhir_server=server), settings)
    assert state.data["patient"]["id"] == PATIENT_ID


@respx.mock
def test_no_fhir_authorization_means_no_fetch_outside_a_local_trial(production) -> None:  # type: ignore[no-untyped-def]
    route = respx.route(host="fhir.larkspur-valley.example.org")
    with pytest.raises(HookError) as info:
        _gather(hook_request(with_prefetch=False, fhir_server=FHIR_BASE), production)
    assert info.value.status == 412 and "fhirAuthorization" in info.value.message
    assert not route.called


@respx.mock
@pytest.mark.parametrize("token_type", ["MAC", "Basic", "DPoP", ""])
def test_token_type_other_than_bearer_is_401(settings, token_type: str) -> None:  # type: ignore[no-untyped-def]
    route = respx.route(host="fhir.larkspur-valley.example.org")
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    body["fhirAuthorization"]["token_type"] = token_type
    with pytest.raises(HookError) as info:
        _gather(body, settings)
    assert info.value.status == 401 and "Bearer" in info.value.message
    assert TOKEN not in info.value.message and not route.called


@respx.mock
def test_token_type_is_case_insensitive(settings) -> None:  # type: ignore[no-untyped-def]
    respx.get(f"{FHIR_BASE}/Patient/{PATIENT_ID}").respond(200, json=patient())
    respx.route(host="fhir.larkspur-valley.example.org").respond(200, json=searchset([]))
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    body["fhirAuthorization"]["token_type"] = "bearer"
    assert _gather(body, settings).data["patient"] is not None


@respx.mock
def test_token_for_another_patient_is_401_and_never_used(settings) -> None:  # type: ignore[no-untyped-def]
    route = respx.route(host="fhir.larkspur-valley.example.org")
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    body["fhirAuthorization"]["patient"] = "lvh-pt-9999"
    with pytest.raises(HookError) as info:
        _gather(body, settings)
    assert info.value.status == 401 and "another patient" in info.value.message
    assert not route.called


@respx.mock
def test_token_for_this_patient_is_used(settings) -> None:  # type: ignore[no-untyped-def]
    respx.get(f"{FHIR_BASE}/Patient/{PATIENT_ID}").respond(200, json=patient())
    route = respx.route(host="fhir.larkspur-valley.example.org").respond(200, json=searchset([]))
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    body["fhirAuthorization"]["patient"] = PATIENT_ID
    _gather(body, settings)
    assert route.called
    assert all(c.request.headers["authorization"] == f"Bearer {TOKEN}" for c in route.calls)


@respx.mock
def test_reads_the_scope_does_not_grant_are_not_attempted(settings) -> None:  # type: ignore[no-untyped-def]
    """Observation and Patient granted (v2), the medication and problem reads not: those are
    never sent and are "not available"; the granted ones are fetched."""
    respx.get(f"{FHIR_BASE}/Patient/{PATIENT_ID}").respond(200, json=patient())
    route = respx.route(host="fhir.larkspur-valley.example.org").respond(200, json=searchset([]))
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    body["fhirAuthorization"]["scope"] = "patient/Patient.r patient/Observation.rs"
    state = _gather(body, settings)
    sent = {c.request.url.path.rsplit("/", 1)[-1] for c in route.calls}
    assert "Condition" not in sent and "MedicationRequest" not in sent
    assert "Observation" in sent
    for key in ("medicationRequests", "medicationStatements", "conditions"):
        assert "scope does not grant" in state.unavailable[key]


@respx.mock
def test_scope_without_observation_read_is_412(settings) -> None:  # type: ignore[no-untyped-def]
    route = respx.route(host="fhir.larkspur-valley.example.org").respond(200, json=searchset([]))
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    body["fhirAuthorization"]["scope"] = "patient/Condition.read"
    with pytest.raises(HookError) as info:
        _gather(body, settings)
    assert info.value.status == 412 and "scope" in info.value.message
    assert all("Observation" not in c.request.url.path for c in route.calls)


def test_the_app_answers_a_refused_token_with_an_operation_outcome(client) -> None:  # type: ignore[no-untyped-def]
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    body["fhirAuthorization"]["token_type"] = "MAC"
    response = client.post("/cds-services/sodium-workup", json=body)
    assert response.status_code == 401
    assert response.json()["resourceType"] == "OperationOutcome"
