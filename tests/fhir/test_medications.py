"""MedicationRequest / Statement / Administration -> MedicationEntry (names, RxNorm codes)."""

from __future__ import annotations

import pytest

from cds_service.fhir.medications import RXNORM_SYSTEM, generic_names
from tests.fhir.factory import PATIENT_ID, bundle, ingest, line_for, med_request


@pytest.mark.parametrize(
    ("label", "names"),
    [
        ("Hydrochlorothiazide 25 MG Oral Tablet", ["hydrochlorothiazide"]),
        (
            "Lisinopril 20 MG / Hydrochlorothiazide 12.5 MG Oral Tablet",
            ["lisinopril", "hydrochlorothiazide"],
        ),
        ("Sertraline hydrochloride 50 mg tablet", ["sertraline hydrochloride", "sertraline"]),
        ("Carbamazepine 200 MG Extended Release Oral Tablet [Tegretol]", ["carbamazepine"]),
        ("furosemide", ["furosemide"]),
        ("atorvastatin 40 mg oral tablet, at night", ["atorvastatin"]),
        ("12.5 mg", []),
    ],
)
def test_generic_names_from_label(label: str, names: list[str]) -> None:
    assert generic_names(label) == names


def test_codeable_concept_with_rxnorm_ingredient() -> None:
    mr = med_request("m1", "Citalopram 20 MG Oral Tablet")
    mr["medicationCodeableConcept"]["coding"] = [{"system": RXNORM_SYSTEM, "code": "2556"}]
    (entry,) = ingest(mr).context.medications
    assert entry.names[0] == "citalopram" and entry.rxnorm == ("2556",)
    assert entry.kind == "MedicationRequest" and entry.source_id == "MedicationRequest/m1"


def test_contained_medication_reference() -> None:
    mr = med_request("m2", "x")
    del mr["medicationCodeableConcept"]
    mr["contained"] = [
        {
            "resourceType": "Medication",
            "id": "med",
            "code": {"text": "Desmopressin 0.1 MG Oral Tablet"},
        }
    ]
    mr["medicationReference"] = {"reference": "#med"}
    (entry,) = ingest(mr).context.medications
    assert entry.names == ("desmopressin",)


def test_medication_reference_resolved_in_bundle_by_id_and_full_url() -> None:
    med = {
        "resourceType": "Medication",
        "id": "tolv",
        "code": {"coding": [{"system": RXNORM_SYSTEM, "code": "358258", "display": "tolvaptan"}]},
    }
    a = med_request("m3", "x")
    del a["medicationCodeableConcept"]
    a["medicationReference"] = {"reference": "Medication/tolv"}
    b = med_request("m4", "x")
    del b["medicationCodeableConcept"]
    b["medicationReference"] = {"reference": "urn:uuid:7d1f"}
    full = {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [{"fullUrl": "urn:uuid:7d1f", "resource": dict(med, id="tolv2")}],
    }
    meds = ingest(bundle(med, a, b), full).context.medications
    assert [m.names for m in meds] == [("tolvaptan",), ("tolvaptan",)]


@pytest.mark.parametrize(
    ("kind", "status", "counted"),
    [
        ("MedicationRequest", "active", True),
        ("MedicationRequest", "on-hold", True),
        ("MedicationRequest", "stopped", False),
        ("MedicationRequest", "entered-in-error", False),
        ("MedicationStatement", "active", True),
        ("MedicationStatement", "intended", True),
        ("MedicationStatement", "completed", False),
        ("MedicationAdministration", "in-progress", True),
    ],
)
def test_statuses(kind: str, status: str, counted: bool) -> None:
    res = {
        "resourceType": kind,
        "id": "x",
        "status": status,
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
        "medicationCodeableConcept": {"text": "Fluoxetine 20 MG Oral Capsule"},
    }
    if kind == "MedicationRequest":
        res["intent"] = "order"
    if kind == "MedicationAdministration":
        res["effectiveDateTime"] = "2026-11-30T06:00:00Z"
    meds = ingest(res).context.medications
    assert bool(meds) is counted
    if not counted:
        assert status in line_for(ingest(res), f"{kind}/x")[0].reason


def test_completed_administration_counts_only_when_recent() -> None:
    def admin(rid: str, when: str) -> dict:
        return {
            "resourceType": "MedicationAdministration",
            "id": rid,
            "status": "completed",
            "subject": {"reference": f"Patient/{PATIENT_ID}"},
            "effectiveDateTime": when,
            "medicationCodeableConcept": {"text": "Ondansetron 4 MG Injection"},
        }

    meds = ingest(
        admin("recent", "2026-11-30T02:00:00Z"), admin("old", "2026-10-01T02:00:00Z")
    ).context.medications
    assert [m.source_id for m in meds] == ["MedicationAdministration/recent"]
