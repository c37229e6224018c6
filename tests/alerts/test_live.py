"""The alert policy in the live service: one hook call after another on one store (SQLite, and
PostgreSQL when ``TONICITY_TEST_POSTGRES_URL`` is set), with the clock under the test's control.

Issue 15 "Done when": five chart opens in an hour show each unchanged non-critical card once;
a new sodium result shows the updated card at once; a critical card keeps showing until
overridden; an override quiets it for its bounded time; a silent service returns no cards and
logs what it would have shown, and the report counts it.
"""

from __future__ import annotations

import asyncio
from datetime import timedelta

import pytest
from sqlalchemy import select

from cds_service.alerts.live import quiet_maker, settings_for
from cds_service.clinical.thresholds import load_thresholds
from cds_service.config import load_settings
from cds_service.errors import UserError
from cds_service.hooks.registry import SERVICES
from cds_service.hooks.service import evaluate
from cds_service.store.feedback import feedback_report, record_feedback
from cds_service.store.report import ReportFilter
from cds_service.store.schema import AlertQuiet, CardLog
from tests.hooks.fhirdata import NA, NOW, hook_request, observation, sodium_series

THRESHOLDS = load_thresholds({})
WORKUP = "sodium-workup"


def settings_on(url: str, **alerts):
    return load_settings(
        None,
        storage={"url": url},
        auth={"required": False},
        local_trial=True,
        alerts=alerts,
    )


def call(store, settings, body, minutes: float = 0, replay_call: str | None = None) -> dict:
    outcome = asyncio.run(
        evaluate(
            body,
            settings=settings,
            thresholds=THRESHOLDS,
            now=NOW + timedelta(minutes=minutes),
            store=store,
            service_id=WORKUP,
            replay_call=replay_call,
        )
    )
    return outcome.response


def codes(response: dict) -> list[str]:
    return [c["source"]["topic"]["code"] for c in response["cards"]]


def log(store) -> list[CardLog]:
    with store.session() as s:
        return list(s.scalars(select(CardLog).order_by(CardLog.id)))


def override(store, settings, card: dict, reason: str | None, minutes: float = 0) -> None:
    item: dict = {
        "card": card["uuid"],
        "outcome": "overridden",
        "outcomeTimestamp": (NOW + timedelta(minutes=minutes)).isoformat(),
    }
    if reason:
        item["overrideReason"] = {"reason": {"code": reason, "system": "x", "display": reason}}
    record_feedback(
        store,
        WORKUP,
        {"feedback": [item]},
        None,
        NOW + timedelta(minutes=minutes),
        quiet_maker(settings_for(settings, SERVICES)),
    )


MODERATE = hook_request(observations=sodium_series(127))  # non-critical work-up cards
PROFOUND = hook_request(observations=sodium_series(117))  # profound: critical (Spasovski 2014)


def test_five_opens_in_an_hour_show_each_unchanged_card_once(store, store_url) -> None:
    settings = settings_on(store_url)
    seen: list[list[str]] = [codes(call(store, settings, MODERATE, m)) for m in (0, 12, 24, 36, 48)]
    assert seen[0] and all(c == [] for c in seen[1:]), seen
    rows = log(store)
    for code in seen[0]:
        actions = [r.action for r in rows if r.finding_code == code]
        assert actions == ["show"] + ["suppressed"] * 4
    why = {r.why for r in rows if r.action == "suppressed"}
    assert all(w.startswith("repeat: shown") for w in why)


def test_a_new_sodium_result_shows_the_updated_card_at_once(store, store_url) -> None:
    settings = settings_on(store_url)
    first = call(store, settings, MODERATE, 0)
    assert codes(call(store, settings, MODERATE, 10)) == []
    newer = hook_request(
        observations=[
            *sodium_series(127),
            observation("na-new", NA, 129, NOW + timedelta(minutes=15)),
        ]
    )
    again = call(store, settings, newer, 20)
    assert set(codes(again)) & set(codes(first))
    values = {
        v["value"]
        for c in again["cards"]
        for v in (c.get("extension") or {}).get("tonicity.values", [])
        if v["name"] == "serum_sodium"
    }
    assert 129 in values


def test_critical_card_shows_until_overridden_then_quiet_for_its_bounded_time(
    store, store_url
) -> None:
    settings = settings_on(store_url)
    responses = [call(store, settings, PROFOUND, m) for m in (0, 10, 20, 30, 40)]
    critical = [[c for c in r["cards"] if c["indicator"] == "critical"] for r in responses]
    assert all(len(c) == 1 for c in critical), "a critical card shows on every open"
    card = critical[-1][0]
    offered = {r["code"]: r["display"] for r in card["overrideReasons"]}
    assert "hide this card for 4 h" in offered["already-being-managed"]  # capped, and says so
    override(store, settings, card, "already-being-managed", minutes=41)
    code = card["source"]["topic"]["code"]
    cap = settings_for(settings).critical_quiet_max
    just_before = call(store, settings, PROFOUND, 41 + cap.total_seconds() / 60 - 1)
    assert code not in codes(just_before)
    after = call(store, settings, PROFOUND, 41 + cap.total_seconds() / 60)
    assert code in codes(after), "re-evaluated and shown again once the quiet ends"
    with store.session() as s:
        (quiet,) = s.scalars(select(AlertQuiet))
    assert quiet.reason_code == "already-being-managed" and quiet.finding_code == code


