"""Feedback report: counts and rates per finding code; unknown-card feedback apart."""

from __future__ import annotations

import json
import uuid
from datetime import UTC, datetime, timedelta

from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.cli import main
from cds_service.store import Store
from cds_service.store.cards import CardLogRow, log_cards
from cds_service.store.feedback import feedback_report, record_feedback
from cds_service.store.schema import Feedback
from tests.store.helpers import CLIENT, SERVICE, SUGGESTION, T0, accepted, logged, overridden


def test_report_on_known_scenario(store) -> None:
    # hypotonic: 4 shown; one accepted, two overridden (two reasons), one never answered.
    h1, h2, h3, _h4 = logged(store, *["hypotonic-hyponatremia"] * 4)
    # drug: 1 shown, overridden at 09:36 and accepted later at 09:50 -> counts as accepted.
    (d1,) = logged(store, "drug-associated")
    items = [
        accepted(h1),
        overridden(h2, "already-treated"),
        overridden(h3, "not-applicable"),
        overridden(d1, "already-treated", at="2026-03-04T09:36:00Z"),
        accepted(d1, at="2026-03-04T09:50:00Z"),
    ]
    record_feedback(store, SERVICE, {"feedback": items}, CLIENT, T0)
    # Feedback flagged unknown_card before it was checked against the card log (now refused).
    with store.session() as s:
        for n, outcome in enumerate(("accepted", "overridden")):
            s.add(
                Feedback(
                    card_uuid=f"card-from-elsewhere-{n}",
                    service_id=SERVICE,
                    outcome=outcome,
                    received_at=T0,
                    unknown_card=True,
                )
            )
    report = feedback_report(store)
    by_code = {f.finding_code: f for f in report.findings}
    hypo = by_code["hypotonic-hyponatremia"]
    assert (hypo.shown, hypo.accepted, hypo.overridden, hypo.ignored) == (4, 1, 2, 1)
    assert hypo.acceptance_rate == 0.25 and hypo.override_rate == 0.5
    assert sorted((r.code, r.count) for r in hypo.override_reasons) == [
        ("already-treated", 1),
        ("not-applicable", 1),
    ]
    drug = by_code["drug-associated"]
    assert (drug.shown, drug.accepted, drug.overridden, drug.override_reasons) == (1, 1, 0, ())
    assert report.unknown_card_feedback == {"accepted": 1, "overridden": 1}
    text = report.to_text()
    assert "hypotonic-hyponatremia" in text and "25.0" in text and "unknown cards" in text
    data = json.loads(report.to_json())
    assert data["unknown_card_feedback"]["total"] == 2


def test_override_without_coded_reason_is_counted(store) -> None:
    (c,) = logged(store, "vaptan-order")
    record_feedback(
        store, SERVICE, {"feedback": [overridden(c, code=None, comment="no")]}, None, T0
    )
    (f,) = feedback_report(store).findings
    assert [(r.code, r.count) for r in f.override_reasons] == [("(no reason given)", 1)]


def test_empty_store_reports_nothing(store) -> None:
    report = feedback_report(store)
    assert report.findings == () and report.unknown_card_total == 0
    assert "No cards" in report.to_text()


CODES = ["siadh-pattern", "drug-associated", "vaptan-order"]
events = st.lists(
    st.tuples(st.integers(0, 11), st.sampled_from(["accepted", "overridden"]), st.integers(0, 50)),
    max_size=30,
)


def _row(code: str, day: int, **fields) -> CardLogRow:
    return CardLogRow(
        str(uuid.uuid4()), SERVICE, code, "info", None, None, T0 + timedelta(days=day), **fields
    )


