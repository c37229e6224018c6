"""End-to-end through the ASGI app: discovery, the three hooks, feedback, every error path.

Protocol facts from HL7 CDS Hooks 2.0 (open standard): discovery lists ``services`` with
``hook``, ``id``, ``prefetch``; a hook call answers ``{"cards": [...]}``; the feedback body is
``{"feedback": [{"card", "outcome", ...}]}``. Error bodies are FHIR R4 OperationOutcome.
Clinical inputs: serum sodium < 135 mmol/L is hyponatremia, < 125 profound (Spasovski et al.
2014, European clinical practice guideline on hyponatraemia, Eur J Endocrinol).
"""

from __future__ import annotations

import json
import logging

import pytest
import respx
from fastapi.testclient import TestClient
from sqlalchemy import select

from cds_service.app import LOCAL_TRIAL_HEADER
from cds_service.hooks.registry import SERVICES
from cds_service.store.schema import CardLog, Feedback
from tests.hooks.conformance import check_response, empties
from tests.hooks.fhirdata import (
    FHIR_BASE,
    NA,
    NOW,
    OSM,
    hook_request,
    hypotonic_fluid,
    observation,
    patient,
    sodium_series,
)

WORKUP = "/cds-services/sodium-workup"


def _outcome(response) -> str:  # type: ignore[no-untyped-def]
    body = response.json()
    assert body["resourceType"] == "OperationOutcome", body
    assert body["issue"][0]["diagnostics"]
    return str(body["issue"][0]["diagnostics"])


def test_discovery_lists_three_services_with_prefetch(client: TestClient) -> None:
    response = client.get("/cds-services")
    assert response.status_code == 200
    services = {s["id"]: s for s in response.json()["services"]}
    assert {s["hook"] for s in services.values()} >= {"patient-view", "order-select", "order-sign"}
    for s in services.values():
        assert s["title"] and s["description"] and s["usageRequirements"]
        assert s["prefetch"]["patient"] == "Patient/{{context.patientId}}"
        assert "&code=http://loinc.org|2951-2" in s["prefetch"]["sodium"]
        assert not empties(s)


def test_local_trial_header_on_every_response(client: TestClient) -> None:
    for response in (
        client.get("/cds-services"),
        client.post(WORKUP, content=b"{"),
        client.get("/healthz"),
    ):
        assert response.headers[LOCAL_TRIAL_HEADER].startswith("disabled (local trial")


def test_normal_sodium_gives_no_cards(client: TestClient) -> None:
    body = hook_request(observations=sodium_series(139, 140))
    response = client.post(WORKUP, json=body)
    assert response.status_code == 200
    assert response.json() == {"cards": []}


def test_profound_hyponatremia_without_osmolality(client: TestClient, settings) -> None:  # type: ignore[no-untyped-def]
    body = hook_request(observations=sodium_series(127, 123))
    response = client.post(WORKUP, json=body)
    assert response.status_code == 200
    result = response.json()
    check_response(result)
    cards = {c["source"]["topic"]["code"]: c for c in result["cards"]}
    card = cards["hyponatremia-tonicity-unknown"]
    assert card["indicator"] == "critical"  # Na < 125 is profound (Spasovski 2014)
    values = {v["name"]: v for v in card["extension"]["tonicity.values"]}
    assert values["serum_sodium"]["value"] == 123 and values["serum_sodium"]["unit"] == "mmol/L"
    ordered = [
        a["resource"]["code"]["coding"][0]["code"]
        for s in card["suggestions"]
        for a in s["actions"]
        if a["type"] == "create"
    ]
    assert OSM[0] in ordered  # LOINC serum osmolality (LOINC, open standard)
    assert card["selectionBehavior"] == "any"
    link = card.get("links", [{}])[0]
    assert link.get("url", "").startswith(f"{settings.server.public_base_url}/trend/")
    trend = client.get(link["url"].removeprefix(settings.server.public_base_url))
    assert trend.status_code == 200  # the snapshot behind the link was saved
    # the card log holds the card, the patient only as a hash
    store = client.app.state.store
    with store.session() as s:
        rows = s.scalars(select(CardLog)).all()
    assert {r.card_uuid for r in rows} == {c["uuid"] for c in result["cards"]}
    assert all(r.patient_hash and "lvh-pt-1042" not in r.patient_hash for r in rows)


