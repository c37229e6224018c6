"""The FHIR access token never leaves fhirServer through dot segments in a link or an id.

Sources: RFC 3986 (Berners-Lee, Fielding, Masinter 2005), section 5.2.4 "Remove Dot Segments"
and section 5.4.2 "Abnormal Examples" (a path may climb above its base with ``..``); section
2.4 (percent-encoded octets are decoded by the server, so ``%2e%2e`` is read as ``..``);
HL7 FHIR R4 datatype ``id`` (``[A-Za-z0-9\\-\\.]{1,64}``); CDS Hooks 2.0.1, "FHIR Resource
Access" (the token is for the CDS Client's FHIR server only).
"""

from __future__ import annotations

import asyncio

import httpx
import pytest
import respx
from hypothesis import given
from hypothesis import strategies as st

from cds_service.hooks.fetch import _same_server, fetch_all
from cds_service.hooks.service import HookError, parse_call
from tests.hooks.fhirdata import FHIR_BASE, hook_request, searchset, sodium_series

TOKEN = "lvh-access-token-not-a-real-one"
HOST = "https://fhir.larkspur-valley.example.org"


@pytest.mark.parametrize(
    "url",
    [
        f"{FHIR_BASE}/../admin/Patient",  # RFC 3986 5.2.4: /r4/../admin -> /admin
        f"{FHIR_BASE}/Observation/../../admin",
        f"{FHIR_BASE}/./../admin",
        f"{FHIR_BASE}/..",
        f"{FHIR_BASE}/%2e%2e/admin",  # section 2.4: a server decodes %2e to "."
        f"{FHIR_BASE}/%2E%2E/admin",
        f"{FHIR_BASE}/.%2e/admin",
        f"{FHIR_BASE}/%2e./admin",
        f"{FHIR_BASE}/a%2f..%2f..%2fadmin",  # encoded slashes: decoded into segments
        f"{FHIR_BASE}/..%5cadmin",  # an encoded backslash (some servers treat it as /)
        f"{FHIR_BASE}\\..\\admin",
        "https://user@fhir.larkspur-valley.example.org/r4/Observation",
    ],
)
def test_dot_segment_links_leave_the_server(url: str) -> None:
    assert _same_server(url, FHIR_BASE) is False


@pytest.mark.parametrize(
    "url",
    [
        f"{FHIR_BASE}/Observation?page=2",
        f"{FHIR_BASE}/./Observation?page=2",  # stays under /r4 once normalised
        f"{FHIR_BASE}/a/../Observation",
        f"{HOST}:443/r4/Observation",  # the default port is the same port
        f"{FHIR_BASE}/Observation?_offset=..",  # dots in the query are not path segments
    ],
)
def test_links_that_stay_on_the_server_are_followed(url: str) -> None:
    assert _same_server(url, FHIR_BASE) is True


@given(depth=st.integers(min_value=1, max_value=4), tail=st.sampled_from(["admin", "x/y", ""]))
def test_climbing_above_the_base_is_never_the_same_server(depth: int, tail: str) -> None:
    """Law (RFC 3986 5.2.4): after one more ``..`` than segments below the base, the path is
    outside it, whatever follows."""
    below = "/".join(f"s{i}" for i in range(depth - 1))
    url = f"{FHIR_BASE}/{below + '/' if below else ''}{'../' * depth}{tail}"
    assert _same_server(url, FHIR_BASE) is False


@respx.mock
@pytest.mark.parametrize("evil", ["/r4/../admin/export", "/r4/%2e%2e/admin/export"])
def test_next_link_with_dot_segments_never_receives_the_token(evil: str) -> None:
    """Before the fix the raw path ``/r4/../admin`` started with ``/r4/`` and httpx, which
    removes dot segments when it sends, delivered the bearer token to ``/admin``."""
    admin = respx.route(host="fhir.larkspur-valley.example.org", path__startswith="/admin")
    admin.respond(200, json=searchset(sodium_series(120)))
    respx.get(f"{FHIR_BASE}/Observation", params={"patient": "Patient/p"}).respond(
        200, json=searchset(sodium_series(130), next_url=f"{HOST}{evil}")
    )

    async def go():  # type: ignore[no-untyped-def]
        async with httpx.AsyncClient() as http:
            return await fetch_all(
                http,
                FHIR_BASE,
                {"sodium": "Observation?patient=Patient/p"},
                TOKEN,
                budget_seconds=5,
                max_pages=5,
            )

    result = asyncio.run(go())["sodium"]
    assert not admin.called
    assert result.data is not None and len(result.data["entry"]) == 1


@pytest.mark.parametrize("pid", [".", ".."])
def test_patient_id_that_is_a_dot_segment_is_refused(pid: str) -> None:
    """``Patient/..`` resolves to the server root (RFC 3986 5.2.4) although ``..`` matches the
    FHIR id pattern."""
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE)
    body["context"]["patientId"] = pid
    with pytest.raises(HookError) as info:
        parse_call(body)
    assert info.value.status == 400 and "FHIR id" in info.value.message


@pytest.mark.parametrize("pid", ["a/b", "a?b", "a b", "x" * 65, "", "%2e%2e"])
def test_patient_id_outside_the_fhir_id_pattern_is_refused(pid: str) -> None:
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE)
    body["context"]["patientId"] = pid
    with pytest.raises(HookError) as info:
        parse_call(body)
    assert info.value.status == 400


@pytest.mark.parametrize("pid", ["lvh-pt-1042", "a.b", "A1-2.3", "x" * 64, "..."])
def test_patient_ids_of_the_pattern_are_accepted(pid: str) -> None:
    body = hook_request(with_prefetch=False, fhir_server=FHIR_BASE)
    body["context"]["patientId"] = pid
    assert parse_call(body).patient_id == pid
