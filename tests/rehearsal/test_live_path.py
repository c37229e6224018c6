"""The rehearsal's figures equal a replay of the same patients through the live evaluation
path, ``hooks/service.py::evaluate_request`` on the CDS Hooks request a record system would
send (``hooks.client.build_request``), at the same moments on the same slice of the record."""

from __future__ import annotations

import gzip
from collections import Counter
from datetime import timedelta
from itertools import pairwise
from pathlib import Path

import orjson
from hypothesis import given
from hypothesis import strategies as st

from cds_service.clinical.thresholds import load_thresholds
from cds_service.config import load_settings
from cds_service.hooks.client import build_request
from cds_service.hooks.service import evaluate_request_sync
from cds_service.rehearsal import tally, timeslice
from cds_service.rehearsal.patient import Env, load_record, patient_id_of, rehearse_patient
from cds_service.rehearsal.runner import alert_settings
from tests.rehearsal.conftest import END, START


def _records(export_dir: Path) -> dict[str, list[bytes]]:
    by: dict[str, list[bytes]] = {}
    for path in sorted(export_dir.glob("*.ndjson*")):
        opener = gzip.open if path.name.endswith(".gz") else open
        with opener(path, "rb") as fh:
            for line in fh:
                try:
                    res = orjson.loads(line)
                except orjson.JSONDecodeError:
                    continue  # the planted malformed lines
                ref = res.get("subject", {}).get("reference", "")
                pid = res["id"] if res["resourceType"] == "Patient" else ref.split("/")[-1]
                by.setdefault(pid, []).append(line)
    return by


def _live(record, pid: str, event, settings, thresholds) -> list[tuple[str, str]]:
    present = timeslice.as_of(record, event.at, leave_out=event.order)
    bundle = {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [{"resource": t.at(event.at)} for t in present],
    }
    drafts = [timeslice.as_draft(event.order)] if event.order else None
    body = build_request(bundle, event.hook, drafts)
    response = evaluate_request_sync(body, settings=settings, thresholds=thresholds, now=event.at)
    return sorted((c["source"]["topic"]["code"], c["indicator"]) for c in response["cards"])


def test_figures_match_the_live_path(export_dir: Path, embedded) -> None:
    report, _ = embedded
    settings = load_settings(None)
    thresholds = load_thresholds(settings.clinical)
    env = Env(settings, thresholds, alert_settings(settings), START, END)
    live: Counter[str] = Counter()
    rehearsed: Counter[str] = Counter()
    calls = 0
    for lines in _records(export_dir).values():
        record = load_record(lines)
        pid = patient_id_of(record)
        assert pid is not None
        outcome = rehearse_patient(lines, env, trace=True)
        assert outcome is not None
        events = timeslice.events(record, START, END)
        assert [(e.hook, e.at) for e in events] == [(c.hook, c.at) for c in outcome.trace]
        for event, call in zip(events, outcome.trace, strict=True):
            cards = _live(record, pid, event, settings, thresholds)
            # the live path without a store has no history: it shows what was evaluated
            assert cards == sorted((code, ind) for code, ind, _ in call.decisions), (pid, event)
            live.update(f"{code}|{ind}" for code, ind in cards)
            calls += 1
        rehearsed.update(f"{c}|{i}" for _, c, i, _ in outcome.decisions)
    assert calls == sum(report["calls"].values())
    assert live == rehearsed
    assert {
        f"{c['finding_code']}|{c['indicator']}": c["evaluated"] for c in report["cards"]
    } == live


def test_the_record_as_it_stood(export_dir: Path) -> None:
    # An order completed after the moment was active then; a result issued after it is not
    # yet in the record; a problem resolved after it was active then (FHIR R4
    # MedicationRequest.status, Condition.clinicalStatus value sets).
    lines = [
        orjson.dumps(r)
        for r in [
            {"resourceType": "Patient", "id": "lvh-t1", "birthDate": "1950-01-01"},
            {
                "resourceType": "MedicationRequest",
                "id": "m1",
                "status": "completed",
                "intent": "order",
                "subject": {"reference": "Patient/lvh-t1"},
                "authoredOn": "2026-01-02T08:00:00Z",
                "dispenseRequest": {"validityPeriod": {"end": "2026-01-03T08:00:00Z"}},
            },
            {
                "resourceType": "Observation",
                "id": "o1",
                "status": "final",
                "subject": {"reference": "Patient/lvh-t1"},
                "effectiveDateTime": "2026-01-02T09:00:00Z",
                "issued": "2026-01-02T10:00:00Z",
            },
            {
                "resourceType": "Condition",
                "id": "c1",
                "subject": {"reference": "Patient/lvh-t1"},
                "clinicalStatus": {"coding": [{"code": "resolved"}]},
                "recordedDate": "2026-01-01T00:00:00Z",
                "abatementDateTime": "2026-01-05T00:00:00Z",
            },
        ]
    ]
    record = load_record(lines)
    moment = START + timedelta(days=1, hours=9, minutes=30)
    now = {t.resource["id"]: t.at(moment) for t in timeslice.as_of(record, moment)}
    assert set(now) == {"lvh-t1", "m1", "c1"}
    assert now["m1"]["status"] == "active"
    assert now["c1"]["clinicalStatus"]["coding"][0]["code"] == "active"
    later = START + timedelta(days=6)
    after = {t.resource["id"]: t.at(later) for t in timeslice.as_of(record, later)}
    assert after["m1"]["status"] == "completed" and "o1" in after


@given(st.lists(st.integers(0, 2000), min_size=2, max_size=6))
def test_record_only_grows_with_time(hours: list[int]) -> None:
    """Law: what was in the record at a moment is in it at every later moment."""
    lines = [orjson.dumps({"resourceType": "Patient", "id": "lvh-t2"})] + [
        orjson.dumps(
            {
                "resourceType": "Observation",
                "id": f"o{i}",
                "status": "final",
                "subject": {"reference": "Patient/lvh-t2"},
                "issued": (START + timedelta(hours=h)).isoformat(),
            }
        )
        for i, h in enumerate(hours)
    ]
    record = load_record(lines)
    moments = sorted(START + timedelta(hours=h) for h in hours)
    seen = [{id(t) for t in timeslice.as_of(record, m)} for m in moments]
    assert all(a <= b for a, b in pairwise(seen))


@given(st.permutations(range(6)), st.integers(1, 5))
def test_merged_figures_do_not_depend_on_partitioning(order: list[int], cut: int) -> None:
    """Law: merging tallies is associative and commutative (sorted lists, integer sums)."""
    parts = []
    for i in range(6):
        t = tally.empty()
        t["patients"] = i + 1
        t["cards"] = {f"code-{i % 3}|info": {"show": i, "suppressed": 1}}
        t["shown_days"] = {f"code-{i % 3}|info": {str(i): i}}
        t["osmolality_minutes"] = [i * 7 % 5, i]
        t["breaches"] = [{"rise_end": f"2026-01-0{i + 1}", "patient": f"p{i}"}]
        parts.append(t)
    whole = tally.merge(parts)
    shuffled = [parts[i] for i in order]
    two_step = tally.merge([tally.merge(shuffled[:cut]), tally.merge(shuffled[cut:])])
    assert orjson.dumps(two_step) == orjson.dumps(whole)
