"""GET /: the integrator's workbench, its assets, samples and the markdown renderer."""

from __future__ import annotations

import json
import re
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from cds_service.config import Settings
from cds_service.store import Store
from cds_service.web.pages import CAUTION
from tests.web.conftest import SAMPLE_REQUEST, make_app

URL = re.compile(r"https?://", re.I)
SVG_NAMESPACE = 'xmlns="http://www.w3.org/2000/svg"'


def test_page_and_assets_are_served_locally(client: TestClient) -> None:
    page = client.get("/")
    assert page.status_code == 200
    assets = re.findall(r'(?:href|src)="([^"#]+)"', page.text)
    assert "/static/tonicity.css" in assets and "/static/workbench.js" in assets
    texts = {"/": page.text}
    for asset in assets:
        assert asset.startswith("/"), f"{asset} is not served by Tonicity"
        r = client.get(asset)
        assert r.status_code == 200, asset
        texts[asset] = r.text
    for name, text in texts.items():  # offline: no CDN, no external URL of any kind
        text = text.replace(SVG_NAMESPACE, "")  # a name, never fetched
        assert not URL.search(text), f"external URL in {name}"
    assert CAUTION in page.text
    assert re.search(r'<label for="token">', page.text)
    assert 'id="request-body"' in page.text and '<label for="request-body">' in page.text


def test_banner_when_auth_is_off(client: TestClient) -> None:
    assert "Not authenticated" in client.get("/").text


def test_token_notice_when_auth_is_required(store: Store, tmp_path: Path) -> None:
    app = make_app(store, tmp_path, Settings(auth={"required": True}))
    html = TestClient(app).get("/").text
    assert "Not authenticated" not in html
    assert "need a bearer token" in html


def test_samples_listed_from_the_manifest(client: TestClient) -> None:
    listed = client.get("/workbench/samples").json()["samples"]
    assert [s["name"] for s in listed] == ["requests/lv-request.json", "lv-bundle.json"]
    assert listed[0]["kind"] == "request" and listed[1]["kind"] == "bundle"
    assert client.get("/workbench/samples/requests/lv-request.json").json() == SAMPLE_REQUEST


def test_no_sample_folder_lists_nothing(store: Store, tmp_path: Path) -> None:
    app = make_app(store, tmp_path / "absent")
    assert TestClient(app).get("/workbench/samples").json() == {"samples": []}


@pytest.mark.parametrize(
    "name",
    [
        "../outside.json",
        "..%2Foutside.json",
        "requests/../../outside.json",
        "%2E%2E/outside.json",
        "unlisted.json",
        "/etc/passwd",
        "manifest.json",
        "requests\\..\\..\\outside.json",
    ],
)
def test_path_traversal_is_refused(client: TestClient, name: str) -> None:
    for base in ("/workbench/samples/", "/workbench/request/"):
        r = client.get(base + name)
        assert r.status_code == 404, (base, name, r.status_code)
        assert "hookInstance" not in r.text


def test_static_files_outside_the_folder_are_refused(client: TestClient) -> None:
    assert client.get("/static/..%2Froutes.py").status_code == 404
    assert client.get("/static/routes.py").status_code == 404


def test_request_sample_is_shifted_to_now(client: TestClient) -> None:
    body = client.get("/workbench/request/requests/lv-request.json").json()
    assert body["hook"] == "patient-view"
    assert body["context"] == SAMPLE_REQUEST["context"]


def test_bundle_sample_becomes_a_hook_request_with_times_moved(client: TestClient) -> None:
    unshifted = client.get("/workbench/request/lv-bundle.json?shift=false").json()
    shifted = client.get("/workbench/request/lv-bundle.json").json()
    for body in (unshifted, shifted):
        assert body["hook"] == "patient-view"
        assert body["context"]["patientId"] == "lvh-pt-0042"
    assert "2026-03-14T06:00:00Z" in str(unshifted["prefetch"])
    assert "2026-03-14T06:00:00Z" not in str(shifted["prefetch"])


def test_markdown_is_rendered_without_raw_html(client: TestClient) -> None:
    texts = [
        "**Serum sodium** 118 mmol/L\n\n- one\n- two",
        "<script>alert(1)</script> <img src=x onerror=alert(1)>",
        "[click](javascript:alert(1))",
    ]
    html = client.post("/workbench/render", json={"texts": texts}).json()["html"]
    assert "<strong>Serum sodium</strong>" in html[0] and "<li>one</li>" in html[0]
    assert "<script>" not in html[1] and "&lt;script&gt;" in html[1]
    assert "<img" not in html[1]
    assert "javascript:" not in html[2].split(">")[0]
    assert "href" not in html[2]


def test_render_refuses_a_bad_body(client: TestClient) -> None:
    r = client.post("/workbench/render", json={"texts": "not a list"})
    assert 400 <= r.status_code < 500


