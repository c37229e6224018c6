"""The fetch path against a FHIR server nobody here wrote: Medplum (@medplum/fhir-router,
Apache-2.0), an open-source FHIR R4 implementation, serving the sample Bundles on loopback.

What is checked against it (sources: CDS Hooks 2.0.1, "Prefetch Template": prefetched data
MUST be equivalent to what the service would get from the FHIR server with the filled
template; HL7 FHIR R4 RESTful API, "Search" and "Paging"):

- every prefetch template the services declare, filled for a sample patient and run on the
  server (all pages), returns exactly the resources ``tonicity evaluate`` gives the same
  query on that patient's Bundle (patient, sodium, each laboratory group, medications,
  problems);
- a hook call with no prefetch, fetching everything from the server, gives the same cards as
  the sample's own fully prefetched request; so does a prefetch of first pages only, with
  their ``next`` links followed on the server;
- the patient is asked for in the typed reference form (``patient=Patient/{id}``): Medplum,
  like FHIR R4 lets a server do, finds nothing with a bare id.

The server is plain http on 127.0.0.1, so these calls run as a local trial (the https rule
applies outside one and is tested in tests/hooks/test_access.py).
"""

from __future__ import annotations

import asyncio
import json
from datetime import datetime
from pathlib import Path
from typing import Any

import httpx
import pytest

from cds_service.clinical.thresholds import load_thresholds
from cds_service.config import load_settings
from cds_service.hooks.client import build_request, flatten, run_query
from cds_service.hooks.fetch import fetch_query
from cds_service.hooks.registry import fill, prefetch_templates
from cds_service.hooks.service import evaluate
from tests.fhirserver.conftest import STORIES

SAMPLES = Path(__file__).parent.parent.parent / "sample_bundles"
MANIFEST = json.loads((SAMPLES / "manifest.json").read_text())
NOW = datetime.fromisoformat(MANIFEST["now"].replace("Z", "+00:00"))


def _record(name: str) -> list[dict[str, Any]]:
    return list(flatten([json.loads((SAMPLES / "bundles" / name).read_text())]))


def _patient_id(resources: list[dict[str, Any]]) -> str:
    return next(r["id"] for r in resources if r["resourceType"] == "Patient")


def _ids(result: dict[str, Any] | None) -> list[str]:
    if result is None:
        return []
    if result["resourceType"] != "Bundle":
        return [f"{result['resourceType']}/{result['id']}"]
    return sorted(
        f"{e['resource']['resourceType']}/{e['resource']['id']}" for e in result.get("entry", [])
    )


async def _fetch(base: str, query: str) -> dict[str, Any]:
    async with httpx.AsyncClient(timeout=30) as http:
        return await fetch_query(http, base, query, None, max_pages=50)


class _LocalTrial:
    """The authenticator's answer in a local trial: any fhirServer may be contacted."""

    def fhir_server_allowed(self, caller: object, server: str) -> bool:
        return True


def _settings(tmp_path: Path) -> Any:
    return load_settings(
        None,
        storage={"url": f"sqlite:///{tmp_path / 'fs.db'}"},
        auth={"required": False},
        local_trial=True,
        fhir={"time_budget_seconds": 30, "max_pages": 50},
    )


def _cards(body: dict[str, Any], settings: Any) -> list[dict[str, Any]]:
    """The cards of a hook call evaluated at the samples' time, fetching from the server."""

    async def go() -> dict[str, Any]:
        async with httpx.AsyncClient(timeout=30) as http:
            outcome = await evaluate(
                body,
                settings=settings,
                thresholds=load_thresholds(settings.clinical),
                now=NOW,
                http=http,
                authenticator=_LocalTrial(),
            )
            return outcome.response

    return list(asyncio.run(go())["cards"])


def _codes(body: dict[str, Any], settings: Any) -> list[str]:
    return sorted(c["source"]["topic"]["code"] for c in _cards(body, settings))