def test_override_without_a_quieting_reason_does_not_quiet_a_critical_card(
    store, store_url
) -> None:
    settings = settings_on(store_url)
    card = next(c for c in call(store, settings, PROFOUND)["cards"] if c["indicator"] == "critical")
    override(store, settings, card, None, minutes=1)
    override(store, settings, card, "other", minutes=2)
    assert card["source"]["topic"]["code"] in codes(call(store, settings, PROFOUND, 3))


def test_silent_service_returns_no_cards_and_logs_what_it_would_show(store, store_url) -> None:
    settings = settings_on(
        store_url, silent_services=[WORKUP], unsafe_allow_silencing_critical=True
    )
    assert call(store, settings, PROFOUND) == {"cards": []}
    rows = log(store)
    assert rows and {r.action for r in rows} == {"silent"}
    assert all("would have been shown" in r.why for r in rows)
    assert call(store, settings, PROFOUND, 5) == {"cards": []}
    report = feedback_report(store)
    assert sum(f.silent for f in report.findings) == len(log(store))
    assert sum(f.shown for f in report.findings) == 0


def test_per_user_scope_shows_each_clinician_once(store, store_url) -> None:
    settings = settings_on(store_url, scope="patient-and-user")
    other = dict(MODERATE, context={**MODERATE["context"], "userId": "Practitioner/lvh-dr-okafor"})
    assert codes(call(store, settings, MODERATE, 0))
    assert codes(call(store, settings, other, 5)), "another clinician sees it"
    assert codes(call(store, settings, MODERATE, 10)) == []
    assert codes(call(store, settings, other, 15)) == []


def test_replay_calls_are_never_suppressed_and_left_out_of_figures(store, store_url) -> None:
    settings = settings_on(store_url)
    live = codes(call(store, settings, MODERATE, 0))
    assert codes(call(store, settings, MODERATE, 1, replay_call="r1")) == live
    assert codes(call(store, settings, MODERATE, 2, replay_call="r2")) == live
    assert codes(call(store, settings, MODERATE, 3)) == []  # replay did not reset anything
    shown = sum(f.shown for f in feedback_report(store).findings)
    assert shown == len(live)
    with_replay = feedback_report(store, ReportFilter(include_replay=True))
    assert sum(f.shown for f in with_replay.findings) == 3 * len(live)


def test_feedback_on_a_suppressed_card_is_refused(store, store_url) -> None:
    settings = settings_on(store_url)
    call(store, settings, MODERATE, 0)
    call(store, settings, MODERATE, 5)
    kept = next(r for r in log(store) if r.action == "suppressed")
    with pytest.raises(UserError, match="never returned"):
        override(store, settings, {"uuid": kept.card_uuid}, None, 6)


def test_the_store_reads_the_history_cut_as_the_policy_cuts_it(store, store_url) -> None:
    """store.cards.recent groups in the database what alerts.policy.latest_per_kind groups in
    Python: the same rows come back (a chart opened many times gives one row per kind), on
    SQLite and PostgreSQL. Replay, suppressed and out-of-scope rows are never history."""
    import random

    from cds_service.alerts.live import split
    from cds_service.alerts.policy import Shown, latest_per_kind
    from cds_service.store.cards import CardLogRow, Scope, log_cards, recent

    rng = random.Random(17)  # fixed: the same rows on both databases
    rows, history = [], []
    for i in range(300):
        at = NOW + timedelta(minutes=rng.randint(-48 * 60, 20))
        action = rng.choice(("show", "show", "silent", "suppressed"))
        row = CardLogRow(
            card_uuid=f"card-{i}",
            service_id=rng.choice((WORKUP, WORKUP, "sodium-orders")),
            finding_code=rng.choice(("hypotonic-hyponatremia", "drug-associated")),
            indicator=rng.choice(("info", "warning")),
            patient_hash=rng.choice(("p1", "p1", "p2")),
            client_id=None,
            created_at=at,
            action=action,
            inputs_digest=rng.choice(("d1", "d2")),
            would_show=action == "silent" and rng.random() < 0.5,
            replay_call="r1" if rng.random() < 0.1 else None,
        )
        rows.append(row)
        counts = row.action == "show" or row.would_show
        if row.patient_hash == "p1" and row.service_id == WORKUP and counts and not row.replay_call:
            if at >= NOW - timedelta(hours=24):
                history.append(
                    Shown(row.finding_code, row.indicator, row.inputs_digest, at, row.would_show)
                )
    log_cards(store, rows)
    scope = Scope("p1", WORKUP)
    with store.engine.connect() as conn:
        read = recent(conn, scope, since=NOW - timedelta(hours=24), now=NOW)
    got, quiets = split(read)
    expected = latest_per_kind(history, NOW)
    assert quiets == []
    assert sorted(got, key=repr) == sorted(expected, key=repr)
    assert len(got) < len(history)  # cut, not the whole window
