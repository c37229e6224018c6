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


def test_hook_records_queue_on_one_writer_thread_in_arrival_order(tmp_path) -> None:
    # SQLite takes one writer at a time (SQLite documentation, "File Locking And Concurrency
    # In SQLite Version 3"); Store.log_writer queues this process's hook-call records on one
    # thread so they never wait on each other's lock. Closing the store writes what is queued.
    import threading

    from cds_service.store import Store

    store = Store(f"sqlite:///{tmp_path / 'log.db'}")
    names = {store.log_writer.submit(lambda: threading.current_thread().name).result()}
    order: list[int] = []
    for i in range(200):
        store.log_writer.submit(order.append, i)
    store.close()
    assert len(names) == 1 and next(iter(names)).startswith("tonicity-log")
    assert order == list(range(200))
