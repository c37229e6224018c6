"""Invented card-log history for the quality page tests (Larkspur Valley Hospital)."""

from __future__ import annotations

import random
import uuid
from datetime import UTC, datetime, timedelta

from cds_service.store.cards import CardLogRow, log_cards
from cds_service.store.feedback import record_feedback

MONDAY = datetime(2026, 2, 2, 8, 0, tzinfo=UTC)
SUGGESTION = "3c9d2f7a-1b4e-4c8a-9f21-6d5e0a7b8c90"
#: (finding code, service, indicator, cards per week, share suppressed, share silent)
PLAN = (
    ("hyponatremia-tonicity-unknown", "sodium-workup", "info", 14, 0.5, 0.0),
    ("drug-associated", "sodium-workup", "info", 9, 0.6, 0.0),
    ("endocrine-screen", "sodium-workup", "info", 6, 0.3, 1.0),
    ("correction-rate-exceeded", "sodium-workup", "critical", 3, 0.0, 0.0),
    ("hypotonic-fluid-order", "sodium-order-sign", "warning", 5, 0.2, 0.0),
)


def seed(store, weeks: int = 6, seed_value: int = 15) -> dict[str, int]:
    """Write ``weeks`` weeks of cards and feedback; returns totals by action."""
    rng = random.Random(seed_value)
    rows: list[CardLogRow] = []
    feedback: dict[str, list[dict]] = {}
    totals = {"show": 0, "suppressed": 0, "silent": 0}
    for week in range(weeks):
        for code, service, indicator, per_week, p_suppressed, p_silent in PLAN:
            for n in range(per_week + rng.randint(-2, 2)):
                at = MONDAY + timedelta(weeks=week, hours=5 * n + rng.random())
                if rng.random() < p_silent:
                    action = "silent"
                elif rng.random() < p_suppressed:
                    action = "suppressed"
                else:
                    action = "show"
                totals[action] += 1
                row = CardLogRow(
                    card_uuid=str(uuid.uuid4()),
                    service_id=service,
                    finding_code=code,
                    indicator=indicator,
                    patient_hash=f"{rng.randrange(40):032x}",
                    client_id="https://ehr.larkspur-valley.example/",
                    created_at=at,
                    action=action,
                    why=None if action == "show" else f"{action} (invented)",
                    suggestion_ids=(SUGGESTION,),
                )
                rows.append(row)
                if action != "show":
                    continue
                answer = rng.random()
                stamp = (at + timedelta(minutes=3)).isoformat()
                if answer < 0.35:
                    item = {
                        "card": row.card_uuid,
                        "outcome": "accepted",
                        "acceptedSuggestions": [{"id": SUGGESTION}],
                        "outcomeTimestamp": stamp,
                    }
                elif answer < 0.6:
                    reason = rng.choice(["already-being-managed", "not-applicable", "other"])
                    item = {
                        "card": row.card_uuid,
                        "outcome": "overridden",
                        "overrideReason": {
                            "reason": {"code": reason, "display": reason.replace("-", " ")}
                        },
                        "outcomeTimestamp": stamp,
                    }
                else:
                    continue
                feedback.setdefault(service, []).append(item)
    log_cards(store, rows)
    for service, items in feedback.items():
        record_feedback(store, service, {"feedback": items}, None, MONDAY + timedelta(weeks=weeks))
    return totals