def test_under_18_gets_one_out_of_scope_card(client: TestClient) -> None:
    body = hook_request(observations=sodium_series(126))
    body["prefetch"]["patient"] = patient(birth="2012-05-01")
    result = client.post(WORKUP, json=body).json()
    check_response(result)
    assert [c["source"]["topic"]["code"] for c in result["cards"]] == ["out-of-scope"]


@pytest.mark.parametrize("hook", ["order-select", "order-sign"])
def test_order_hooks_warn_hypotonic_fluid_with_delete_suggestion(
    client: TestClient, hook: str
) -> None:
    service = next(s for s in SERVICES.values() if s.hook == hook)
    draft = hypotonic_fluid()
    body = hook_request(hook, observations=sodium_series(129), drafts=[draft])
    response = client.post(f"/cds-services/{service.id}", json=body)
    assert response.status_code == 200, response.text
    result = response.json()
    check_response(result)
    card = next(
        c for c in result["cards"] if c["source"]["topic"]["code"] == "hypotonic-fluid-order"
    )
    deletes = [a for s in card["suggestions"] for a in s["actions"] if a["type"] == "delete"]
    assert deletes[0]["resourceId"] == f"MedicationRequest/{draft['id']}"


def test_order_select_decides_only_on_selections(client: TestClient) -> None:
    drafts = [hypotonic_fluid("fluid-a"), hypotonic_fluid("fluid-b")]
    body = hook_request(
        "order-select",
        observations=sodium_series(129),
        drafts=drafts,
        selections=["MedicationRequest/fluid-b"],
    )
    result = client.post("/cds-services/sodium-order-select", json=body).json()
    removed = [
        a["resourceId"]
        for c in result["cards"]
        for s in c.get("suggestions", [])
        for a in s["actions"]
        if a["type"] == "delete"
    ]
    assert removed == ["MedicationRequest/fluid-b"]


def test_missing_required_data_is_412(client: TestClient) -> None:
    body = hook_request(with_prefetch=False)
    response = client.post(WORKUP, json=body)
    assert response.status_code == 412
    assert "sodium" in _outcome(response)


def test_operation_outcome_for_optional_key_is_noted_on_cards(client: TestClient) -> None:
    body = hook_request(observations=sodium_series(126))
    body["prefetch"]["conditions"] = {
        "resourceType": "OperationOutcome",
        "issue": [{"severity": "error", "code": "forbidden", "diagnostics": "problem list locked"}],
    }
    result = client.post(WORKUP, json=body).json()
    check_response(result)
    assert result["cards"] and all("problem list locked" in c["detail"] for c in result["cards"])


@pytest.mark.parametrize(
    ("content", "fragment"),
    [
        (b"{not json", "not valid JSON"),
        (b"", "empty"),
        (b"[1, 2]", "JSON object"),
        (b'{"hook": NaN}', "NaN is not a JSON number"),  # RFC 8259 section 6: no NaN
        (b"[" * 100_000 + b"]" * 100_000, "nested too deeply"),
        (json.dumps({"hook": "patient-view"}).encode(), "invalid hook request"),
        (json.dumps(hook_request("order-sign")).encode(), "answers 'patient-view'"),
    ],
)
def test_bad_bodies_are_400(client: TestClient, content: bytes, fragment: str) -> None:
    response = client.post(WORKUP, content=content, headers={"content-type": "application/json"})
    assert response.status_code == 400
    assert fragment in _outcome(response)


@pytest.mark.parametrize(
    ("mutate", "fragment"),
    [
        (lambda b: b["context"].pop("patientId"), "patientId"),
        (lambda b: b["context"].update(patientId="../Patient?x=1"), "FHIR id"),
        (lambda b: b["prefetch"].update(sodium="a string"), "prefetch key 'sodium'"),
    ],
)
def test_bad_context_and_prefetch_are_400(client: TestClient, mutate, fragment: str) -> None:  # type: ignore[no-untyped-def]
    body = hook_request(observations=sodium_series(130))
    mutate(body)
    response = client.post(WORKUP, json=body)
    assert response.status_code == 400
    assert fragment in _outcome(response)