def test_real_sample_folder_is_found_by_default(store: Store) -> None:
    repo_samples = Path(__file__).resolve().parents[2] / "sample_bundles"
    if not (repo_samples / "manifest.json").exists():
        pytest.skip("sample_bundles/manifest.json is not in this checkout")
    app = make_app(store, None)
    listed = TestClient(app).get("/workbench/samples").json()["samples"]
    assert listed and all(s["kind"] in ("request", "bundle") for s in listed)


def test_pasted_bundle_becomes_a_request(client: TestClient, tmp_path: Path) -> None:
    bundle = json.loads((tmp_path / "samples" / "lv-bundle.json").read_text())
    r = client.post("/workbench/request?hook=patient-view", json=bundle)
    assert r.status_code == 200
    assert r.json()["context"]["patientId"] == "lvh-pt-0042"
    assert client.post("/workbench/request", json=SAMPLE_REQUEST).json() == SAMPLE_REQUEST


@pytest.mark.parametrize(
    "body",
    [
        {"resourceType": "Patient", "id": "x"},
        {"resourceType": "Bundle", "type": "collection", "entry": []},  # no Patient
        [1, 2, 3],
    ],
)
def test_pasted_nonsense_gets_a_clear_400(client: TestClient, body: object) -> None:
    r = client.post("/workbench/request", json=body)
    assert 400 <= r.status_code < 500
    assert r.json()["resourceType"] == "OperationOutcome"


def test_unknown_hook_for_a_bundle_is_a_400(client: TestClient, tmp_path: Path) -> None:
    bundle = json.loads((tmp_path / "samples" / "lv-bundle.json").read_text())
    r = client.post("/workbench/request?hook=chart-open", json=bundle)
    assert r.status_code == 400
    assert "unknown hook" in r.json()["issue"][0]["diagnostics"]


def _low_sodium_request(now: datetime) -> dict:
    """An invented patient-view request: Na 126 mmol/L now, one sodium without a value (set
    aside, with its reason), no osmolality: a tonicity-unknown card resting on the sodium."""
    t = (now - timedelta(hours=1)).isoformat()

    def obs(oid: str, value: dict) -> dict:
        return {
            "resourceType": "Observation",
            "id": oid,
            "status": "final",
            "subject": {"reference": "Patient/lvh-pt-0077"},
            "effectiveDateTime": t,
            "code": {"coding": [{"system": "http://loinc.org", "code": "2951-2"}]},
            **value,
        }

    return {
        "hook": "patient-view",
        "hookInstance": "6a1f7d0e-0c3b-4d8e-9a55-2f3d5c1b7e90",
        "context": {"userId": "Practitioner/lv-dr-1", "patientId": "lvh-pt-0077"},
        "prefetch": {
            "patient": {
                "resourceType": "Patient",
                "id": "lvh-pt-0077",
                "birthDate": "1950-01-01",
                "gender": "female",
            },
            "sodium": {
                "resourceType": "Bundle",
                "type": "searchset",
                "entry": [
                    {
                        "resource": obs(
                            "lv-na-used",
                            {
                                "valueQuantity": {
                                    "value": 126,
                                    "unit": "mmol/L",
                                    "system": "http://unitsofmeasure.org",
                                    "code": "mmol/L",
                                }
                            },
                        )
                    },
                    {"resource": obs("lv-na-empty", {"dataAbsentReason": {"text": "haemolysed"}})},
                ],
            },
        },
    }


def test_understand_shows_used_and_ignored_results_and_what_each_card_rests_on(
    client: TestClient,
) -> None:
    body = _low_sodium_request(datetime.now(UTC))
    r = client.post("/workbench/understand", json=body)
    assert r.status_code == 200
    data = r.json()
    rows = {row["resource"]: row for row in data["results"]}
    assert rows["Observation/lv-na-used"]["used"] and rows["Observation/lv-na-used"]["value"] == 126
    ignored = rows["Observation/lv-na-empty"]
    assert not ignored["used"] and ignored["reason"]  # set aside, and says why
    assert data["patient"] == {
        "age_years": data["patient"]["age_years"],
        "sex": "female",
        "known": True,
    }
    # DESIGN.md: Na < 135 without a measured osmolality -> hyponatremia-tonicity-unknown,
    # and that card rests on the sodium that was used.
    assert "Observation/lv-na-used" in data["findings"]["hyponatremia-tonicity-unknown"]


def test_understand_refuses_a_bad_request_with_an_operation_outcome(client: TestClient) -> None:
    r = client.post("/workbench/understand", json={"hook": "no-such-hook"})
    assert 400 <= r.status_code < 500
    assert r.json()["resourceType"] == "OperationOutcome"
