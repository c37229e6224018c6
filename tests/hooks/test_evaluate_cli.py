"""`tonicity evaluate` (DESIGN.md command-line contract) and the Bundle-to-request client.

The client side follows HL7 CDS Hooks 2.0 "Prefetch template" (open standard): the client runs
each template's FHIR read or search and sends the result under the template's key. Search
semantics checked here are those of FHIR R4 search (open standard): ``patient`` reference,
``code`` token ``system|code`` or bare code, comma = OR, ``_sort=-date`` newest first.
"""

from __future__ import annotations

import json
import random
from datetime import timedelta
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.cli import main
from cds_service.hooks.client import build_request, run_query
from cds_service.hooks.registry import LAB_GROUPS
from tests.hooks.conformance import check_response
from tests.hooks.fhirdata import (
    NA,
    NOW,
    OSM,
    UNA,
    hook_request,
    hypotonic_fluid,
    observation,
    patient,
    sodium_series,
)


def _bundle(*resources: dict) -> dict:
    return {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [{"fullUrl": f"urn:uuid:{i}", "resource": r} for i, r in enumerate(resources)],
    }


def _write(tmp_path: Path, name: str, data: object) -> str:
    path = tmp_path / name
    path.write_text(json.dumps(data))
    return str(path)


def _evaluate(capsys, *argv: str) -> tuple[int, dict | None, str]:  # type: ignore[no-untyped-def]
    code = main(["evaluate", *argv])
    out, err = capsys.readouterr()
    return code, (json.loads(out) if code == 0 else None), err


def _codes(body: dict) -> set[str]:
    return {c["source"]["topic"]["code"] for c in body["cards"]}


