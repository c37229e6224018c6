"""build_context never raises, whatever JSON it gets; big bundles are read whole."""

from __future__ import annotations

from typing import Any

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cds_service.clinical.context import Analyte
from tests.fhir.factory import NOW, PATIENT_ID, bundle, ingest, observation

_SCALARS = st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=12)
_JSON = st.recursive(
    _SCALARS,
    lambda children: (
        st.lists(children, max_size=4) | st.dictionaries(st.text(max_size=8), children, max_size=4)
    ),
    max_leaves=20,
)
_KEYS = st.sampled_from(
    [
        "resourceType",
        "id",
        "status",
        "code",
        "valueQuantity",
        "valueString",
        "component",
        "effectiveDateTime",
        "effectivePeriod",
        "issued",
        "subject",
        "entry",
        "resource",
        "medicationCodeableConcept",
        "medicationReference",
        "contained",
        "clinicalStatus",
        "birthDate",
        "gender",
        "dosageInstruction",
        "ingredient",
        "dataAbsentReason",
    ]
)
_TYPES = st.sampled_from(
    [
        "Observation",
        "Bundle",
        "Patient",
        "Condition",
        "MedicationRequest",
        "MedicationStatement",
        "MedicationAdministration",
        "Medication",
        "ServiceRequest",
        7,
        None,
    ]
)
_FHIRISH = st.fixed_dictionaries(
    {"resourceType": _TYPES}, optional={"id": st.text(max_size=4)}
).flatmap(
    lambda base: st.dictionaries(_KEYS, _JSON, max_size=6).map(lambda extra: {**extra, **base})
)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    resources=st.lists(_JSON | _FHIRISH, max_size=6), drafts=st.lists(_JSON | _FHIRISH, max_size=3)
)
def test_never_raises_on_arbitrary_json(resources: list[Any], drafts: list[Any]) -> None:
    res = ingest(*resources, drafts=tuple(drafts))
    assert res.context.now is not None
    for line in res.report.lines:
        assert isinstance(line.reason, str)


@settings(max_examples=200, deadline=None)
@given(value=_JSON, unit=_JSON, code=_JSON, status=_JSON, when=_JSON)
def test_observation_fields_of_any_type(
    value: Any, unit: Any, code: Any, status: Any, when: Any
) -> None:
    obs = observation("x", "2951-2", None)
    obs.update(
        status=status,
        effectiveDateTime=when,
        valueQuantity={"value": value, "unit": unit, "code": code},
    )
    res = ingest(obs, bundle(obs))
    used = [line for line in res.report.lines if line.used]
    assert len(res.context.series.get(Analyte.SODIUM, ())) == len(used)


def test_non_iterables_and_garbage_inputs() -> None:
    from datetime import UTC, datetime

    from cds_service.config import IngestSettings
    from cds_service.fhir import build_context

    for junk in (None, 5, "text", b"bytes", {"resourceType": "Bundle", "entry": "nope"}):
        out = build_context(junk, now=datetime(2026, 1, 1), settings=IngestSettings())  # type: ignore[arg-type]
        assert out.context.now == datetime(2026, 1, 1, tzinfo=UTC)  # naive now read as UTC
        assert out.context.series == {} and out.report.used() == []


def test_five_thousand_observations_are_read_without_error() -> None:
    obs = [
        observation(
            f"n{i}",
            "2951-2",
            120 + i % 20,
            when=f"2026-11-{1 + i % 29:02d}T{i % 24:02d}:{i % 60:02d}:00Z",
        )
        for i in range(5000)
    ]
    res = ingest(bundle(*obs))
    assert len(res.report.lines) == 5000
    series = res.context.series[Analyte.SODIUM]
    used = sum(1 for line in res.report.lines if line.used)
    assert len(series) == used > 0


def test_a_reader_failure_costs_one_resource_not_the_request(monkeypatch) -> None:
    from cds_service.fhir import conditions

    def broken(*_args: object) -> list:
        raise RuntimeError("simulated reader bug")

    monkeypatch.setattr(conditions, "match", broken)
    cond = {"resourceType": "Condition", "id": "c1", "code": {"text": "x"}}
    res = ingest(cond, observation("na", "2951-2", 127))
    assert res.context.current[Analyte.SODIUM].value == 127
    (line,) = [x for x in res.report.lines if x.resource == "Condition/c1"]
    assert line.reason == "could not be read (RuntimeError)" and not line.used


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    resources=st.lists(_JSON | _FHIRISH, max_size=6), drafts=st.lists(_JSON | _FHIRISH, max_size=3)
)
def test_skipping_report_lines_leaves_the_context_unchanged(
    resources: list[Any], drafts: list[Any]
) -> None:
    # Law (common practice): the report is a by-product; a hook call that does not show it
    # (report_lines=False) must read exactly the same clinical context.
    from cds_service.config import IngestSettings
    from cds_service.fhir import build_context

    def run(report_lines: bool) -> Any:
        return build_context(
            list(resources),
            now=NOW,
            settings=IngestSettings(),
            patient_id=PATIENT_ID,
            draft_orders=tuple(drafts),
            report_lines=report_lines,
        )

    full, lean = run(True), run(False)
    assert lean.context == full.context
    assert lean.report.lines == ()


@settings(max_examples=200, deadline=None)
@given(
    values=st.lists(st.tuples(_JSON, _JSON, st.integers(0, 59)), min_size=1, max_size=5),
    shared_unit=st.sampled_from(["mmol/L", "mEq/L", None]),
)
def test_shared_validation_answers_as_one_validation_each(
    values: list[tuple[Any, Any, int]], shared_unit: str | None
) -> None:
    # Law: validating Observations one by one and through the per-request memo (which shares
    # one check between results that differ in id, time and numeric value) give one answer
    # (times here are well formed: the memo leaves time syntax to times.parse_datetime).
    from cds_service.fhir import validate

    memo: dict[bytes, str | None] = {}
    for i, (value, status, minute) in enumerate(values):
        obs = observation(f"m{i}", "2951-2", None)
        obs.update(
            status=status if i % 2 else "final",
            effectiveDateTime=f"2026-11-30T10:{minute:02d}:00Z",
            valueQuantity={"value": value, "unit": shared_unit, "code": shared_unit},
        )
        assert validate.problem(obs, memo) == validate.problem(obs)
