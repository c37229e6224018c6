"""Snapshot store: round trip, token strength, expiry and purge with a fixed clock."""

from __future__ import annotations

import base64
import json
from datetime import timedelta

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import select

from cds_service.clinical.thresholds import load_thresholds
from cds_service.hooks import snapshots
from cds_service.hooks.snapshots import (
    SnapshotExpired,
    SnapshotNotFound,
    load_snapshot,
    purge_expired,
    save_snapshot,
    snapshot_payload,
)
from cds_service.store import Store
from cds_service.store.schema import Snapshot
from tests.web.conftest import NOW, SODIUM, make_context, make_findings


def _payload() -> dict:
    return snapshot_payload(make_context(), make_findings(), load_thresholds())


def test_round_trip_returns_the_payload(store: Store) -> None:
    payload = _payload()
    token = save_snapshot(store, payload, ttl_hours=12, now=NOW)
    assert load_snapshot(store, token, NOW + timedelta(hours=1)) == payload


def test_token_has_at_least_128_bits_and_only_its_hash_is_stored(store: Store) -> None:
    tokens = {save_snapshot(store, {"n": i}, ttl_hours=1, now=NOW) for i in range(50)}
    assert len(tokens) == 50
    for token in tokens:
        raw = base64.urlsafe_b64decode(token + "=" * (-len(token) % 4))
        assert len(raw) * 8 >= 128  # the floor: 128 bits of randomness
        assert token.replace("-", "").replace("_", "").isalnum()  # URL-safe, nothing to escape
    with store.session() as s:
        rows = s.scalars(select(Snapshot)).all()
        stored = {r.token_hash for r in rows} | {r.payload for r in rows}
    assert not tokens & stored
    assert {snapshots.token_hash(t) for t in tokens} <= stored


def test_unknown_and_malformed_tokens_are_not_found(store: Store) -> None:
    save_snapshot(store, {"n": 1}, ttl_hours=1, now=NOW)
    for token in ["", "x", "A" * 43, "A" * 5000]:
        with pytest.raises(SnapshotNotFound):
            load_snapshot(store, token, NOW)


def test_expiry_is_exact_at_the_ttl(store: Store) -> None:
    token = save_snapshot(store, {"n": 1}, ttl_hours=12, now=NOW)
    assert load_snapshot(store, token, NOW + timedelta(hours=12) - timedelta(seconds=1))
    with pytest.raises(SnapshotExpired):
        load_snapshot(store, token, NOW + timedelta(hours=12))


def test_purge_drops_expired_payloads_keeps_live_ones(store: Store) -> None:
    short = save_snapshot(store, {"n": "short"}, ttl_hours=1, now=NOW)
    medium = save_snapshot(store, {"n": "medium"}, ttl_hours=2, now=NOW)
    long = save_snapshot(store, {"n": "long"}, ttl_hours=24, now=NOW)
    later = NOW + timedelta(hours=3)
    assert purge_expired(store, later) == 2
    assert purge_expired(store, later) == 0  # idempotent
    with store.session() as s:
        payloads = {r.payload for r in s.scalars(select(Snapshot)).all()}
    assert payloads == {"", json.dumps({"n": "long"}, separators=(",", ":"))}
    for token in (short, medium):  # a purged link still says "expired", not "unknown"
        with pytest.raises(SnapshotExpired):
            load_snapshot(store, token, later)
    assert load_snapshot(store, long, later) == {"n": "long"}
    # After the tombstone period even the bare row is gone.
    much_later = NOW + timedelta(days=snapshots.TOMBSTONE_DAYS, hours=2)
    purge_expired(store, much_later)
    with pytest.raises(SnapshotNotFound):
        load_snapshot(store, short, much_later)


def test_save_purges_opportunistically(store: Store) -> None:
    save_snapshot(store, {"n": 1}, ttl_hours=1, now=NOW)
    save_snapshot(store, {"n": 2}, ttl_hours=1, now=NOW + timedelta(hours=5))
    with store.session() as s:
        assert sorted(r.payload for r in s.scalars(select(Snapshot)).all()) == ["", '{"n":2}']


