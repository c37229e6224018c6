"""Operations endpoints: /healthz, /readyz, /metrics (Prometheus text exposition format 0.0.4,
parsed with prometheus_client's own parser, the reference implementation)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient
from prometheus_client.parser import text_string_to_metric_families
from sqlalchemy import create_engine

from cds_service import ops
from cds_service.store import Store

from .conftest import SAMPLES


def _app(**state: Any) -> TestClient:
    app = FastAPI()
    app.include_router(ops.router)
    for key, value in state.items():
        setattr(app.state, key, value)
    return TestClient(app)


def _sample_value(text: str, name: str, labels: dict[str, str]) -> float:
    """The value of one sample in a Prometheus text page (0 when absent)."""
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            if sample.name == name and all(sample.labels.get(k) == v for k, v in labels.items()):
                return float(sample.value)
    return 0.0


@pytest.fixture
def store(tmp_path: Path) -> Any:
    s = Store(f"sqlite:///{(tmp_path / 'ops.db').as_posix()}")
    yield s
    s.close()


def test_healthz_answers_while_nothing_else_is_ready() -> None:
    r = _app().get("/healthz")
    assert r.status_code == 200 and r.json() == {"status": "ok"}


def test_readyz_is_ready_with_a_database_and_thresholds(store: Store) -> None:
    from cds_service.clinical.thresholds import load_thresholds

    r = _app(store=store, thresholds=load_thresholds()).get("/readyz")
    assert r.status_code == 200


def test_readyz_is_503_with_an_operation_outcome_when_not_started() -> None:
    r = _app().get("/readyz")
    assert r.status_code == 503
    body = r.json()
    assert body["resourceType"] == "OperationOutcome"
    texts = " ".join(i["diagnostics"] for i in body["issue"])
    assert "store" in texts and "thresholds" in texts


def test_readyz_is_503_when_the_database_cannot_be_reached(tmp_path: Path) -> None:
    class Unreachable:  # a real SQLAlchemy engine on a database file that cannot exist
        engine = create_engine(f"sqlite:///{(tmp_path / 'absent' / 'x.db').as_posix()}")

    r = _app(store=Unreachable(), thresholds=object()).get("/readyz")
    assert r.status_code == 503
    assert "database not reachable" in r.json()["issue"][0]["diagnostics"]


def test_metrics_count_exactly_what_the_helpers_report() -> None:
    client = _app()
    before = client.get("/metrics").text
    ops.observe_request("sodium-workup", 200, 0.042)
    ops.observe_request("sodium-workup", 200, 0.2)
    ops.count_card("dilute-urine")
    ops.count_fetch_error("timeout")
    r = client.get("/metrics")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/plain")
    after = r.text

    def delta(name: str, **labels: str) -> float:
        return _sample_value(after, name, labels) - _sample_value(before, name, labels)

    assert delta("tonicity_requests_total", service="sodium-workup", status="200") == 2
    assert delta("tonicity_request_seconds_count", service="sodium-workup") == 2
    assert delta("tonicity_request_seconds_sum", service="sodium-workup") == pytest.approx(0.242)
    # histogram buckets are cumulative: 0.042 falls in le=0.05, both in le=0.25
    assert delta("tonicity_request_seconds_bucket", service="sodium-workup", le="0.05") == 1
    assert delta("tonicity_request_seconds_bucket", service="sodium-workup", le="0.25") == 2
    assert delta("tonicity_cards_total", code="dilute-urine") == 1
    assert delta("tonicity_fhir_fetch_errors_total", kind="timeout") == 1


def test_metric_helpers_never_raise_and_bound_label_length() -> None:
    ops.observe_request("x" * 500, "weird", -1.0)  # negative latency is clamped, not raised
    ops.count_card("")
    text = _app().get("/metrics").text
    assert _sample_value(text, "tonicity_requests_total", {"service": "x" * 64}) >= 1
    assert "x" * 65 not in text


def test_the_service_reports_calls_and_cards_to_metrics(tmp_path: Path) -> None:
    """Through the real app: one patient-view call moves the request and card counters."""
    from cds_service.app import create_app
    from cds_service.config import load_settings

    settings = load_settings(
        None,
        storage={"url": f"sqlite:///{(tmp_path / 'app.db').as_posix()}"},
        auth={"required": False},
    )
    body = json.loads(
        (SAMPLES / "requests" / "p06-polydipsia-dilute-urine-patient-view.json").read_text()
    )
    from datetime import UTC, datetime

    from cds_service.hooks.timeshift import shift_times

    body = shift_times(body, datetime.now(UTC) - datetime(2026, 3, 14, 9, tzinfo=UTC))
    with TestClient(create_app(settings)) as client:
        assert client.get("/healthz").status_code == 200
        assert client.get("/readyz").status_code == 200
        before = client.get("/metrics").text
        r = client.post("/cds-services/sodium-workup", json=body)
        assert r.status_code == 200, r.text
        codes = [c["source"]["topic"]["code"] for c in r.json()["cards"]]
        after = client.get("/metrics").text
    assert "dilute-urine" in codes
    for name, labels in (
        ("tonicity_requests_total", {"service": "sodium-workup", "status": "200"}),
        ("tonicity_cards_total", {"code": "dilute-urine"}),
    ):
        assert _sample_value(after, name, labels) - _sample_value(before, name, labels) == 1