@pytest.mark.parametrize("name", STORIES)
@pytest.mark.parametrize("key", list(prefetch_templates()))
def test_every_template_returns_what_the_record_holds(
    fhir_server: str, name: str, key: str
) -> None:
    resources = _record(name)
    query = fill(prefetch_templates()[key], {"patientId": _patient_id(resources)})
    expected = _ids(run_query(query, resources))
    got = _ids(asyncio.run(_fetch(fhir_server, query)))
    assert got == expected, f"{key} of {name}"


def test_templates_find_data_on_the_server(fhir_server: str) -> None:
    """Guard against a vacuous match: across the stories every key returns something."""
    empty = set(prefetch_templates()) - {"medicationStatements"}  # no sample has one
    for name in STORIES:
        resources = _record(name)
        for key in list(empty):
            query = fill(prefetch_templates()[key], {"patientId": _patient_id(resources)})
            if _ids(asyncio.run(_fetch(fhir_server, query))):
                empty.discard(key)
    assert not empty, f"no story has data under {sorted(empty)}"


def test_a_bare_patient_id_finds_nothing_on_this_server(fhir_server: str) -> None:
    """Why the templates use the typed form: FHIR R4 search, reference parameters (a server
    may require ``Type/id``); Medplum does."""
    bare = asyncio.run(_fetch(fhir_server, "Observation?patient=lvh-p14&_count=5"))
    typed = asyncio.run(_fetch(fhir_server, "Observation?patient=Patient/lvh-p14&_count=5"))
    assert _ids(bare) == [] and len(_ids(typed)) > 5  # typed: all pages, merged


def test_paging_with_next_links_returns_every_result_once(fhir_server: str) -> None:
    """FHIR R4 RESTful API, Paging: following ``next`` from a small page size gives the same
    set as one large page."""
    query = "Observation?patient=Patient/lvh-p14&_sort=-date&_count={n}"
    small = _ids(asyncio.run(_fetch(fhir_server, query.format(n=3))))
    large = _ids(asyncio.run(_fetch(fhir_server, query.format(n=1000))))
    observations = [
        r for r in _record("p14-overcorrection.json") if r["resourceType"] == "Observation"
    ]
    assert small == large and len(small) == len(observations)


@pytest.mark.parametrize("name", STORIES)
def test_fetching_everything_gives_the_cards_of_the_full_prefetch(
    fhir_server: str, name: str, tmp_path: Path
) -> None:
    settings = _settings(tmp_path)
    record = json.loads((SAMPLES / "bundles" / name).read_text())
    prefetched = build_request(record, "patient-view")
    fetched = {k: v for k, v in prefetched.items() if k != "prefetch"}
    fetched["fhirServer"] = fhir_server
    assert _codes(fetched, settings) == _codes(prefetched, settings)


def test_first_pages_with_next_links_are_followed(fhir_server: str, tmp_path: Path) -> None:
    """A client that paginates its prefetch (CDS Hooks 2.0.1: a CDS Client MAY paginate):
    the service reads the rest from the server and gives the cards of the whole record."""
    settings = _settings(tmp_path)
    name = "p14-overcorrection.json"
    full = build_request(json.loads((SAMPLES / "bundles" / name).read_text()), "patient-view")
    paged = json.loads(json.dumps(full))
    for key, template in prefetch_templates().items():
        if template.startswith("Observation?"):
            query = fill(template, full["context"]).rsplit("&_count=", 1)[0] + "&_count=2"
            paged["prefetch"][key] = asyncio.run(_first_page(fhir_server, query))
    sodium = paged["prefetch"]["sodium"]
    assert any(link["relation"] == "next" for link in sodium["link"])
    assert _details_say_read_in_part(paged, settings)  # without the server: flagged
    paged["fhirServer"] = fhir_server
    assert not _details_say_read_in_part(paged, settings)  # followed: nothing to flag
    assert _codes(paged, settings) == _codes(full, settings)


def _details_say_read_in_part(body: dict[str, Any], settings: Any) -> bool:
    cards = _cards(body, settings)
    assert cards
    return all("Read in part" in c["detail"] for c in cards)


async def _first_page(base: str, query: str) -> dict[str, Any]:
    async with httpx.AsyncClient(timeout=30) as http:
        response = await http.get(f"{base}/{query}")
        response.raise_for_status()
        return dict(response.json())
