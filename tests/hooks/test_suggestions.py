"""Suggested orders are complete FHIR R4 ServiceRequests; links and source pages per response.

Sources: HL7 FHIR R4 ServiceRequest (elements ``id``, ``status``, ``intent``, ``subject``,
``encounter``, ``authoredOn``, ``requester`` and its allowed target types), validated with the
fhir.resources R4B models (reference library); CDS Hooks 2.0.1, "Suggestion"
(``isRecommended``: which of several suggestions is recommended), "Source" (``url``: learn
more about the source of the information on the card) and "Link"; the hook context fields
``userId`` and ``encounterId`` of patient-view 2.0 (``userId`` in the form
``[ResourceType]/[id]``).
"""

from __future__ import annotations

from datetime import datetime

import pytest
from fastapi.testclient import TestClient
from fhir.resources.R4B.servicerequest import ServiceRequest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte
from cds_service.fhir.builders import OrderContext, service_request
from tests.hooks.conformance import post_cards
from tests.hooks.fhirdata import NOW, OSM, hook_request, observation, sodium_series

WORKUP = "/cds-services/sodium-workup"


def _actions(cards: list[dict]) -> list[dict]:
    return [
        a for c in cards for s in c.get("suggestions", []) for a in s["actions"] if "resource" in a
    ]


def test_suggested_orders_carry_encounter_requester_time_and_id(client: TestClient) -> None:
    body = hook_request(observations=sodium_series(126))  # no osmolality: tests are offered
    body["context"]["encounterId"] = "lvh-enc-5521"
    actions = _actions(post_cards(client, body))
    assert actions
    ids = set()
    for action in actions:
        sr = action["resource"]
        ServiceRequest.model_validate(sr)  # raises when not a valid R4 ServiceRequest
        assert sr["encounter"] == {"reference": "Encounter/lvh-enc-5521"}
        assert sr["requester"] == {"reference": "Practitioner/lvh-dr-ostrander"}
        assert sr["subject"] == {"reference": "Patient/lvh-pt-1042"}
        assert datetime.fromisoformat(sr["authoredOn"]).tzinfo is not None
        ids.add(sr["id"])
    assert len(ids) == len(actions)  # one id per suggested resource


def test_without_encounter_the_order_has_none(client: TestClient) -> None:
    actions = _actions(post_cards(client, hook_request(observations=sodium_series(126))))
    assert actions and all("encounter" not in a["resource"] for a in actions)


@pytest.mark.parametrize(
    ("user", "requester"),
    [
        ("Practitioner/123", {"reference": "Practitioner/123"}),
        ("PractitionerRole/r-1", {"reference": "PractitionerRole/r-1"}),
        ("Patient/p", {"reference": "Patient/p"}),
        ("Location/x", None),  # not a type ServiceRequest.requester may reference
        ("Practitioner/../x", None),
        ("123", None),
    ],
)
def test_requester_only_from_a_user_reference_of_an_allowed_type(
    user: str, requester: dict | None
) -> None:
    order = OrderContext("lvh-pt-1042", NOW, user_id=user)
    sr = service_request(Analyte.OSMOLALITY, order, "Hyponatremia work-up")
    assert sr.get("requester") == requester
    ServiceRequest.model_validate(sr)


@given(
    encounter=st.from_regex(r"[A-Za-z0-9\-.]{1,64}", fullmatch=True),
    analyte=st.sampled_from([Analyte.OSMOLALITY, Analyte.URINE_SODIUM, Analyte.TSH]),
)
def test_every_built_order_validates(encounter: str, analyte: Analyte) -> None:
    """Law: whatever FHIR id the encounter has, the order is a valid R4 ServiceRequest."""
    order = OrderContext("lvh-pt-1042", NOW, encounter_id=encounter, user_id="Practitioner/1")
    sr = service_request(analyte, order, "Hyponatremia work-up")
    ServiceRequest.model_validate(sr)
    assert ("encounter" in sr) is (encounter not in (".", ".."))


def test_one_suggestion_is_recommended_where_a_card_offers_several(client: TestClient) -> None:
    cards = post_cards(client, hook_request(observations=sodium_series(126)))
    offered = [c for c in cards if len(c.get("suggestions", [])) > 1]
    assert offered, "the tonicity-unknown card offers several tests"
    for card in offered:
        recommended = [s for s in card["suggestions"] if s.get("isRecommended")]
        assert len(recommended) == 1
        assert card["selectionBehavior"] == "any"
    for card in cards:
        if len(card.get("suggestions", [])) == 1:
            assert "isRecommended" not in card["suggestions"][0]


def test_source_url_is_the_service_page_of_the_finding(client: TestClient) -> None:
    cards = post_cards(client, hook_request(observations=sodium_series(126)))
    assert cards
    for card in cards:
        code = card["source"]["topic"]["code"]
        url = card["source"]["url"]
        assert url == f"https://cds.larkspur-valley.example.org/findings/{code}"
        page = client.get(f"/findings/{code}")
        assert page.status_code == 200 and code in page.text
        assert "Decision support for licensed clinicians" in page.text


def test_trend_link_is_offered_once_per_response(client: TestClient) -> None:
    obs = [observation("osm-1", OSM, 262, NOW), *sodium_series(118, 121, 126, 130)]
    cards = post_cards(client, hook_request(observations=obs))
    assert len(cards) > 1
    with_link = [c for c in cards if any("/trend/" in link["url"] for link in c.get("links", []))]
    assert len(with_link) == 1
    codes = {c["source"]["topic"]["code"] for c in cards}
    owner = with_link[0]["source"]["topic"]["code"]
    if "correction-rate-exceeded" in codes:  # the trend is the evidence of that card
        assert owner == "correction-rate-exceeded"
    else:
        assert owner == "hypotonic-hyponatremia"
