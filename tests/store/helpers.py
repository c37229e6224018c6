"""Small builders for store tests (invented Larkspur Valley Hospital data)."""

from __future__ import annotations

import uuid
from datetime import UTC, datetime

from cds_service.store.cards import CardLogRow, log_cards
from cds_service.store.database import Store

T0 = datetime(2026, 3, 4, 9, 30, tzinfo=UTC)
SERVICE = "sodium-workup"
CLIENT = "https://ehr.larkspur-valley.example/"
#: The one suggestion every logged test card carries.
SUGGESTION = "9b1f6f0e-8c1d-4c5e-9a63-2f8f1f0b7a11"


def card(code: str, service: str = SERVICE, indicator: str = "info") -> CardLogRow:
    return CardLogRow(
        card_uuid=str(uuid.uuid4()),
        service_id=service,
        finding_code=code,
        indicator=indicator,
        patient_hash="0" * 32,
        client_id=CLIENT,
        created_at=T0,
        suggestion_ids=(SUGGESTION,),
    )


def logged(store: Store, *codes: str, service: str = SERVICE) -> list[str]:
    rows = [card(c, service) for c in codes]
    log_cards(store, rows)
    return [r.card_uuid for r in rows]


def accepted(card_uuid: str, at: str = "2026-03-04T09:35:00Z", suggestion: str = SUGGESTION):
    return {
        "card": card_uuid,
        "outcome": "accepted",
        "acceptedSuggestions": [{"id": suggestion}],
        "outcomeTimestamp": at,
    }


def overridden(
    card_uuid: str,
    code: str | None = "already-treated",
    at: str = "2026-03-04T09:36:00Z",
    comment: str | None = None,
):
    reason: dict = {}
    if code:
        reason["reason"] = {
            "code": code,
            "system": "https://tonicity.example/override",
            "display": code.replace("-", " "),
        }
    if comment:
        reason["userComment"] = comment
    item: dict = {"card": card_uuid, "outcome": "overridden", "outcomeTimestamp": at}
    if reason:
        item["overrideReason"] = reason
    return item
