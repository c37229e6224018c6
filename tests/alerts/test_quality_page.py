"""The quality page ``/quality`` and its exports: the same figures as ``feedback_report``, the
filters, and the same authentication as the hook endpoints (CDS Hooks 2.0.1, "Trusting CDS
Clients": a signed JWT whose ``aud`` is the URL being called)."""

from __future__ import annotations

import csv
import io
import uuid
from datetime import UTC, datetime
from pathlib import Path

from fastapi.testclient import TestClient

from cds_service.app import create_app
from cds_service.config import load_settings
from cds_service.store.feedback import feedback_report
from cds_service.store.report import ReportFilter
from tests.alerts.seed import seed
from tests.fixtures.auth_kit import BASE, claims, new_key, settings_for, sign


def trial(tmp_path: Path, **alerts):
    return load_settings(
        None,
        storage={"url": f"sqlite:///{tmp_path / 'q.db'}"},
        auth={"required": False},
        local_trial=True,
        alerts=alerts,
    )


def test_page_and_exports_show_the_report_figures(tmp_path: Path) -> None:
    with TestClient(create_app(trial(tmp_path))) as c:
        totals = seed(c.app.state.store)
        report = feedback_report(c.app.state.store)
        page = c.get("/quality")
        data = c.get("/quality.json").json()
        rows = list(csv.DictReader(io.StringIO(c.get("/quality.csv").text)))
        one_service = c.get("/quality.json", params={"service": "sodium-order-sign"}).json()
        bad = c.get("/quality", params={"since": "last tuesday"})
    assert page.status_code == 200 and "<script" not in page.text  # readable without JavaScript
    assert page.text.count("<svg") == len(report.findings)
    for f in report.findings:
        assert f"<code>{f.finding_code}</code>" in page.text
        assert f"{f.evaluated} evaluated, {f.shown} shown" in page.text
    assert sum(f["shown"] for f in data["findings"]) == totals["show"]
    assert sum(f["suppressed"] for f in data["findings"]) == totals["suppressed"]
    assert sum(f["silent"] for f in data["findings"]) == totals["silent"]
    assert sum(int(r["evaluated"]) for r in rows) == sum(totals.values())
    assert {f["finding_code"] for f in one_service["findings"]} == {"hypotonic-fluid-order"}
    assert bad.status_code == 400 and bad.json()["resourceType"] == "OperationOutcome"


def test_date_filter_and_replay_traffic(tmp_path: Path) -> None:
    with TestClient(create_app(trial(tmp_path))) as c:
        seed(c.app.state.store)
        store = c.app.state.store
        week = c.get("/quality.json", params={"since": "2026-02-09", "until": "2026-02-16"}).json()
        expected = feedback_report(
            store,
            ReportFilter(
                since=datetime(2026, 2, 9, tzinfo=UTC), until=datetime(2026, 2, 16, tzinfo=UTC)
            ),
        )
    assert {w["week"] for w in week["weeks"]} == {"2026-02-09"}
    assert sum(f["evaluated"] for f in week["findings"]) == sum(
        f.evaluated for f in expected.findings
    )


def test_page_needs_a_verified_client_when_auth_is_required(tmp_path: Path) -> None:
    key = new_key()
    settings = settings_for(tmp_path, key).model_copy(
        update={
            "storage": load_settings(
                None, storage={"url": f"sqlite:///{tmp_path / 'a.db'}"}
            ).storage
        }
    )
    now = int(datetime.now(UTC).timestamp())

    def token(path: str) -> str:
        body = claims(aud=f"{BASE}{path}", iat=now, exp=now + 120, jti=str(uuid.uuid4()))
        return sign(key, body)

    with TestClient(create_app(settings)) as c:
        anonymous = c.get("/quality")
        wrong_audience = c.get("/quality", headers={"Authorization": f"Bearer {token('/')}"})
        ok = c.get("/quality", headers={"Authorization": f"Bearer {token('/quality')}"})
        csv_ok = c.get("/quality.csv", headers={"Authorization": f"Bearer {token('/quality.csv')}"})
    assert anonymous.status_code == 401 and anonymous.headers["www-authenticate"] == "Bearer"
    assert anonymous.json()["resourceType"] == "OperationOutcome"
    assert wrong_audience.status_code == 401
    assert ok.status_code == 200 and "Alert quality" in ok.text
    assert csv_ok.status_code == 200 and csv_ok.text.startswith("week,finding_code,")


def test_page_can_be_switched_off(tmp_path: Path) -> None:
    with TestClient(create_app(trial(tmp_path, quality_page=False))) as c:
        assert c.get("/quality").status_code == 404
        assert c.get("/quality.json").status_code == 404


def test_replay_call_lookup_lists_what_the_call_logged(tmp_path: Path) -> None:
    from tests.hooks.fhirdata import hook_request, sodium_series

    settings = trial(
        tmp_path, silent_services=["sodium-workup"], unsafe_allow_silencing_critical=True
    )
    body = hook_request(observations=sodium_series(127))
    with TestClient(create_app(settings)) as c:
        response = c.post(
            "/cds-services/sodium-workup", json=body, headers={"X-Tonicity-Replay": "call-1"}
        )
        looked_up = c.get("/quality/calls/call-1").json()
        nothing = c.get("/quality/calls/never-made").json()
        bad_header = c.post(
            "/cds-services/sodium-workup", json=body, headers={"X-Tonicity-Replay": "no spaces"}
        )
        bad_id = c.get("/quality/calls/" + "x" * 65)
        discovery = c.get("/cds-services").json()
    assert response.json() == {"cards": []}
    assert looked_up["decisions"] and {d["action"] for d in looked_up["decisions"]} == {"silent"}
    assert nothing == {"call": "never-made", "decisions": []}
    assert bad_header.status_code == 400 and bad_id.status_code == 400
    workup = next(s for s in discovery["services"] if s["id"] == "sodium-workup")
    info = workup["extension"]["tonicity.alerts"]
    assert info["silent"] is True and len(info["settingsDigest"]) == 16