def test_request_file_prints_the_response_body(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    path = _write(tmp_path, "req.json", hook_request(observations=sodium_series(128, 124)))
    code, body, err = _evaluate(capsys, path, "--now", NOW.isoformat())
    assert code == 0, err
    assert body is not None
    check_response(body)
    assert "hyponatremia-tonicity-unknown" in _codes(body)


def test_bundle_with_now_acts_as_the_cds_client(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    record = _bundle(patient(), *sodium_series(129, 126))
    path = _write(tmp_path, "record.json", record)
    code, from_bundle, err = _evaluate(capsys, path, "--now", NOW.isoformat())
    assert code == 0, err
    assert from_bundle is not None
    check_response(from_bundle)
    # the same record sent as a hook request with hand-built prefetch says the same
    req = _write(tmp_path, "req.json", hook_request(observations=sodium_series(129, 126)))
    _, from_request, _ = _evaluate(capsys, req, "--now", NOW.isoformat())
    assert from_request is not None and _codes(from_bundle) == _codes(from_request)
    assert _codes(from_bundle)


def test_now_decides_which_results_are_current(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    """Results older than the look-back window are not current (72 h default, common practice);
    a normal sodium today after low values a month ago gives no card."""
    old = sodium_series(124, last=NOW - timedelta(days=30))
    record = _bundle(patient(), *old, observation("na-today", NA, 140, NOW - timedelta(hours=1)))
    path = _write(tmp_path, "record.json", record)
    _, then, _ = _evaluate(capsys, path, "--now", (NOW - timedelta(days=30)).isoformat())
    _, today, _ = _evaluate(capsys, path, "--now", NOW.isoformat())
    assert then is not None and then["cards"]
    assert today == {"cards": []}


@pytest.mark.parametrize("as_list", [False, True])
def test_order_sign_with_draft_orders_all_selected(tmp_path, capsys, as_list: bool) -> None:  # type: ignore[no-untyped-def]
    record = _write(tmp_path, "record.json", _bundle(patient(), *sodium_series(128)))
    drafts_data = [hypotonic_fluid()] if as_list else _bundle(hypotonic_fluid())
    drafts = _write(tmp_path, "drafts.json", drafts_data)
    for hook in ("order-sign", "order-select"):
        code, body, err = _evaluate(
            capsys, record, "--hook", hook, "--draft-orders", drafts, "--now", NOW.isoformat()
        )
        assert code == 0, err
        assert body is not None
        check_response(body)
        assert "hypotonic-fluid-order" in _codes(body)


@pytest.mark.parametrize(
    ("files", "extra", "fragment"),
    [
        ({}, [], "cannot read input"),
        ({"in.json": "{oops"}, [], "not valid JSON"),
        ({"in.json": [1, 2]}, [], "neither a CDS Hooks request nor a FHIR Bundle"),
        ({"in.json": {"resourceType": "Patient"}}, [], "neither"),
        ({"in.json": _bundle(patient())}, ["--now", "yesterday"], "ISO 8601"),
        ({"in.json": _bundle(patient())}, ["--hook", "encounter-start"], "unknown hook"),
        ({"in.json": _bundle(*sodium_series(125))}, [], "exactly one Patient"),
        ({"in.json": _bundle(patient())}, ["--hook", "order-sign"], "needs --draft-orders"),
        ({"in.json": {"hook": "patient-view", "hookInstance": "x", "context": {}}}, [], "400"),
        ({"in.json": hook_request(with_prefetch=False)}, [], "412"),
        ({"in.json": hook_request()}, ["--hook", "order-sign"], "differs"),
        ({"in.json": hook_request(), "d.json": []}, ["--draft-orders", "d.json"], "applies"),
    ],
)
def test_bad_input_is_one_line_and_nonzero(  # type: ignore[no-untyped-def]
    tmp_path, capsys, files: dict, extra: list[str], fragment: str
) -> None:
    for name, data in files.items():
        (tmp_path / name).write_text(data if isinstance(data, str) else json.dumps(data))
    extra = [str(tmp_path / a) if a.endswith(".json") else a for a in extra]
    code = main(["evaluate", str(tmp_path / "in.json"), *extra])
    out, err = capsys.readouterr()
    assert code != 0 and out == ""
    assert fragment in err and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err


def test_run_query_reads_and_searches_like_a_fhir_server() -> None:
    other = observation("na-other", NA, 120, NOW, pid="someone-else")
    urine = observation("una-1", UNA, 40, NOW)
    resources = [patient(), *sodium_series(130, 127), other, urine]
    assert run_query("Patient/lvh-pt-1042", resources) == patient()
    assert run_query("Patient/unknown", resources) is None
    found = run_query(
        f"Observation?patient=lvh-pt-1042&code=http://loinc.org|{NA[0]},{OSM[0]}&_sort=-date",
        resources,
    )
    assert found is not None
    ids = [e["resource"]["id"] for e in found["entry"]]
    assert ids == ["na-1", "na-0"]  # this patient's sodium only, newest first
    wrong_system = run_query(f"Observation?code=http://snomed.info/sct|{NA[0]}", resources)
    assert wrong_system is not None and wrong_system["entry"] == []


def test_prefetch_of_a_bundle_fills_every_template_key() -> None:
    request = build_request(_bundle(patient(), *sodium_series(131)), "patient-view")
    assert request["context"] == {"patientId": "lvh-pt-1042"}
    assert request["prefetch"]["patient"]["id"] == "lvh-pt-1042"
    assert set(request["prefetch"]) == {
        "patient",
        "sodium",
        *LAB_GROUPS,
        "medicationRequests",
        "medicationStatements",
        "conditions",
    }


@settings(max_examples=30, deadline=None)
@given(st.randoms(use_true_random=False))
def test_prefetch_does_not_depend_on_bundle_order(rnd: random.Random) -> None:
    """Law: a search result is a set ordered by _sort, whatever the order of the record."""
    resources = [patient(), *sodium_series(133, 130, 128, 125), observation("o", OSM, 270, NOW)]
    shuffled = resources[:]
    rnd.shuffle(shuffled)
    assert build_request(_bundle(*shuffled), "patient-view") == build_request(
        _bundle(*resources), "patient-view"
    )
