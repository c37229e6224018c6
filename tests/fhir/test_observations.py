"""Observations in the shapes record systems send (FHIR R4 JSON) -> LabResult / rejected."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from cds_service.clinical.context import Analyte
from tests.fhir.factory import PATIENT_ID, bundle, ingest, line_for, observation, quantity


def test_value_quantity_with_ucum_code_only() -> None:
    res = ingest(observation("na", "2951-2", 129, unit=None, code="mmol/L"))
    na = res.context.current[Analyte.SODIUM]
    assert (na.value, na.unit, na.source_id, na.loinc) == (
        129,
        "mmol/L",
        "Observation/na",
        "2951-2",
    )


def test_unit_text_only_and_mass_units() -> None:
    res = ingest(
        observation("na", "2951-2", 128, unit="mEq/L"),
        observation("glu", "2345-7", 540, unit="mg/dl", when="2026-11-30T08:01:00Z"),
    )
    assert res.context.current[Analyte.SODIUM].value == 128
    assert res.context.current[Analyte.GLUCOSE].value == 540
    assert res.context.current[Analyte.SODIUM].raw == "128 mEq/L"


def test_comparator_is_kept() -> None:
    res = ingest(
        observation(
            "una",
            "2955-3",
            10,
            unit="mmol/L",
            valueQuantity=quantity(10, "mmol/L") | {"comparator": "<"},
        )
    )
    una = res.context.current[Analyte.URINE_SODIUM]
    assert una.comparator == "<" and una.value == 10


def test_value_string_numeric_fallback() -> None:
    res = ingest(observation("una", "2955-3", None, valueString="<20 mmol/L"))
    una = res.context.current[Analyte.URINE_SODIUM]
    assert (una.value, una.comparator) == (20, "<")


def test_data_absent_reason_is_ignored_with_reason() -> None:
    obs = observation("osm", "2692-2", None, dataAbsentReason={"text": "specimen haemolysed"})
    res = ingest(obs)
    assert Analyte.OSMOLALITY not in res.context.series
    (line,) = line_for(res, "Observation/osm")
    assert not line.used and "haemolysed" in line.reason


@pytest.mark.parametrize(
    ("status", "used", "preliminary"),
    [
        ("final", True, False),
        ("amended", True, False),
        ("corrected", True, False),
        ("preliminary", True, True),
        ("registered", False, False),
        ("entered-in-error", False, False),
        ("cancelled", False, False),
    ],
)
def test_status_rules(status: str, used: bool, preliminary: bool) -> None:
    res = ingest(observation("na", "2951-2", 127, status=status))
    assert (Analyte.SODIUM in res.context.current) is used
    if used:
        assert res.context.current[Analyte.SODIUM].preliminary is preliminary
    else:
        (line,) = line_for(res, "Observation/na")
        assert status in line.reason


@pytest.mark.parametrize(
    ("extra", "expected"),
    [
        (
            {"effectivePeriod": {"start": "2026-11-29T08:00:00Z", "end": "2026-11-30T08:00:00Z"}},
            datetime(2026, 11, 30, 8, tzinfo=UTC),
        ),
        (
            {"effectivePeriod": {"start": "2026-11-30T06:00:00Z"}},
            datetime(2026, 11, 30, 6, tzinfo=UTC),
        ),
        (
            {"effectiveInstant": "2026-11-30T07:15:00.000+01:00"},
            datetime(2026, 11, 30, 6, 15, tzinfo=UTC),
        ),
        ({"issued": "2026-11-30T09:30:00Z"}, datetime(2026, 11, 30, 9, 30, tzinfo=UTC)),
    ],
)
def test_time_sources(extra: dict, expected: datetime) -> None:
    res = ingest(observation("uv", "3167-4", 2.1, unit="L", when=None, **extra))
    assert res.context.current[Analyte.URINE_VOLUME_24H].time == expected


def test_results_after_now_and_without_time_are_ignored() -> None:
    res = ingest(
        observation("later", "2951-2", 131, when="2026-11-30T13:00:00Z"),
        observation("notime", "2951-2", 131, when=None),
    )
    assert Analyte.SODIUM not in res.context.series
    assert "after the evaluation time" in line_for(res, "Observation/later")[0].reason
    assert "no effective time" in line_for(res, "Observation/notime")[0].reason


def test_blood_gas_panel_components_are_read_and_flagged_direct_ise() -> None:
    panel = observation(
        "abg",
        "24336-0",
        None,
        component=[
            {
                "code": {"coding": [{"system": "http://loinc.org", "code": "32717-1"}]},
                "valueQuantity": quantity(126, "mmol/L", "mmol/L"),
            },
            {
                "code": {"coding": [{"system": "http://loinc.org", "code": "2744-1"}]},
                "valueQuantity": quantity(7.41, "[pH]"),
            },
        ],
    )
    res = ingest(panel)
    na = res.context.current[Analyte.SODIUM]
    assert na.direct_ise and na.value == 126 and na.loinc == "32717-1"


def test_unmapped_codes_are_reported_not_used() -> None:
    res = ingest(observation("bp", "85354-9", 120, unit="mm[Hg]"))
    (line,) = line_for(res, "Observation/bp")
    assert not line.used and "LOINC map" in line.reason


def test_duplicates_across_prefetch_keys_counted_once() -> None:
    na = observation("na", "2951-2", 127)
    res = ingest(bundle(na), bundle(na), na)
    assert len(res.context.series[Analyte.SODIUM]) == 1


def test_same_code_time_value_under_two_ids_counted_once() -> None:
    res = ingest(observation("a", "2951-2", 127), observation("b", "2951-2", 127))
    assert len(res.context.series[Analyte.SODIUM]) == 1
    assert "counted once" in line_for(res, "Observation/b")[0].reason


def test_implausible_value_is_rejected_with_raw_value() -> None:
    res = ingest(observation("na", "2951-2", 1270, unit="mmol/L"))
    assert Analyte.SODIUM not in res.context.series
    (rej,) = res.context.rejected
    assert rej.raw == "1270 mmol/L" and "plausible range" in rej.reason
    assert rej.source_id == "Observation/na" and rej.analyte is Analyte.SODIUM


def test_unconvertible_unit_is_rejected() -> None:
    res = ingest(observation("glu", "2345-7", 5.5, unit="mEq/L"))
    (rej,) = res.context.rejected
    assert rej.analyte is Analyte.GLUCOSE and "5.5 mEq/L" == rej.raw


def test_old_rejections_are_not_reported_to_the_clinical_core() -> None:
    res = ingest(observation("na", "2951-2", 1270, when="2025-01-01T00:00:00Z"))
    assert res.context.rejected == ()
    assert "older than the lookback" in line_for(res, "Observation/na")[0].reason


def test_invalid_resource_is_skipped_with_reason() -> None:
    bad = observation("na", "2951-2", None, valueQuantity={"value": "one hundred"})
    bad["status"] = 17
    res = ingest(bad)
    (line,) = line_for(res, "Observation/na")
    assert not line.used and line.reason.startswith("invalid FHIR R4 Observation")


def test_other_patients_results_are_ignored() -> None:
    obs = observation("na", "2951-2", 127)
    obs["subject"] = {"reference": "Patient/someone-else"}
    res = ingest(obs)
    assert Analyte.SODIUM not in res.context.series
    assert "another patient" in line_for(res, "Observation/na")[0].reason
    assert PATIENT_ID != "someone-else"


def test_shared_validation_never_hides_an_invalid_value() -> None:
    good = observation("a", "2951-2", 127)
    bad = observation("b", "2951-2", None, valueQuantity={"value": "12x7", "unit": "mmol/L"})
    bad["effectiveDateTime"] = "2026-11-30T09:00:00Z"
    res = ingest(good, bad)
    assert [r.source_id for r in res.context.series[Analyte.SODIUM]] == ["Observation/a"]
    assert line_for(res, "Observation/b")[0].reason.startswith("invalid FHIR R4 Observation")


def test_elements_not_read_do_not_make_a_result_unusable() -> None:
    # Tonicity validates what it reads; a malformed narrative is not a reason to drop a sodium.
    obs = observation("na", "2951-2", 127, text={"status": "nonsense", "div": 5})
    assert ingest(obs).context.current[Analyte.SODIUM].value == 127


def test_bad_time_string_is_ignored_with_reason() -> None:
    res = ingest(observation("na", "2951-2", 127, when="30/11/2026 08:00"))
    assert Analyte.SODIUM not in res.context.series
    assert not line_for(res, "Observation/na")[0].used


def test_one_bad_time_does_not_spoil_results_sharing_its_validation() -> None:
    first = observation("bad", "2951-2", 127, when="2026-11-30T25:61:00Z")
    second = observation("ok", "2951-2", 127, when="2026-11-30T09:00:00Z")
    res = ingest(first, second)
    assert [r.source_id for r in res.context.series[Analyte.SODIUM]] == ["Observation/ok"]


def test_loinc_sent_as_hl7_oid_is_read() -> None:
    # HL7 OID registry: 2.16.840.1.113883.6.1 is LOINC (from memory)
    obs = observation("na", "2951-2", 127)
    obs["code"]["coding"][0]["system"] = "urn:oid:2.16.840.1.113883.6.1"
    assert ingest(obs).context.current[Analyte.SODIUM].value == 127