def test_order_hooks_need_draft_orders_and_known_selections(client: TestClient) -> None:
    body = hook_request("order-select", observations=sodium_series(130), drafts=[hypotonic_fluid()])
    body["context"]["selections"] = ["MedicationRequest/not-drafted"]
    response = client.post("/cds-services/sodium-order-select", json=body)
    assert response.status_code == 400 and "selections" in _outcome(response)
    body["context"]["selections"] = []  # order-select: at least the order just selected
    response = client.post("/cds-services/sodium-order-select", json=body)
    assert response.status_code == 400 and "selections" in _outcome(response)
    body["context"].pop("draftOrders")
    response = client.post("/cds-services/sodium-order-select", json=body)
    assert response.status_code == 400 and "draftOrders" in _outcome(response)


def test_unknown_service_is_404(client: TestClient) -> None:
    response = client.post("/cds-services/no-such-service", json=hook_request())
    assert response.status_code == 404
    _outcome(response)
    assert client.get("/no/such/page").status_code == 404


def test_body_over_limit_is_413_by_header_and_by_stream(client: TestClient, settings) -> None:  # type: ignore[no-untyped-def]
    limit = settings.server.max_body_bytes
    big = b'{"hook": "patient-view", "pad": "' + b"x" * limit + b'"}'
    response = client.post(WORKUP, content=big, headers={"content-type": "application/json"})
    assert response.status_code == 413
    _outcome(response)

    def chunks():  # type: ignore[no-untyped-def]
        yield big[: limit // 2]
        yield big[limit // 2 :]

    response = client.post(WORKUP, content=chunks(), headers={"content-type": "application/json"})
    assert response.status_code == 413


def test_wrong_method_is_operation_outcome(client: TestClient) -> None:
    response = client.get(WORKUP)
    assert response.status_code == 405
    _outcome(response)


def test_feedback_is_stored_and_bad_feedback_is_400(client: TestClient) -> None:
    result = client.post(WORKUP, json=hook_request(observations=sodium_series(121))).json()
    card = next(c for c in result["cards"] if c["indicator"] != "info")
    feedback = {
        "feedback": [
            {
                "card": card["uuid"],
                "outcome": "overridden",
                "overrideReason": {
                    "reason": card["overrideReasons"][0],
                    "userComment": "Repeat sample already sent",
                },
                "outcomeTimestamp": NOW.isoformat(),
            }
        ]
    }
    response = client.post(f"{WORKUP}/feedback", json=feedback)
    assert response.status_code == 200, response.text
    with client.app.state.store.session() as s:
        rows = s.scalars(select(Feedback)).all()
    assert [(r.card_uuid, r.outcome, r.unknown_card) for r in rows] == [
        (card["uuid"], "overridden", False)
    ]
    response = client.post(f"{WORKUP}/feedback", json={"feedback": "nope"})
    assert response.status_code == 400
    _outcome(response)
    assert client.post("/cds-services/nope/feedback", json=feedback).status_code == 404


def test_unexpected_failure_is_500_without_internals(client: TestClient, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    import cds_service.hooks.service as service

    def boom(*_a, **_k):  # type: ignore[no-untyped-def]
        raise RuntimeError("secret internal detail")

    monkeypatch.setattr(service, "one_per_code", boom)
    response = client.post(WORKUP, json=hook_request(observations=sodium_series(126)))
    assert response.status_code == 500
    assert "secret" not in response.text
    _outcome(response)
    assert response.headers[LOCAL_TRIAL_HEADER] and response.headers["x-request-id"]


def test_lab_results_with_osmolality_reach_the_engine(client: TestClient) -> None:
    obs = [*sodium_series(126), observation("osm-1", OSM, 255, NOW)]
    result = client.post(WORKUP, json=hook_request(observations=obs)).json()
    check_response(result)
    codes = {c["source"]["topic"]["code"] for c in result["cards"]}
    assert "hyponatremia-tonicity-unknown" not in codes  # a measured osmolality is present
    assert NA[0] == "2951-2"


def _audit_lines(caplog) -> list[dict]:  # type: ignore[no-untyped-def]
    return [r.fields for r in caplog.records if r.name == "tonicity.audit"]


def test_one_audit_line_per_hook_call_without_raw_patient_id(client: TestClient, caplog) -> None:  # type: ignore[no-untyped-def]
    caplog.set_level(logging.INFO)
    ok = client.post(WORKUP, json=hook_request(observations=sodium_series(121)))
    client.post(WORKUP, json=hook_request(with_prefetch=False))
    lines = _audit_lines(caplog)
    assert [line["status"] for line in lines] == [200, 412]
    assert set(lines[0]["finding_codes"]) == {
        c["source"]["topic"]["code"] for c in ok.json()["cards"]
    }
    assert lines[0]["service"] == "sodium-workup" and lines[0]["patient_hash"]
    assert "lvh-pt-1042" not in json.dumps(lines)


@respx.mock
def test_fhir_access_token_never_reaches_logs_or_response(client: TestClient, caplog) -> None:  # type: ignore[no-untyped-def]
    caplog.set_level(logging.DEBUG)
    token = "fhir-token-7d1e9c0b-must-stay-secret"
    respx.get(url__startswith=FHIR_BASE).respond(500, text=f"echo {token}")
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=token)
    response = client.post(WORKUP, json=body)
    assert response.status_code == 412  # the FHIR server failed: required data not available
    assert respx.calls and respx.calls.last.request.headers["authorization"] == f"Bearer {token}"
    assert token not in response.text
    logged = caplog.text + json.dumps([getattr(r, "fields", {}) for r in caplog.records])
    assert token not in logged


def test_card_log_and_feedback_on_each_database(store_url: str, settings) -> None:  # type: ignore[no-untyped-def]
    """The same hook call and feedback on SQLite and, when CI provides it, PostgreSQL."""
    from cds_service.app import create_app

    on_db = settings.model_copy(
        update={"storage": settings.storage.model_copy(update={"url": store_url})}
    )
    with TestClient(create_app(on_db)) as c:
        result = c.post(WORKUP, json=hook_request(observations=sodium_series(121))).json()
        uuids = [card["uuid"] for card in result["cards"]]
        stamp = NOW.isoformat()
        # CDS Hooks 2.0 "Feedback": acceptedSuggestions is required for an accepted outcome,
        # so cards without suggestions are reported overridden.
        feedback = {
            "feedback": [
                {
                    "card": card["uuid"],
                    "outcome": "accepted",
                    "acceptedSuggestions": [{"id": card["suggestions"][0]["uuid"]}],
                    "outcomeTimestamp": stamp,
                }
                if card.get("suggestions")
                else {"card": card["uuid"], "outcome": "overridden", "outcomeTimestamp": stamp}
                for card in result["cards"]
            ]
        }
        assert c.post(f"{WORKUP}/feedback", json=feedback).status_code == 200
        with c.app.state.store.session() as s:
            logged = {r.card_uuid for r in s.scalars(select(CardLog))}
            fed = {(r.card_uuid, r.unknown_card) for r in s.scalars(select(Feedback))}
    assert uuids and logged == set(uuids)
    assert fed == {(u, False) for u in uuids}


def test_framework_validation_errors_are_400_not_422(settings) -> None:  # type: ignore[no-untyped-def]
    """FastAPI answers parameter validation with 422; this service answers 400 with an
    OperationOutcome like every other caller error (CDS Hooks 2.0 leaves error bodies to the
    service; FHIR R4 OperationOutcome is the standard carrier)."""
    from cds_service.app import create_app

    app = create_app(settings)

    @app.get("/probe-typed")
    async def probe(n: int) -> dict[str, int]:
        return {"n": n}

    with TestClient(app) as c:
        response = c.get("/probe-typed", params={"n": "not-a-number"})
    assert response.status_code == 400
    assert "n" in _outcome(response)
