"""FHIR fetch of missing prefetch (respx mocks the record system's FHIR server).

Behaviour checked against HL7 CDS Hooks 2.0, "Prefetch" and "FHIR Resource Access" sections
(open standard): missing keys may be fetched with the fhirAuthorization bearer token, a null
key means no data, an OperationOutcome in place of data means the client could not get it.
Paging follows FHIR R4 RESTful search ``Bundle.link`` relation ``next`` (open standard).
"""

from __future__ import annotations

import asyncio
from types import SimpleNamespace

import httpx
import pytest
import respx

from cds_service.hooks.fetch import fetch_all
from cds_service.hooks.prefetch import check_prefetch
from cds_service.hooks.registry import LAB_GROUPS, prefetch_templates
from cds_service.hooks.service import HookError, gather_data, parse_call
from tests.hooks.fhirdata import (
    FHIR_BASE,
    NA,
    NOW,
    OSM,
    hook_request,
    observation,
    patient,
    searchset,
    sodium_series,
)

TOKEN = "lvh-access-token-not-a-real-one"


def run(coro):  # type: ignore[no-untyped-def]
    return asyncio.run(coro)


async def _fetch(queries: dict[str, str], **kw):  # type: ignore[no-untyped-def]
    async with httpx.AsyncClient() as http:
        return await fetch_all(
            http,
            FHIR_BASE,
            queries,
            TOKEN,
            budget_seconds=kw.get("budget", 5.0),
            max_pages=kw.get("max_pages", 10),
        )


@respx.mock
def test_success_sends_bearer_token_and_fhir_accept() -> None:
    route = respx.get(f"{FHIR_BASE}/Patient/lvh-pt-1042").respond(200, json=patient())
    results = run(_fetch({"patient": "Patient/lvh-pt-1042"}))
    assert results["patient"].data == patient()
    request = route.calls.last.request
    assert request.headers["authorization"] == f"Bearer {TOKEN}"
    assert request.headers["accept"] == "application/fhir+json"


@respx.mock
@pytest.mark.parametrize(("status", "kind"), [(401, "auth"), (403, "auth"), (500, "http")])
def test_server_errors_become_unavailable_without_the_token(status: int, kind: str) -> None:
    respx.get(f"{FHIR_BASE}/Patient/lvh-pt-1042").respond(status)
    result = run(_fetch({"patient": "Patient/lvh-pt-1042"}))["patient"]
    assert result.data is None and result.kind == kind
    assert str(status) in (result.error or "") and TOKEN not in (result.error or "")


@respx.mock
def test_timeout_within_budget_keeps_the_other_keys() -> None:
    async def slow(_request: httpx.Request) -> httpx.Response:
        await asyncio.sleep(2)
        return httpx.Response(200, json=searchset([]))

    respx.get(f"{FHIR_BASE}/Condition").mock(side_effect=slow)
    respx.get(f"{FHIR_BASE}/Patient/lvh-pt-1042").respond(200, json=patient())
    results = run(
        _fetch({"conditions": "Condition?patient=x", "patient": "Patient/lvh-pt-1042"}, budget=0.3)
    )
    assert results["conditions"].kind == "timeout"
    assert results["patient"].data is not None


@respx.mock
def test_transport_timeout_is_reported_as_timeout() -> None:
    respx.get(f"{FHIR_BASE}/Patient/p").mock(side_effect=httpx.ReadTimeout("slow"))
    assert run(_fetch({"patient": "Patient/p"}))["patient"].kind == "timeout"


