"""The card log: one row per card returned, written at response time.

Feedback joins to it by ``card_uuid``; the feedback report counts cards shown from it.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import insert
from sqlalchemy.orm import Session

from cds_service.store.database import Store, as_utc
from cds_service.store.schema import CardLog

INDICATORS = frozenset({"info", "warning", "critical"})


@dataclass(frozen=True, slots=True)
class CardLogRow:
    """What is remembered of one card: no lab value, no name, the patient only as a hash."""

    card_uuid: str
    service_id: str
    finding_code: str
    indicator: str
    patient_hash: str | None
    client_id: str | None
    created_at: datetime

    def __post_init__(self) -> None:
        for name, limit in (("card_uuid", 64), ("service_id", 100), ("finding_code", 64)):
            value = getattr(self, name)
            if not isinstance(value, str) or not value or len(value) > limit:
                raise ValueError(f"{name} must be a non-empty string of at most {limit} characters")
        if self.indicator not in INDICATORS:
            raise ValueError(f"indicator {self.indicator!r} is not one of {sorted(INDICATORS)}")
        if self.patient_hash is not None and len(self.patient_hash) > 64:
            raise ValueError("patient_hash is longer than 64 characters (not a hash?)")
        if self.created_at.tzinfo is None:
            raise ValueError("created_at must carry a time zone")


def log_cards(store: Store, rows: Iterable[CardLogRow]) -> None:
    """Write the cards of one response in one transaction (committed on return)."""
    rows = list(rows)
    if not rows:
        return
    with store.log_session() as s:
        add_cards(s, rows)


def add_cards(session: Session, rows: Iterable[CardLogRow]) -> None:
    """Insert the card-log rows in ``session``'s transaction (one multi-row INSERT, without
    the ORM's per-object bookkeeping: the rows are never read back in this session)."""
    values = [
        dict(
            card_uuid=r.card_uuid,
            service_id=r.service_id,
            finding_code=r.finding_code,
            indicator=r.indicator,
            patient_hash=r.patient_hash,
            client_id=(r.client_id or None) and r.client_id[:300],
            created_at=as_utc(r.created_at),
        )
        for r in rows
    ]
    if values:
        session.execute(insert(CardLog), values)
