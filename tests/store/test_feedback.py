"""Feedback endpoint body (HL7 CDS Hooks 2.0, "Feedback"): validation, storage, atomicity."""

from __future__ import annotations

import dataclasses
import json
from datetime import UTC, datetime

import pytest
from sqlalchemy import func, select

from cds_service.errors import UserError
from cds_service.store import feedback as feedback_module
from cds_service.store.cards import log_cards
from cds_service.store.feedback import record_feedback
from cds_service.store.schema import Feedback
from tests.store.helpers import CLIENT, SERVICE, T0, accepted, card, logged, overridden


def _rows(store) -> list[Feedback]:
    with store.session() as s:
        return list(s.scalars(select(Feedback).order_by(Feedback.id)))


def test_round_trip_of_both_outcomes(store) -> None:
    a, b = logged(store, "hypotonic-hyponatremia", "drug-associated")
    body = {
        "feedback": [
            accepted(a),
            overridden(b, "benefit-outweighs-risk", comment="Discussed with nephrology"),
        ]
    }
    assert record_feedback(store, SERVICE, body, CLIENT, T0) == 2
    first, second = _rows(store)
    assert first.outcome == "accepted" and not first.unknown_card
    assert json.loads(first.accepted_suggestions) == ["9b1f6f0e-8c1d-4c5e-9a63-2f8f1f0b7a11"]
    assert second.outcome == "overridden"
    assert second.override_reason_code == "benefit-outweighs-risk"
    assert second.override_comment == "Discussed with nephrology"
    assert second.client_id == CLIENT


def test_spec_example_body_is_accepted(store) -> None:
    """Shape of the override example in CDS Hooks 2.0 "Feedback" (values invented)."""
    (card_uuid,) = logged(store, "hypotonic-fluid-order")
    body = {
        "feedback": [
            {
                "card": card_uuid,
                "outcome": "overridden",
                "overrideReason": {
                    "reason": {
                        "code": "reason-code-provided-by-service",
                        "system": "http://example.org/cds-services/fhir/CodeSystem/override-reasons",
                    },
                    "userComment": "clinician entered comment",
                },
                "outcomeTimestamp": "2026-03-04T14:23:11Z",
            }
        ]
    }
    assert record_feedback(store, SERVICE, body, None, T0) == 1
    (row,) = _rows(store)
    assert row.outcome_at.replace(tzinfo=UTC) == datetime(2026, 3, 4, 14, 23, 11, tzinfo=UTC)


def test_feedback_for_a_card_never_returned_is_refused(store) -> None:
    """CDS Hooks 2.0.1 "Feedback": ``card`` is "The card.uuid from the CDS Hooks response";
    a uuid this service never returned (unknown, another service's, or a card the alert policy
    kept back) refuses the whole body and stores nothing."""
    (known,) = logged(store, "siadh-pattern")
    (other_service,) = logged(store, "vaptan-order", service="sodium-order-sign")
    kept_back = card("drug-associated")
    log_cards(store, [dataclasses.replace(kept_back, action="suppressed")])
    for stranger in ("not-a-card-we-issued", other_service, kept_back.card_uuid):
        body = {"feedback": [accepted(known), accepted(stranger)]}
        with pytest.raises(UserError, match=r"feedback\[1\]\.card: this service never returned"):
            record_feedback(store, SERVICE, body, CLIENT, T0)
    assert _rows(store) == []


def test_accepted_needs_suggestions_the_card_carried(store) -> None:
    """CDS Hooks 2.0.1 "Feedback": acceptedSuggestions is "Required for accepted outcomes",
    each ``id`` "The card.suggestion.uuid from the CDS Hooks response"."""
    (known,) = logged(store, "siadh-pattern")
    bare = {"card": known, "outcome": "accepted", "outcomeTimestamp": "2026-03-04T09:35:00Z"}
    with pytest.raises(UserError, match="requires acceptedSuggestions"):
        record_feedback(store, SERVICE, {"feedback": [bare]}, CLIENT, T0)
    foreign = accepted(known, suggestion="0d6c1f4e-0000-4000-8000-000000000000")
    with pytest.raises(UserError, match="carried no suggestion"):
        record_feedback(store, SERVICE, {"feedback": [foreign]}, CLIENT, T0)
    assert _rows(store) == []
    assert record_feedback(store, SERVICE, {"feedback": [accepted(known)]}, CLIENT, T0) == 1


@pytest.mark.parametrize(
    ("body", "fragment"),
    [
        ([], "JSON object"),
        ({}, "feedback"),
        ({"feedback": []}, "feedback"),
        (
            {
                "feedback": [
                    {"card": "c", "outcome": "ignored", "outcomeTimestamp": "2026-03-04T09:00:00Z"}
                ]
            },
            "outcome",
        ),
        ({"feedback": [{"card": "c", "outcome": "accepted"}]}, "outcomeTimestamp"),
        (
            {"feedback": [{"card": "c", "outcome": "accepted", "outcomeTimestamp": "yesterday"}]},
            "outcomeTimestamp",
        ),
        (
            {
                "feedback": [
                    {"card": "", "outcome": "accepted", "outcomeTimestamp": "2026-03-04T09:00:00Z"}
                ]
            },
            "card",
        ),
        (
            {"feedback": [{**accepted("c"), "overrideReason": {"userComment": "x"}}]},
            "overrideReason",
        ),
        (
            {"feedback": [{**overridden("c"), "acceptedSuggestions": [{"id": "s"}]}]},
            "acceptedSuggestions",
        ),
        (
            {
                "feedback": [
                    overridden("c", code=None) | {"overrideReason": {"reason": {"system": "s"}}}
                ]
            },
            "code",
        ),
        ({"feedback": [accepted("c")] * 501}, "feedback"),
    ],
)
def test_bad_body_is_user_error_and_stores_nothing(store, body, fragment) -> None:
    with pytest.raises(UserError, match=fragment):
        record_feedback(store, SERVICE, body, CLIENT, T0)
    assert _rows(store) == []


def test_one_bad_item_rejects_the_whole_body(store) -> None:
    (card_uuid,) = logged(store, "siadh-pattern")
    body = {"feedback": [accepted(card_uuid), {"card": card_uuid, "outcome": "maybe"}]}
    with pytest.raises(UserError, match=r"feedback\[1\]"):
        record_feedback(store, SERVICE, body, CLIENT, T0)
    assert _rows(store) == []


def test_failure_while_writing_leaves_nothing_behind(store, monkeypatch) -> None:
    """Atomicity past validation: an error on the second row rolls back the first."""
    a, b = logged(store, "siadh-pattern", "drug-associated")
    real = feedback_module._row
    calls = {"n": 0}

    def failing(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:
            raise RuntimeError("disk went away")
        return real(*args, **kwargs)

    monkeypatch.setattr(feedback_module, "_row", failing)
    with pytest.raises(RuntimeError):
        record_feedback(store, SERVICE, {"feedback": [accepted(a), accepted(b)]}, CLIENT, T0)
    with store.session() as s:
        assert s.scalar(select(func.count()).select_from(Feedback)) == 0


def test_extensions_and_unknown_members_are_ignored(store) -> None:
    (card_uuid,) = logged(store, "siadh-pattern")
    item = accepted(card_uuid) | {"extension": {"org.larkspur.ward": "4B"}}
    assert record_feedback(store, SERVICE, {"feedback": [item]}, CLIENT, T0) == 1