def test_ttl_must_be_positive(store: Store) -> None:
    with pytest.raises(ValueError):
        save_snapshot(store, {}, ttl_hours=0, now=NOW)


json_values = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(-(10**6), 10**6)
    | st.text(max_size=20)
    | st.floats(allow_nan=False, allow_infinity=False),
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=4)
    ),
    max_leaves=20,
)


@settings(
    max_examples=40, suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None
)
@given(payload=st.dictionaries(st.text(max_size=10), json_values, max_size=6))
def test_any_json_payload_round_trips(store: Store, payload: dict) -> None:
    """Law: load(save(p)) == p for every JSON object (round trip)."""
    token = save_snapshot(store, payload, ttl_hours=1, now=NOW)
    assert load_snapshot(store, token, NOW) == payload


def test_payload_carries_no_identifier_and_every_sodium(store: Store) -> None:
    ctx = make_context()
    payload = _payload()
    text = json.dumps(payload)
    assert ctx.patient.patient_id not in text
    assert "Observation/" not in text  # no record ids either
    assert [p["value"] for p in payload["sodium"]] == [v for _, v, _, _ in SODIUM]
    assert [p["note"] for p in payload["sodium"]][1:3] == ["preliminary", "whole blood"]
    assert {m["kind"] for m in payload["markers"]} == {
        "osmolality",
        "urine_osmolality",
        "urine_sodium",
    }
    labels = [s["label"] for s in payload["starts"]]
    assert "Paracetamol" not in labels  # no start time, nothing to draw
    assert "Dextrose 5% (draft)" in labels
    hctz = next(s for s in payload["starts"] if s["label"].startswith("Hydrochlorothiazide"))
    assert hctz["associated"]  # cited by the drug-associated finding
    assert [f["code"] for f in payload["findings"]] == [f.code for f in make_findings()]
    json.dumps(payload, allow_nan=False)  # JSON-able as it stands


def test_band_starts_at_the_episode_start(store: Store) -> None:
    limits = _payload()["limits"]
    # The episode starts at the lowest sodium (118 mmol/L, the first result in the fixture).
    assert limits["start_value"] == min(v for _, v, _, _ in SODIUM)
    assert limits["episode_start"] == _payload()["sodium"][0]["time"]
    assert 0 < limits["limit_24h"] <= limits["limit_48h"]


def test_known_associated_drug_is_flagged_without_a_citing_finding() -> None:
    """Hydrochlorothiazide is a thiazide, a classic cause of hyponatremia (Spasovski 2014,
    Eur J Endocrinol, from memory): drug_classes.toml knows it even when no finding cites it."""
    payload = snapshot_payload(make_context(), [], load_thresholds())
    flags = {s["label"]: s["associated"] for s in payload["starts"]}
    assert flags["Hydrochlorothiazide 25 mg tablet"] is True


def test_the_hook_path_purges_at_most_once_a_minute_of_evaluation_time(tmp_path) -> None:
    # Housekeeping rate (common practice): expired rows are refused on reading, so purging on
    # every hook call only costs; once a minute of evaluation time keeps the table small.
    one, other = Store(f"sqlite:///{tmp_path / 'a.db'}"), Store(f"sqlite:///{tmp_path / 'b.db'}")
    t0 = NOW
    assert snapshots.purge_due(one, t0)
    assert not snapshots.purge_due(one, t0 + timedelta(seconds=59))
    assert snapshots.purge_due(other, t0 + timedelta(seconds=59))  # each store keeps its own
    assert snapshots.purge_due(one, t0 + timedelta(seconds=60))
    assert snapshots.purge_due(one, t0)  # an earlier evaluation time (a replay): purge again
    assert not snapshots.purge_due(one, t0 + timedelta(seconds=1))
    one.close()
    other.close()
