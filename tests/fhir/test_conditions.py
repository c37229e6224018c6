"""Conditions -> categories by SNOMED CT and ICD-10-CM (prefix) code sets."""

from __future__ import annotations

import pytest

from cds_service.clinical.context import ConditionCategory as C
from cds_service.fhir.conditions import categorise
from tests.fhir.factory import PATIENT_ID, ingest, line_for

ICD = "http://hl7.org/fhir/sid/icd-10-cm"
SCT = "http://snomed.info/sct"


@pytest.mark.parametrize(
    ("system", "code", "category"),
    [
        (ICD, "I50.9", C.HEART_FAILURE),
        (ICD, "I5023", C.HEART_FAILURE),  # sent without the dot
        (ICD, "K74.60", C.CIRRHOSIS),
        (ICD, "K70.30", C.CIRRHOSIS),
        (ICD, "N04.9", C.NEPHROTIC_SYNDROME),
        (ICD, "N18.4", C.ADVANCED_KIDNEY_DISEASE),
        (ICD, "N18.3", None),  # stage 3 is not advanced
        (ICD, "F10.20", C.ALCOHOL_USE_DISORDER),
        (ICD, "E43", C.MALNUTRITION),
        (ICD, "E03.9", C.HYPOTHYROIDISM),
        (ICD, "E27.1", C.ADRENAL_INSUFFICIENCY),
        (ICD, "E22.2", C.SIADH),
        (ICD, "R11.2", C.VOMITING_DIARRHEA),
        (ICD, "A09", C.VOMITING_DIARRHEA),
        (ICD, "R19.7", C.VOMITING_DIARRHEA),
        (SCT, "84114007", C.HEART_FAILURE),
        (SCT, "19943007", C.CIRRHOSIS),
        (SCT, "00000000", None),
        ("http://example.org/local", "I50.9", None),
    ],
)
def test_categorise(system: str, code: str, category: C | None) -> None:
    assert categorise(system, code) == category


def _condition(
    rid: str, code: str, clinical: str | None = "active", verification: str | None = None
) -> dict:
    c: dict = {
        "resourceType": "Condition",
        "id": rid,
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
        "code": {
            "coding": [{"system": ICD, "code": code, "display": "Heart failure, unspecified"}]
        },
    }
    if clinical:
        c["clinicalStatus"] = {
            "coding": [
                {
                    "system": "http://terminology.hl7.org/CodeSystem/condition-clinical",
                    "code": clinical,
                }
            ]
        }
    if verification:
        c["verificationStatus"] = {
            "coding": [
                {
                    "system": "http://terminology.hl7.org/CodeSystem/condition-ver-status",
                    "code": verification,
                }
            ]
        }
    return c


@pytest.mark.parametrize(
    ("clinical", "verification", "counted"),
    [
        ("active", None, True),
        ("recurrence", None, True),
        ("relapse", None, True),
        (None, None, True),
        ("resolved", None, False),
        ("inactive", None, False),
        ("active", "entered-in-error", False),
        ("active", "refuted", False),
    ],
)
def test_status(clinical: str | None, verification: str | None, counted: bool) -> None:
    res = ingest(_condition("c", "I50.9", clinical, verification))
    assert res.context.has_condition(C.HEART_FAILURE) is counted
    if not counted:
        assert not line_for(res, "Condition/c")[0].used


def test_entry_fields() -> None:
    (entry,) = ingest(_condition("c", "I50.9")).context.conditions
    assert entry.code == f"{ICD}|I50.9" and entry.source_id == "Condition/c"
    assert entry.display == "Heart failure, unspecified"


def test_icd10cm_sent_as_hl7_oid_is_read() -> None:
    # HL7 OID registry: 2.16.840.1.113883.6.90 is ICD-10-CM (from memory)
    assert categorise("urn:oid:2.16.840.1.113883.6.90", "I50.9") is None  # raw system: no
    cond = _condition("c", "I50.9")
    cond["code"]["coding"][0]["system"] = "urn:oid:2.16.840.1.113883.6.90"
    assert ingest(cond).context.has_condition(C.HEART_FAILURE)
