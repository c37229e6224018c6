"""Card log: what is stored per card, and what is refused before it reaches the database."""

from __future__ import annotations

from dataclasses import replace
from datetime import datetime

import pytest
from sqlalchemy import select

from cds_service.store.cards import CardLogRow, log_cards
from cds_service.store.database import as_utc
from cds_service.store.schema import CardLog
from tests.store.helpers import T0, card


def test_cards_round_trip(store) -> None:
    rows = [card("hypotonic-hyponatremia", indicator="warning"), card("siadh-pattern")]
    log_cards(store, rows)
    with store.session() as s:
        stored = {c.card_uuid: c for c in s.scalars(select(CardLog))}
    assert set(stored) == {r.card_uuid for r in rows}
    first = stored[rows[0].card_uuid]
    assert (first.finding_code, first.indicator, first.service_id) == (
        "hypotonic-hyponatremia",
        "warning",
        "sodium-workup",
    )
    assert as_utc(first.created_at) == T0  # SQLite keeps no zone: stored as UTC


def test_empty_batch_writes_nothing(store) -> None:
    log_cards(store, [])
    with store.session() as s:
        assert s.scalars(select(CardLog)).first() is None


@pytest.mark.parametrize(
    "change",
    [
        {"indicator": "urgent"},
        {"card_uuid": ""},
        {"finding_code": "x" * 65},
        {"created_at": datetime(2026, 3, 4, 9, 30)},  # no zone
        {"patient_hash": "p" * 65},
    ],
)
def test_bad_rows_refused_when_built(change) -> None:
    with pytest.raises(ValueError):
        replace(card("siadh-pattern"), **change)


def test_row_is_typed_constructor() -> None:
    with pytest.raises(ValueError, match="indicator"):
        CardLogRow("u", "sodium-workup", "siadh-pattern", "loud", None, None, T0)
