"""Single-use JWT ids: same store, two stores on one database, and a real race between them."""

from __future__ import annotations

import threading
import uuid
from concurrent.futures import ThreadPoolExecutor
from datetime import timedelta

from sqlalchemy import func, select

from cds_service.store import Store
from cds_service.store.schema import SeenToken
from cds_service.store.tokens import purge_expired, remember_jti
from tests.store.helpers import CLIENT, T0

EXP = T0 + timedelta(minutes=5)


def test_second_use_refused(store) -> None:
    jti = str(uuid.uuid4())
    assert remember_jti(store, CLIENT, jti, EXP, "larkspur-main", T0) is True
    assert remember_jti(store, CLIENT, jti, EXP, "larkspur-main", T0) is False


def test_same_jti_other_issuer_is_another_token(store) -> None:
    jti = str(uuid.uuid4())
    assert remember_jti(store, CLIENT, jti, EXP, None, T0)
    assert remember_jti(store, "https://other-ehr.example/", jti, EXP, None, T0)


def test_tenant_recorded(store) -> None:
    jti = str(uuid.uuid4())
    remember_jti(store, CLIENT, jti, EXP, "larkspur-east", T0)
    with store.session() as s:
        assert s.scalar(select(SeenToken.tenant).where(SeenToken.jti == jti)) == "larkspur-east"


def test_id_may_return_after_first_token_expired(store) -> None:
    jti = str(uuid.uuid4())
    assert remember_jti(store, CLIENT, jti, EXP, None, T0)
    later = EXP + timedelta(seconds=1)
    assert remember_jti(store, CLIENT, jti, later + timedelta(minutes=5), None, later)
    assert not remember_jti(store, CLIENT, jti, later + timedelta(minutes=5), None, later)


def test_purge_expired_keeps_live_ids(store) -> None:
    for minutes in (1, 2, 10):
        remember_jti(store, CLIENT, str(uuid.uuid4()), T0 + timedelta(minutes=minutes), None, T0)
    assert purge_expired(store, T0 + timedelta(minutes=5)) == 2
    with store.session() as s:
        assert s.scalar(select(func.count()).select_from(SeenToken)) == 1


def test_replay_seen_by_another_replica(store_url: str) -> None:
    a, b = Store(store_url), Store(store_url)
    try:
        jti = str(uuid.uuid4())
        assert remember_jti(a, CLIENT, jti, EXP, None, T0)
        assert not remember_jti(b, CLIENT, jti, EXP, None, T0)
    finally:
        a.close()
        b.close()


def test_concurrent_inserts_from_two_stores_admit_each_id_once(store_url: str) -> None:
    """Two replicas race on the same 40 ids: the unique constraint lets exactly one win each."""
    a, b = Store(store_url), Store(store_url)
    ids = [str(uuid.uuid4()) for _ in range(40)]
    start = threading.Barrier(2)

    def run(store: Store) -> list[bool]:
        start.wait()
        return [remember_jti(store, CLIENT, jti, EXP, None, T0) for jti in ids]

    try:
        with ThreadPoolExecutor(2) as pool:
            ra, rb = pool.map(run, (a, b))
    finally:
        a.close()
        b.close()
    assert all(x != y for x, y in zip(ra, rb, strict=True))  # exactly one True per id