@respx.mock
def test_pagination_follows_next_links_and_merges_entries() -> None:
    obs = sodium_series(130, 128, 126, 124)
    page2 = f"{FHIR_BASE}/Observation?page=2"
    page3 = f"{FHIR_BASE}/Observation?page=3"
    respx.get(page3).respond(200, json=searchset(obs[3:]))
    respx.get(page2).respond(200, json=searchset(obs[2:3], next_url=page3))
    respx.get(f"{FHIR_BASE}/Observation", params={"patient": "lvh-pt-1042"}).respond(
        200, json=searchset(obs[:2], next_url=page2)
    )
    data = run(_fetch({"sodium": "Observation?patient=lvh-pt-1042"}))["sodium"].data
    assert data is not None
    assert [e["resource"]["id"] for e in data["entry"]] == [o["id"] for o in obs]
    assert "link" not in data


@respx.mock
def test_pagination_stops_at_max_pages_and_on_loops() -> None:
    loop = f"{FHIR_BASE}/Observation?page=loop"
    route = respx.get(loop).respond(200, json=searchset(sodium_series(125), next_url=loop))
    respx.get(f"{FHIR_BASE}/Observation", params={"patient": "p"}).respond(
        200, json=searchset([], next_url=loop)
    )
    data = run(_fetch({"sodium": "Observation?patient=p"}, max_pages=5))["sodium"].data
    assert data is not None and route.call_count == 1  # the repeated link is not followed


@respx.mock
def test_next_link_to_another_server_is_not_followed() -> None:
    """The bearer token must never travel to a host other than fhirServer (CDS Hooks 2.0,
    Security: the access token is for that FHIR server only)."""
    foreign = respx.get("https://elsewhere.example.net/steal").respond(200, json=searchset([]))
    respx.get(f"{FHIR_BASE}/Observation", params={"patient": "p"}).respond(
        200, json=searchset([], next_url="https://elsewhere.example.net/steal")
    )
    run(_fetch({"sodium": "Observation?patient=p"}))
    assert not foreign.called


def test_prefetch_null_operation_outcome_and_missing_are_told_apart() -> None:
    outcome = {
        "resourceType": "OperationOutcome",
        "issue": [{"severity": "error", "code": "timeout", "diagnostics": "lab system busy"}],
    }
    state = check_prefetch(
        {"patient": patient(), "sodium": outcome, "labs": None}, list(prefetch_templates())
    )
    assert state.data["labs"] is None and state.data["patient"]["id"] == "lvh-pt-1042"
    assert "lab system busy" in state.unavailable["sodium"]
    assert set(state.to_fetch) == {
        "sodium",
        *(set(LAB_GROUPS) - {"labs"}),
        "medicationRequests",
        "medicationStatements",
        "conditions",
    }


class _Allow:
    def __init__(self, allowed: bool) -> None:
        self.allowed = allowed
        self.asked: list[str] = []

    def fhir_server_allowed(self, caller: object, server: str) -> bool:
        self.asked.append(server)
        return self.allowed


def _gather(body: dict, settings, allowed: bool = True):  # type: ignore[no-untyped-def]
    async def go():  # type: ignore[no-untyped-def]
        async with httpx.AsyncClient() as http:
            return await gather_data(
                parse_call(body), settings, http=http, caller=None, authenticator=_Allow(allowed)
            )

    return run(go())


@respx.mock
def test_missing_keys_are_fetched_with_filled_templates(settings) -> None:  # type: ignore[no-untyped-def]
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE, token=TOKEN)
    respx.get(f"{FHIR_BASE}/Patient/lvh-pt-1042").respond(200, json=patient())
    obs_route = respx.get(f"{FHIR_BASE}/Observation").respond(
        200, json=searchset(sodium_series(126))
    )
    for rtype in ("MedicationRequest", "MedicationStatement", "Condition"):
        respx.get(f"{FHIR_BASE}/{rtype}").respond(200, json=searchset([]))
    state = _gather(body, settings)
    assert not state.unavailable
    assert obs_route.call_count == 1 + len(LAB_GROUPS)  # sodium and each lab group, at once
    codes = [c.request.url.params["code"] for c in obs_route.calls]
    assert any(f"http://loinc.org|{NA[0]}" in c for c in codes)
    assert any(f"http://loinc.org|{OSM[0]}" in c for c in codes)
    for call in obs_route.calls:
        assert call.request.url.params["patient"] == "Patient/lvh-pt-1042"


