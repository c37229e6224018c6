"""Issue 14's defects 1, 4, 5, 6 and 8, each as its attack; every answer passes
``assert_clean`` (no 5xx, errors are OperationOutcomes).

Standards named beside the checks: RFC 7519 section 2 (NumericDate), RFC 3339 and ISO 8601
(timestamps), CSP Level 2 ``frame-ancestors`` and RFC 7034 (X-Frame-Options), the Fetch
Standard's CORS-safelisted request headers (a ``text/plain`` POST needs no preflight),
RFC 9110 section 15.5.16 (415) and 15.6.4 (503 with Retry-After).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

from cds_service.app import create_app
from cds_service.config import StorageSettings
from tests.fixtures.auth_kit import BASE, ENDPOINT, NOW, claims, new_key, settings_for, sign

from ._support import assert_clean, open_client, trial_settings

PATH = ENDPOINT.removeprefix(BASE)
FEEDBACK = f"{PATH}/feedback"


@pytest.fixture
def trial(tmp_path: Path) -> Any:
    with open_client(trial_settings(tmp_path)) as client:
        yield client


# ---- defect 1: the workbench endpoints -----------------------------------------------------


def test_workbench_posts_obey_the_body_limit(tmp_path: Path) -> None:
    limit = 4096
    with open_client(trial_settings(tmp_path, server={"max_body_bytes": limit})) as client:
        big = json.dumps({"resourceType": "Bundle", "entry": [{"x": "y" * limit}]})
        for path in ("/workbench/request", "/workbench/render"):
            r = client.post(path, content=big, headers={"Content-Type": "application/json"})
            assert_clean(r, "hardening")
            assert r.status_code == 413, path
            chunked = client.post(
                path,
                content=iter([big[:2000].encode(), big[2000:].encode()]),
                headers={"Content-Type": "application/json"},
            )
            assert chunked.status_code == 413, path
        small = client.post("/workbench/render", json={"texts": ["**118** mmol/L"]})
        assert small.status_code == 200 and "<strong>118</strong>" in small.json()["html"][0]


def test_workbench_posts_are_off_when_authentication_is_required(tmp_path: Path) -> None:
    config = settings_for(tmp_path, new_key()).model_copy(
        update={"storage": StorageSettings(url=f"sqlite:///{tmp_path / 'a.db'}")}
    )
    with TestClient(create_app(config), raise_server_exceptions=False) as client:
        for path, body in (
            ("/workbench/request", {"resourceType": "Bundle", "entry": []}),
            ("/workbench/render", {"texts": ["x"]}),
        ):
            r = client.post(path, json=body)
            assert_clean(r, "hardening")
            assert r.status_code == 403, path
            assert "authentication is required" in r.json()["issue"][0]["diagnostics"]


# ---- defect 4: NumericDate claims (RFC 7519 section 2) -------------------------------------

_T = int(NOW.timestamp())


@pytest.mark.parametrize(
    "changes",
    [
        {"exp": math.nan},
        {"iat": math.nan},
        {"nbf": math.nan},
        {"exp": math.inf},
        {"iat": -math.inf},
        {"nbf": math.inf},
        {"exp": _T + 60.5},  # a fraction of a second
        {"nbf": "0"},
        {"exp": True},
        {"exp": 10**30, "iat": 10**30 - 60},  # beyond any datetime
        {"nbf": None, "exp": _T + 120.0, "iat": _T},  # control: valid, a whole-second float
    ],
    ids=lambda c: ",".join(f"{k}={v!r}"[:24] for k, v in c.items()),
)
def test_non_finite_or_fractional_numeric_dates_are_401(
    tmp_path: Path, changes: dict[str, Any]
) -> None:
    key = new_key()
    config = settings_for(tmp_path, key).model_copy(
        update={"storage": StorageSettings(url=f"sqlite:///{tmp_path / 'a.db'}")}
    )
    with TestClient(create_app(config), raise_server_exceptions=False) as client:
        client.app.state.authenticator._now = lambda: NOW
        token = sign(key, claims(**changes))
        r = client.post(PATH, json={}, headers={"Authorization": f"Bearer {token}"})
    assert_clean(r, "hardening")
    control = changes.get("nbf", 1) is None
    if control:
        assert r.status_code == 400  # past authentication: the empty request is refused
    else:
        assert r.status_code == 401
        assert r.json()["issue"][0]["diagnostics"] == "authentication failed: malformed token"


# ---- defect 5: feedback timestamps at the calendar's edges ---------------------------------


@pytest.mark.parametrize(
    "stamp",
    [
        "9999-12-31T23:59:59-14:00",  # after year 9999 in UTC
        "0001-01-01T00:00:00+14:00",  # before year 1 in UTC
        "9999-12-31T23:59:59-00:01",
        "0001-01-01T00:00:00+00:01",
        "2026-02-30T10:00:00Z",  # no such day
        "2026-03-04T25:00:00Z",
        "10000-01-01T00:00:00Z",
        "",
    ],
)
def test_feedback_timestamps_that_cannot_be_converted_are_400(trial: Any, stamp: str) -> None:
    body = {"feedback": [{"card": "c-1", "outcome": "overridden", "outcomeTimestamp": stamp}]}
    r = trial.post(FEEDBACK, json=body)
    assert_clean(r, "hardening")
    assert r.status_code == 400
    assert "outcomeTimestamp" in r.json()["issue"][0]["diagnostics"]


@pytest.mark.parametrize("stamp", ["9999-12-31T23:59:59+00:00", "0001-01-01T00:00:00Z"])
def test_feedback_timestamps_at_the_edges_that_fit_pass_validation(trial: Any, stamp: str) -> None:
    body = {"feedback": [{"card": "c-1", "outcome": "overridden", "outcomeTimestamp": stamp}]}
    r = trial.post(FEEDBACK, json=body)
    assert_clean(r, "hardening")
    # past the timestamp: refused only because this service never returned card c-1
    assert r.status_code == 400
    message = r.json()["issue"][0]["diagnostics"]
    assert "outcomeTimestamp" not in message and "c-1" in message


# ---- defect 6: framing -----------------------------------------------------------------------


def test_pages_refuse_to_be_framed_by_default(trial: Any) -> None:
    for path in ("/", "/trend/not-a-token"):
        r = trial.get(path)
        assert "frame-ancestors 'none'" in r.headers["content-security-policy"], path
        assert r.headers["x-frame-options"] == "DENY", path


def test_the_trend_page_may_be_framed_by_the_configured_record_system(tmp_path: Path) -> None:
    ehr = "https://ehr.larkspurvalley.example.org"
    settings = trial_settings(tmp_path, server={"trend_frame_ancestors": [ehr]})
    with open_client(settings) as client:
        trend = client.get("/trend/not-a-token")
        assert trend.status_code == 404  # the same headers on every trend answer
        assert f"frame-ancestors {ehr}" in trend.headers["content-security-policy"]
        assert "x-frame-options" not in trend.headers
        workbench = client.get("/")
        assert "frame-ancestors 'none'" in workbench.headers["content-security-policy"]


@pytest.mark.parametrize(
    "value", ["*", "https://ehr.example.org/path", "https://a.example; script-src *", "'none'"]
)
def test_frame_ancestors_must_be_origins(tmp_path: Path, value: str) -> None:
    from cds_service.errors import UserError

    with pytest.raises(UserError, match="is not an origin"):
        trial_settings(tmp_path, server={"trend_frame_ancestors": [value]})


# ---- defect 8: media types and echoed identifiers --------------------------------------------


@pytest.mark.parametrize(
    "content_type",
    [
        "text/plain",
        "text/plain;charset=UTF-8",
        "application/x-www-form-urlencoded",
        "multipart/form-data; boundary=x",
        None,
        "application/jsonx",
        "application/json-patch+json",
    ],
)
@pytest.mark.parametrize("path", [PATH, FEEDBACK])
def test_only_json_media_types_reach_the_endpoints(
    trial: Any, path: str, content_type: str | None
) -> None:
    headers = {"Content-Type": content_type} if content_type else {}
    r = trial.post(path, content=b'{"hook": "patient-view"}', headers=headers)
    assert_clean(r, "hardening")
    assert r.status_code == 415
    assert r.json()["issue"][0]["code"] == "not-supported"


@pytest.mark.parametrize(
    "content_type", ["application/json", "application/fhir+json", "Application/JSON; charset=utf-8"]
)
def test_json_media_types_are_accepted(trial: Any, content_type: str) -> None:
    r = trial.post(
        PATH, content=b'{"hook": "patient-view"}', headers={"Content-Type": content_type}
    )
    assert r.status_code == 400  # past the media type: the request itself is incomplete


def test_echoed_identifiers_are_capped(trial: Any) -> None:
    long_id = "x" * 20_000
    for r in (
        trial.post(f"/cds-services/{long_id}", json={}),
        trial.post(f"/cds-services/{long_id}/feedback", json={}),
        trial.post(PATH, json={"hook": "h" * 100_000}),
        trial.post(
            PATH, json={"hook": "patient-view", "hookInstance": "i", "context": {"k" * 9_000: 1}}
        ),
    ):
        assert_clean(r, "hardening")
        assert len(r.json()["issue"][0]["diagnostics"]) <= 500, r.json()


# ---- feedback audience -------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("aud", "status"),
    [
        (f"{ENDPOINT}/feedback", 200),  # the feedback URL (CDS Hooks 2.0)
        (ENDPOINT, 200),  # the service URL, which clients commonly reuse
        (f"{BASE}/cds-services/sodium-order-sign", 401),  # another service's URL
        (f"{BASE}/cds-services", 401),
    ],
)
def test_feedback_accepts_its_service_url_as_audience(
    tmp_path: Path, aud: str, status: int
) -> None:
    key = new_key()
    config = settings_for(tmp_path, key).model_copy(
        update={"storage": StorageSettings(url=f"sqlite:///{tmp_path / 'a.db'}")}
    )
    from cds_service.store.cards import CardLogRow, log_cards

    # Feedback is checked against the card log: a card this service returned, with its one
    # suggestion (CDS Hooks 2.0.1: acceptedSuggestions is required for "accepted").
    body = {
        "feedback": [
            {
                "card": "c-1",
                "outcome": "accepted",
                "acceptedSuggestions": [{"id": "s-1"}],
                "outcomeTimestamp": NOW.isoformat(),
            }
        ]
    }
    with TestClient(create_app(config), raise_server_exceptions=False) as client:
        row = CardLogRow(
            "c-1",
            "sodium-workup",
            "siadh-pattern",
            "info",
            None,
            None,
            NOW,
            suggestion_ids=("s-1",),
        )
        log_cards(client.app.state.store, [row])
        client.app.state.authenticator._now = lambda: NOW
        token = sign(key, claims(aud=aud))
        r = client.post(FEEDBACK, json=body, headers={"Authorization": f"Bearer {token}"})
    assert_clean(r, "hardening")
    assert r.status_code == status, r.text
