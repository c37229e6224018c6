"""FHIR server faults on the fetch path (respx): slow, 500, 401, malformed JSON, truncated body,
a connection cut mid-body, and a ``next`` link loop.

Law (CDS Hooks 2.0, "Prefetch" and "FHIR resource access"; issue 7): when the data the
service needs cannot be had it answers 412 with an OperationOutcome; when only some queries
fail it answers with cards from the data that did arrive; in every case within the fetch time
budget (plus a margin for the rest of the evaluation), never hanging. The hang guard runs the
call in a thread and gives up after a generous bound; it is a liveness check, not a speed goal.
"""

from __future__ import annotations

import asyncio
import json
import threading
from collections.abc import Callable, Iterator
from typing import Any
from urllib.parse import unquote

import httpx
import pytest
import respx
from fastapi.testclient import TestClient

from benchmarks import requests as rq
from cds_service.hooks.registry import fill
from tests.evidence._support import assert_clean, open_client, trial_settings

FHIR_BASE = "https://fhir.larkspur.test/r4"
BUDGET_SECONDS = 3.0  # generous: the machine running the suite may be busy
HANG_GUARD_SECONDS = BUDGET_SECONDS + 30.0
REQUIRED = ("patient", "sodium")  # cds_service.hooks.registry.REQUIRED_KEYS

REQUEST = rq.hook_request("patient-view", 40, prefetch=False, fhir_server=FHIR_BASE)
TEMPLATES = rq.service_templates()
ANSWERS = rq.fill_prefetch(TEMPLATES, REQUEST["context"], rq.record(40))
QUERIES = {
    key: unquote(f"{FHIR_BASE}/{fill(t, REQUEST['context'])}") for key, t in TEMPLATES.items()
}


LOOP_MARK = "&_lvhpage=2"


def key_of(request: httpx.Request) -> str | None:
    url = unquote(str(request.url)).replace(LOOP_MARK, "")
    for key, query in QUERIES.items():
        if url == query:
            return key
    return None


def _fault(kind: str, request: httpx.Request) -> httpx.Response | Any:
    key = key_of(request)
    good = ANSWERS.get(key) if key else None
    if kind == "500":
        return httpx.Response(500, text="upstream failure")
    if kind == "401":
        return httpx.Response(401, json={"resourceType": "OperationOutcome", "issue": []})
    if kind == "malformed-json":
        return httpx.Response(200, content=b'{"resourceType": "Bundle", "entry": [}')
    if kind == "truncated-body":
        text = json.dumps(good or {"resourceType": "Bundle", "type": "searchset"})
        return httpx.Response(200, content=text[: len(text) // 2].encode())
    if kind == "connection-cut":
        raise httpx.RemoteProtocolError("peer closed connection without sending complete body")
    if kind == "next-loop":
        if not isinstance(good, dict) or good.get("resourceType") != "Bundle":
            return httpx.Response(200, json=good)
        # A -> B -> A: the second page links back to the first.
        page = dict(good)
        first = str(request.url).replace(LOOP_MARK, "")
        second = first + LOOP_MARK
        page["link"] = [
            {"relation": "next", "url": first if LOOP_MARK in str(request.url) else second}
        ]
        return httpx.Response(200, json=page)
    raise AssertionError(kind)


async def _slow(_request: httpx.Request) -> httpx.Response:
    await asyncio.sleep(BUDGET_SECONDS * 30)
    return httpx.Response(200, json={"resourceType": "Bundle", "type": "searchset"})


def _server(kind: str, faulty_keys: set[str]) -> Callable[[httpx.Request], Any]:
    def handle(request: httpx.Request) -> Any:
        key = key_of(request)
        if key in faulty_keys:
            return _slow(request) if kind == "slow" else _fault(kind, request)
        if key is None:
            return httpx.Response(404, json={"resourceType": "OperationOutcome", "issue": []})
        return httpx.Response(200, json=ANSWERS[key])

    return handle


@pytest.fixture(scope="module")
def fault_client(tmp_path_factory: pytest.TempPathFactory) -> Iterator[TestClient]:
    settings = trial_settings(
        tmp_path_factory.mktemp("faults"),
        fhir={"time_budget_seconds": BUDGET_SECONDS, "max_pages": 5},
        # One patient's chart, asked for again and again under different faults: repeat
        # suppression would hide the unchanged cards these tests look for.
        alerts={"suppression": False},
    )
    with open_client(settings) as c:
        yield c


def _call_guarded(client: TestClient, body: dict[str, Any]) -> Any:
    box: dict[str, Any] = {}

    def run() -> None:
        box["response"] = client.post("/cds-services/sodium-workup", json=body)

    worker = threading.Thread(target=run, daemon=True)
    worker.start()
    worker.join(HANG_GUARD_SECONDS)
    assert not worker.is_alive(), f"no answer within {HANG_GUARD_SECONDS} s: the call hangs"
    return box["response"]


KINDS = ["slow", "500", "401", "malformed-json", "truncated-body", "connection-cut", "next-loop"]


def test_healthy_server_gives_cards(fault_client: TestClient) -> None:
    """Control: the same request against a well-behaved server answers with cards."""
    with respx.mock(assert_all_called=False) as mock:
        route = mock.route(host="fhir.larkspur.test").mock(side_effect=_server("none", set()))
        response = _call_guarded(fault_client, REQUEST)
    assert_clean(response, "fhir-fault")
    assert response.status_code == 200, response.text[:300]
    assert response.json()["cards"], "a sodium of 133 after 116 must give at least one card"
    assert route.call_count >= len(TEMPLATES)
    for call in route.calls:
        assert call.request.headers["authorization"] == "Bearer lvh-bench-token-not-secret"


@pytest.mark.parametrize("kind", KINDS)
def test_fault_on_every_query(fault_client: TestClient, kind: str) -> None:
    """Every query faulty: 412 (nothing usable arrived), except a next-link loop, whose first
    pages did arrive and give cards."""
    with respx.mock(assert_all_called=False) as mock:
        mock.route(host="fhir.larkspur.test").mock(side_effect=_server(kind, set(TEMPLATES)))
        response = _call_guarded(fault_client, REQUEST)
    assert_clean(response, "fhir-fault")
    if kind == "next-loop":
        assert response.status_code == 200, response.text[:300]
        assert response.json()["cards"]
    else:
        assert response.status_code == 412, response.text[:300]
        assert response.json()["resourceType"] == "OperationOutcome"


@pytest.mark.parametrize("kind", KINDS)
def test_fault_on_optional_queries(fault_client: TestClient, kind: str) -> None:
    """Patient and sodium arrive, everything else fails: cards from what arrived."""
    optional = set(TEMPLATES) - set(REQUIRED)
    with respx.mock(assert_all_called=False) as mock:
        mock.route(host="fhir.larkspur.test").mock(side_effect=_server(kind, optional))
        response = _call_guarded(fault_client, REQUEST)
    assert_clean(response, "fhir-fault")
    assert response.status_code == 200, response.text[:300]
    assert response.json()["cards"]