@settings(max_examples=40, deadline=None)
@given(
    cards=st.lists(st.sampled_from(CODES), min_size=1, max_size=12),
    events=events,
    kept=st.lists(
        st.tuples(
            st.sampled_from(CODES), st.sampled_from(["suppressed", "silent"]), st.integers(0, 20)
        ),
        max_size=10,
    ),
    days=st.lists(st.integers(0, 20), min_size=12, max_size=12),
)
def test_report_laws(
    cards: list[str],
    events: list[tuple[int, str, int]],
    kept: list[tuple[str, str, int]],
    days: list[int],
) -> None:
    """Laws: accepted + overridden + ignored == shown per code; each card counts once, by its
    latest feedback; reason counts add up to the overridden count; evaluated == shown +
    suppressed + silent; the weeks add up to the totals (our counting rules)."""
    store = Store("sqlite://")
    try:
        rows = [
            _row(code, day, suggestion_ids=(SUGGESTION,))
            for code, day in zip(cards, days, strict=False)
        ]
        back = [_row(code, day, action=action) for code, action, day in kept]
        log_cards(store, rows + back)
        latest: dict[str, tuple[int, str]] = {}
        items = []
        for index, outcome, minute in events:
            if index >= len(rows):
                continue
            at = (T0 + timedelta(minutes=minute)).isoformat()
            uuid_ = rows[index].card_uuid
            items.append(accepted(uuid_, at) if outcome == "accepted" else overridden(uuid_, at=at))
            if uuid_ not in latest or minute >= latest[uuid_][0]:
                latest[uuid_] = (minute, outcome)
        if items:
            record_feedback(store, SERVICE, {"feedback": items}, None, T0)
        report = feedback_report(store)
    finally:
        store.close()
    assert sum(f.shown for f in report.findings) == len(rows)
    assert sum(f.evaluated for f in report.findings) == len(rows) + len(kept)
    assert sum(f.suppressed for f in report.findings) == sum(a == "suppressed" for _, a, _ in kept)
    for f in report.findings:
        assert f.accepted + f.overridden + f.ignored == f.shown
        assert f.evaluated == f.shown + f.suppressed + f.silent
        assert sum(r.count for r in f.override_reasons) == f.overridden
        weeks = [w for w in report.weeks if w.finding_code == f.finding_code]
        for name in ("evaluated", "shown", "suppressed", "silent", "accepted", "overridden"):
            assert sum(getattr(w, name) for w in weeks) == getattr(f, name)
    for w in report.weeks:  # weeks start on a Monday (ISO 8601 week, our counting rule)
        assert datetime.fromisoformat(w.week).weekday() == 0
    # Ties in time are broken by arrival order, which `latest` mirrors with `>=`.
    want_accepted = sum(1 for _, o in latest.values() if o == "accepted")
    assert sum(f.accepted for f in report.findings) == want_accepted


def test_feedback_report_command(tmp_path, capsys) -> None:
    db = tmp_path / "report.db"
    store = Store(f"sqlite:///{db}")
    (c,) = logged(store, "endocrine-screen")
    record_feedback(store, SERVICE, {"feedback": [accepted(c)]}, None, datetime.now(UTC))
    store.close()
    config = tmp_path / "tonicity.toml"
    config.write_text(f'[storage]\nurl = "sqlite:///{db.as_posix()}"\n', encoding="utf-8")
    assert main(["feedback-report", "--config", str(config), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["findings"][0]["finding_code"] == "endocrine-screen"
    assert data["findings"][0]["acceptance_rate"] == 1.0
    assert main(["feedback-report", "--config", str(config)]) == 0
    assert "endocrine-screen" in capsys.readouterr().out


def test_feedback_report_command_bad_config(tmp_path, capsys) -> None:
    assert main(["feedback-report", "--config", str(tmp_path / "missing.toml")]) == 2
    assert "cannot read config" in capsys.readouterr().err


def test_feedback_report_does_not_create_a_missing_store(tmp_path, capsys) -> None:
    missing = tmp_path / "nowhere.db"
    config = tmp_path / "tonicity.toml"
    config.write_text(f'[storage]\nurl = "sqlite:///{missing.as_posix()}"\n', encoding="utf-8")
    assert main(["feedback-report", "--config", str(config)]) == 2
    assert "no store at" in capsys.readouterr().err and not missing.exists()
    config.write_text('[storage]\nurl = "not a url"\n', encoding="utf-8")
    assert main(["feedback-report", "--config", str(config)]) == 2
