"""Paged prefetch and a missing Patient: followed or fetched when allowed, said on the cards
otherwise.

Sources: CDS Hooks 2.0.1, "Prefetch Template" (a CDS Client MAY paginate prefetch results;
prefetched data MUST be equivalent to what the service would get from the FHIR server; a
single-resource read the client could not satisfy is ``null``; the service checks the
prefetch and retrieves what is missing) and "FHIR Resource Access"; HL7 FHIR R4 RESTful API,
"Paging" (``Bundle.link`` relation ``next``). A card must not read as if the record were
complete when it is not: common practice of clinical decision support.
"""

from __future__ import annotations

from datetime import timedelta

import pytest
import respx
from fastapi.testclient import TestClient

from cds_service.hooks.cards import PATIENT_NOT_CHECKED
from tests.hooks.conformance import post_cards
from tests.hooks.fhirdata import (
    FHIR_BASE,
    NOW,
    OSM,
    PATIENT_ID,
    hook_request,
    observation,
    patient,
    searchset,
    sodium_series,
)

WORKUP = "/cds-services/sodium-workup"
PAGE_2 = f"{FHIR_BASE}/Observation?patient=Patient/{PATIENT_ID}&_page=2"
READ_IN_PART = "Read in part"


def _paged_body(**kw):  # type: ignore[no-untyped-def]
    """Sodium 124 now (page one) after 131 three days ago (page two, behind ``next``)."""
    body = hook_request(observations=[observation("osm-1", OSM, 262, NOW)], **kw)
    body["prefetch"]["sodium"] = searchset(sodium_series(124), next_url=PAGE_2)
    return body


def test_paged_prefetch_without_fhir_access_is_said_on_every_card(client: TestClient) -> None:
    cards = post_cards(client, _paged_body())
    assert cards
    for card in cards:  # sodium feeds every card
        assert READ_IN_PART in card["detail"] and "sodium results" in card["detail"]


@respx.mock
def test_paged_prefetch_is_followed_on_the_fhir_server(client: TestClient) -> None:
    older = sodium_series(131, last=NOW - timedelta(days=3))
    older[0]["id"] = "na-older"
    page2 = respx.get(PAGE_2).respond(200, json=searchset(older))
    respx.route(host="fhir.larkspur-valley.example.org").respond(200, json=searchset([]))
    cards = post_cards(client, _paged_body(fhir_server=FHIR_BASE, token="t"))
    assert page2.called
    assert page2.calls.last.request.headers["authorization"] == "Bearer t"
    assert cards and not any(READ_IN_PART in c["detail"] for c in cards)


@respx.mock
def test_paged_prefetch_whose_next_page_fails_is_said(client: TestClient) -> None:
    respx.get(PAGE_2).respond(500)
    respx.route(host="fhir.larkspur-valley.example.org").respond(200, json=searchset([]))
    cards = post_cards(client, _paged_body(fhir_server=FHIR_BASE, token="t"))
    assert cards and all(READ_IN_PART in c["detail"] for c in cards)
    assert all("500" in c["detail"] for c in cards)


@respx.mock
def test_own_query_stopped_at_the_page_limit_is_said(tmp_path) -> None:  # type: ignore[no-untyped-def]
    from cds_service.app import create_app
    from cds_service.config import load_settings

    settings = load_settings(
        None,
        storage={"url": f"sqlite:///{tmp_path / 'h.db'}"},
        auth={"required": False},
        local_trial=True,
        fhir={"max_pages": 1},
    )
    body = hook_request(observations=[observation("osm-1", OSM, 262, NOW)], fhir_server=FHIR_BASE)
    del body["prefetch"]["sodium"]
    respx.get(f"{FHIR_BASE}/Observation", params={"_count": "100"}).respond(
        200, json=searchset(sodium_series(124), next_url=PAGE_2)
    )
    with TestClient(create_app(settings)) as c:
        cards = post_cards(c, body)
    assert cards and all(READ_IN_PART in c["detail"] for c in cards)
    assert all("max_pages" in c["detail"] for c in cards)


def test_medication_pages_are_said_only_on_cards_that_use_medications(client: TestClient) -> None:
    body = hook_request(observations=[observation("osm-1", OSM, 262, NOW), *sodium_series(124)])
    body["prefetch"]["medicationRequests"] = searchset([], next_url=PAGE_2)
    cards = post_cards(client, body)
    by_code = {c["source"]["topic"]["code"]: c for c in cards}
    assert "hypotonic-hyponatremia" in by_code
    assert READ_IN_PART not in by_code["hypotonic-hyponatremia"]["detail"]
    for code in ("drug-associated", "siadh-pattern"):
        if code in by_code:
            assert READ_IN_PART in by_code[code]["detail"]


@pytest.mark.parametrize("how", ["null", "absent", "other-resource", "other-patient"])
def test_patient_not_had_is_said_first_on_every_card(client: TestClient, how: str) -> None:
    body = hook_request(observations=[observation("osm-1", OSM, 262, NOW), *sodium_series(124)])
    if how == "null":
        body["prefetch"]["patient"] = None
    elif how == "absent":
        del body["prefetch"]["patient"]
    elif how == "other-resource":
        body["prefetch"]["patient"] = {"resourceType": "Practitioner", "id": "lvh-dr-ostrander"}
    else:
        body["prefetch"]["patient"] = patient("lvh-pt-0007")
    cards = post_cards(client, body)
    assert cards
    for card in cards:  # said before the numbers, not buried under them
        assert PATIENT_NOT_CHECKED in card["detail"].split("| Value |")[0].split("**Inputs**")[0]


def test_known_patient_gives_no_such_note(client: TestClient) -> None:
    body = hook_request(observations=[observation("osm-1", OSM, 262, NOW), *sodium_series(124)])
    cards = post_cards(client, body)
    assert cards and not any(PATIENT_NOT_CHECKED in c["detail"] for c in cards)


@respx.mock
@pytest.mark.parametrize("how", ["null", "absent"])
def test_patient_not_sent_is_fetched_when_allowed(client: TestClient, how: str) -> None:
    read = respx.get(f"{FHIR_BASE}/Patient/{PATIENT_ID}").respond(200, json=patient())
    body = hook_request(
        observations=[observation("osm-1", OSM, 262, NOW), *sodium_series(124)],
        fhir_server=FHIR_BASE,
        token="t",
    )
    if how == "null":
        body["prefetch"]["patient"] = None
    else:
        del body["prefetch"]["patient"]
    cards = post_cards(client, body)
    assert read.called
    assert cards and not any(PATIENT_NOT_CHECKED in c["detail"] for c in cards)


@respx.mock
def test_patient_the_server_does_not_have_is_said(client: TestClient) -> None:
    respx.get(f"{FHIR_BASE}/Patient/{PATIENT_ID}").respond(404)
    body = hook_request(
        observations=[observation("osm-1", OSM, 262, NOW), *sodium_series(124)],
        fhir_server=FHIR_BASE,
        token="t",
    )
    body["prefetch"]["patient"] = None
    cards = post_cards(client, body)
    assert cards and all(PATIENT_NOT_CHECKED in c["detail"] for c in cards)