@respx.mock
def test_operation_outcome_in_prefetch_is_refetched_when_allowed(settings) -> None:  # type: ignore[no-untyped-def]
    body = hook_request(observations=[observation("osm-1", OSM, 262, NOW)], fhir_server=FHIR_BASE)
    body["prefetch"]["sodium"] = {
        "resourceType": "OperationOutcome",
        "issue": [{"severity": "error", "code": "exception"}],
    }
    respx.get(f"{FHIR_BASE}/Observation").respond(200, json=searchset(sodium_series(127)))
    state = _gather(body, settings)
    assert "sodium" not in state.unavailable and state.data["sodium"] is not None


@respx.mock
def test_server_not_allowed_is_never_contacted_and_required_data_is_412(settings) -> None:  # type: ignore[no-untyped-def]
    evil = respx.route(host="evil.example.net")
    body = hook_request(with_prefetch=False, fhir_server="https://evil.example.net/fhir")
    auth = _Allow(False)

    async def go():  # type: ignore[no-untyped-def]
        from cds_service.hooks.service import _require

        async with httpx.AsyncClient() as http:
            state = await gather_data(parse_call(body), settings, http=http, authenticator=auth)
        _require(state)

    with pytest.raises(HookError) as info:
        run(go())
    assert info.value.status == 412
    assert auth.asked == ["https://evil.example.net/fhir"]
    assert not evil.called and not respx.calls


def test_no_authenticator_means_no_fetch(settings) -> None:  # type: ignore[no-untyped-def]
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE)

    async def go():  # type: ignore[no-untyped-def]
        return await gather_data(parse_call(body), settings, http=SimpleNamespace())

    state = run(go())
    assert {"patient", "sodium"} <= set(state.unavailable)


@pytest.mark.parametrize(
    ("url", "same"),
    [
        (f"{FHIR_BASE}/Observation?page=2", True),
        (FHIR_BASE, True),
        ("https://FHIR.larkspur-valley.example.org/r4/Observation", True),
        ("https://fhir.larkspur-valley.example.org/r4-shadow/Observation", False),
        ("http://fhir.larkspur-valley.example.org/r4/Observation", False),
        ("https://fhir.larkspur-valley.example.org:8443/r4/Observation", False),
        ("https://fhir.larkspur-valley.example.org.evil.net/r4/Observation", False),
    ],
)
def test_same_server_rule(url: str, same: bool) -> None:
    from cds_service.hooks.fetch import _same_server

    assert _same_server(url, FHIR_BASE) is same


@respx.mock
@pytest.mark.parametrize(
    ("content", "kind"),
    [
        (b"<html>maintenance</html>", "invalid"),
        (b'{"value": NaN}', "invalid"),
        (b'["not", "a", "resource"]', "invalid"),
        (b'{"resourceType": "OperationOutcome", "issue": []}', "http"),
    ],
)
def test_unusable_answers_are_not_available(content: bytes, kind: str) -> None:
    respx.get(f"{FHIR_BASE}/Patient/p").respond(200, content=content)
    assert run(_fetch({"patient": "Patient/p"}))["patient"].kind == kind


@respx.mock
def test_oversized_page_is_refused(monkeypatch: pytest.MonkeyPatch) -> None:
    import cds_service.hooks.fetch as fetch

    monkeypatch.setattr(fetch, "MAX_PAGE_BYTES", 1000)
    respx.get(f"{FHIR_BASE}/Observation").respond(200, json=searchset(sodium_series(*[130] * 20)))
    result = run(_fetch({"sodium": "Observation?patient=p"}))["sodium"]
    assert result.kind == "invalid" and "larger than 1000 bytes" in (result.error or "")
