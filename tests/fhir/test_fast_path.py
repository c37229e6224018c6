"""The per-shape fast path of Observation reading gives exactly what the general path gives.

A hook call reads Observations through ``ObservationReader.fast`` (report lines off); the
``tonicity inspect`` report reads every one through ``ObservationReader.read``. The law
(common practice for an optimisation: it must not change an answer) is that both give the same
clinical context, for well-formed records with every variation a laboratory feed shows: several
analytes and units, statuses, other patients, duplicates, comparators, times after now,
implausible values, units that do not convert, components, and shapes shared by many results;
Observation.method and specimen (direct against indirect ISE), a local coding before the
LOINC one, and results flagged (interpretation LL) with a dataAbsentReason and no number.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte
from cds_service.config import IngestSettings
from cds_service.fhir import build_context
from cds_service.fhir.observations import ObservationReader
from cds_service.fhir.report import ReportBuilder
from tests.fhir.factory import LOINC, NOW, PATIENT_ID, UCUM, patient

SAMPLES = Path(__file__).resolve().parents[2] / "sample_bundles"

# LOINC codes from the project's map (tests/fhir/test_loinc.py checks their check digits):
# serum sodium, serum glucose, serum osmolality; 8310-5 (body temperature) is not mapped.
_CODES = st.sampled_from(["2951-2", "2345-7", "2692-2", "8310-5"])
_UNITS = st.sampled_from(
    [
        {"unit": "mmol/L", "system": UCUM, "code": "mmol/L"},
        {"unit": "mEq/L"},
        {"unit": "mg/dL", "system": UCUM, "code": "mg/dL"},
        {"unit": "mosm/kg", "system": UCUM, "code": "mosm/kg"},
        {"unit": "furlongs"},
        {},
    ]
)
_STATUS = st.sampled_from(["final", "final", "amended", "preliminary", "cancelled", None])
_SUBJECT = st.sampled_from([f"Patient/{PATIENT_ID}"] * 4 + ["Patient/lvh-9999", None])
_TIMES = st.sampled_from(
    # NOW is 2026-11-30T12:00Z; one time is after it, one has no zone, one is a date.
    ["2026-11-30T08:00:00Z", "2026-11-29T20:00:00Z", "2026-11-30T08:00:00", "2026-11-28",
     "2026-11-30T13:00:00Z", "2026-11-25T06:30:00+02:00"]
)  # fmt: skip
_INTERPRETATION = "http://terminology.hl7.org/CodeSystem/v3-ObservationInterpretation"
_VALUES = (
    st.integers(min_value=-5, max_value=400)
    | st.floats(min_value=-5, max_value=400, allow_nan=False)
    | st.sampled_from([True, "131", 0, 99999])
)


@st.composite
def _observation(draw: st.DrawFn, index: int) -> dict[str, Any]:
    obs: dict[str, Any] = {
        "resourceType": "Observation",
        "id": draw(st.sampled_from([f"o{index}", f"o{index}", "dup"])),
        "code": {"coding": [{"system": LOINC, "code": draw(_CODES)}]},
        "effectiveDateTime": draw(_TIMES),
    }
    status = draw(_STATUS)
    if status is not None:
        obs["status"] = status
    subject = draw(_SUBJECT)
    if subject is not None:
        obs["subject"] = {"reference": subject}
    quantity = {"value": draw(_VALUES), **draw(_UNITS)}
    if draw(st.booleans()) and draw(st.booleans()):
        quantity["comparator"] = draw(st.sampled_from(["<", ">=", "~"]))
    if draw(st.booleans()):
        obs["method"] = {"text": draw(st.sampled_from(["direct ISE", "indirect ISE", "other"]))}
    if draw(st.booleans()):
        obs["specimen"] = {"display": draw(st.sampled_from(["whole blood", "serum", "urine"]))}
    if draw(st.booleans()):  # a local code before the LOINC one (LOINC is chosen)
        obs["code"]["coding"].insert(0, {"system": "urn:lvh:lab", "code": "NA1"})
    if draw(st.integers(0, 9)) == 0:
        obs["component"] = [
            {"code": {"coding": [{"system": LOINC, "code": "2951-2"}]}, "valueQuantity": quantity}
        ]
    elif draw(st.integers(0, 9)) == 0:
        obs["dataAbsentReason"] = {"text": "sample haemolysed"}
        obs["interpretation"] = [{"coding": [{"system": _INTERPRETATION, "code": "LL"}]}]
    else:
        obs["valueQuantity"] = quantity
    return obs


@st.composite
def _records(draw: st.DrawFn) -> list[dict[str, Any]]:
    n = draw(st.integers(min_value=1, max_value=25))
    # Many results of few shapes, as a laboratory feed sends them: copies with new ids.
    base = [draw(_observation(i)) for i in range(n)]
    copies = [
        {**draw(st.sampled_from(base)), "id": f"c{i}", "effectiveDateTime": draw(_TIMES)}
        for i in range(draw(st.integers(0, 10)))
    ]
    return [patient(), *base, *copies]


def _both(
    resources: list[Any], now: datetime = NOW, patient_id: str | None = PATIENT_ID
) -> tuple[Any, Any]:
    def run(report_lines: bool) -> Any:
        return build_context(
            json.loads(json.dumps(resources)),  # a fresh copy each time, as from the wire
            now=now,
            settings=IngestSettings(),
            patient_id=patient_id,
            report_lines=report_lines,
        ).context

    return run(True), run(False)


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(resources=_records())
def test_fast_and_general_paths_read_the_same_context(resources: list[dict[str, Any]]) -> None:
    general, fast = _both(resources)
    assert fast == general


@pytest.mark.parametrize("path", sorted((SAMPLES / "bundles").glob("*.json")), ids=lambda p: p.stem)
def test_every_sample_bundle_reads_the_same_both_ways(path: Path) -> None:
    data = json.loads(path.read_text(encoding="utf-8"))
    now = datetime(2026, 3, 14, 9, 0, tzinfo=UTC)  # the samples' evaluation time (manifest)
    general, fast = _both([data], now, patient_id=None)  # the Bundle's own Patient
    assert fast == general
    assert fast.series  # the sample has results: the comparison is not between two empties


def test_plain_results_take_the_fast_path_once_per_shape() -> None:
    reader = ObservationReader(NOW, ReportBuilder(enabled=False), lambda _a: NotImplemented)
    sodium = {
        "resourceType": "Observation",
        "status": "final",
        "code": {"coding": [{"system": LOINC, "code": "2951-2"}]},
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
        "valueQuantity": {"value": 128, "unit": "mmol/L", "system": UCUM, "code": "mmol/L"},
    }
    for i, (value, hour) in enumerate([(128, 6), (129.5, 7), (131, 8)]):
        obs = {**sodium, "id": f"na{i}", "effectiveDateTime": f"2026-11-30T0{hour}:00:00Z"}
        obs["valueQuantity"] = {**sodium["valueQuantity"], "value": value}
        assert reader.fast(obs, f"Observation/na{i}", lambda _r: True)
    assert len(reader._plans) == 1  # one shape, planned once
    assert [(r.analyte, r.value, r.raw) for r in reader.results] == [
        (Analyte.SODIUM, 128.0, "128 mmol/L"),
        (Analyte.SODIUM, 129.5, "129.5 mmol/L"),
        (Analyte.SODIUM, 131.0, "131 mmol/L"),
    ]


def test_what_needs_a_reason_is_left_to_the_general_path() -> None:
    reader = ObservationReader(NOW, ReportBuilder(enabled=False), lambda _a: NotImplemented)
    base = {
        "resourceType": "Observation",
        "id": "x",
        "status": "final",
        "code": {"coding": [{"system": LOINC, "code": "2951-2"}]},
        "effectiveDateTime": "2026-11-30T08:00:00Z",
        "valueQuantity": {"value": 128, "unit": "mmol/L"},
    }
    refused = [
        {**base, "valueQuantity": {"value": 1280, "unit": "mmol/L"}},  # implausible
        {**base, "valueQuantity": {"value": 128, "unit": "furlongs"}},  # no conversion
        {**base, "valueQuantity": {"value": "128", "unit": "mmol/L"}},  # a string
        {**base, "status": "cancelled"},
        {**base, "effectiveDateTime": "2026-11-30T13:00:00Z"},  # after now
        {**base, "code": {"coding": [{"system": LOINC, "code": "8310-5"}]}},  # not mapped
    ]
    for obs in refused:
        assert not reader.fast(obs, "Observation/x", lambda _r: True), obs
    other = {**base, "subject": {"reference": "Patient/lvh-9999"}}
    assert not reader.fast(other, "Observation/x", lambda _r: False)
    assert reader.results == []


def test_a_shape_the_key_cannot_write_is_read_by_the_general_path() -> None:
    """The shape key is the JSON text of the shape fields (orjson). What orjson cannot write
    (an integer over 64 bits or a lone surrogate, which a caller building resources in Python
    can hand in, or nesting deeper than it goes) is left to the general path, which reads it as
    before; and values equal in Python but not in JSON (1, 1.0, true) are separate shapes."""
    reader = ObservationReader(NOW, ReportBuilder(enabled=False), lambda _a: NotImplemented)
    sodium = {
        "resourceType": "Observation",
        "id": "na",
        "status": "final",
        "code": {"coding": [{"system": LOINC, "code": "2951-2"}]},
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
        "effectiveDateTime": "2026-11-30T08:00:00Z",
        "valueQuantity": {"value": 128, "unit": "mmol/L", "system": UCUM, "code": "mmol/L"},
    }
    deep: Any = {}
    for _ in range(300):
        deep = {"x": deep}
    unwritable = [
        {**sodium, "method": {"text": "direct", "extension": [{"valueInteger": 2**70}]}},
        {**sodium, "method": {"text": "\ud800"}},
        {**sodium, "specimen": deep},
    ]
    for obs in unwritable:
        assert not reader.fast(obs, "Observation/na", lambda _r: True)
    assert reader._plans == {} and reader.results == []
    for i, flag in enumerate([1, 1.0, True]):
        obs = {**sodium, "id": f"n{i}", "effectiveDateTime": f"2026-11-30T0{i + 5}:00:00Z"}
        obs["method"] = {"coding": [{"system": "urn:x", "code": "a", "userSelected": flag}]}
        reader.fast(obs, f"Observation/n{i}", lambda _r: True)
    assert len(reader._plans) == 3
