"""Invented FHIR R4 records for the hooks tests (Larkspur Valley Hospital, fictional).

Builders return plain FHIR JSON as a record system would send it; codes are LOINC (open
standard) and units UCUM (open standard).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

#: The service evaluates at the real current time, so the records are dated relative to it.
NOW = datetime.now(UTC).replace(microsecond=0)
PATIENT_ID = "lvh-pt-1042"
FHIR_BASE = "https://fhir.larkspur-valley.example.org/r4"
#: SMART App Launch 1.0.0 scopes (v1 form) for every read the services make.
SCOPE = " ".join(
    f"user/{t}.read"
    for t in ("Patient", "Observation", "MedicationRequest", "MedicationStatement", "Condition")
)

# LOINC codes (LOINC, open standard; codes from memory, checked against our fhir/data map)
NA = ("2951-2", "Sodium [Moles/volume] in Serum or Plasma", "mmol/L")
OSM = ("2692-2", "Osmolality of Serum or Plasma", "mosm/kg")
GLU = ("2345-7", "Glucose [Mass/volume] in Serum or Plasma", "mg/dL")
BUN = ("3094-0", "Urea nitrogen [Mass/volume] in Serum or Plasma", "mg/dL")
UOSM = ("2695-5", "Osmolality of Urine", "mosm/kg")
UNA = ("2955-3", "Sodium [Moles/volume] in Urine", "mmol/L")


def patient(pid: str = PATIENT_ID, birth: str = "1958-03-14", gender: str = "female") -> dict:
    return {
        "resourceType": "Patient",
        "id": pid,
        "identifier": [{"system": "https://larkspur-valley.example.org/mrn", "value": "LV-88213"}],
        "name": [{"family": "Quillfeather", "given": ["Maren"]}],
        "gender": gender,
        "birthDate": birth,
    }


def observation(
    oid: str,
    code: tuple[str, str, str],
    value: float,
    when: datetime,
    pid: str = PATIENT_ID,
) -> dict:
    loinc, display, unit = code
    return {
        "resourceType": "Observation",
        "id": oid,
        "status": "final",
        "category": [
            {
                "coding": [
                    {
                        "system": "http://terminology.hl7.org/CodeSystem/observation-category",
                        "code": "laboratory",
                    }
                ]
            }
        ],
        "code": {"coding": [{"system": "http://loinc.org", "code": loinc, "display": display}]},
        "subject": {"reference": f"Patient/{pid}"},
        "effectiveDateTime": when.isoformat(),
        "valueQuantity": {
            "value": value,
            "unit": unit,
            "system": "http://unitsofmeasure.org",
            "code": unit,
        },
    }


def searchset(resources: list[dict], next_url: str | None = None) -> dict:
    bundle: dict[str, Any] = {
        "resourceType": "Bundle",
        "type": "searchset",
        "total": len(resources),
        "entry": [
            {"fullUrl": f"{FHIR_BASE}/{r['resourceType']}/{r['id']}", "resource": r}
            for r in resources
        ],
    }
    if next_url:
        bundle["link"] = [{"relation": "next", "url": next_url}]
    return bundle


def sodium_series(*values: float, hours_apart: float = 6.0, last: datetime = NOW) -> list[dict]:
    """Sodium results, oldest first, the last one two hours before ``last``."""
    n = len(values)
    return [
        observation(f"na-{i}", NA, v, last - timedelta(hours=2 + hours_apart * (n - 1 - i)))
        for i, v in enumerate(values)
    ]


def hypotonic_fluid(mid: str = "draft-half-saline", pid: str = PATIENT_ID) -> dict:
    return {
        "resourceType": "MedicationRequest",
        "id": mid,
        "status": "draft",
        "intent": "order",
        "medicationCodeableConcept": {"text": "Sodium chloride 0.45% intravenous solution 1000 mL"},
        "subject": {"reference": f"Patient/{pid}"},
        "dosageInstruction": [
            {
                "text": "1000 mL IV over 8 hours",
                "route": {"text": "intravenous"},
                "doseAndRate": [
                    {
                        "rateQuantity": {
                            "value": 125,
                            "unit": "mL/h",
                            "system": "http://unitsofmeasure.org",
                            "code": "mL/h",
                        }
                    }
                ],
            }
        ],
    }


def prefetch(
    observations: list[dict], *, pat: dict | None = None, others: bool = True
) -> dict[str, Any]:
    from cds_service.fhir.loinc import lookup
    from cds_service.hooks.registry import LAB_GROUPS

    sodium = [o for o in observations if o["code"]["coding"][0]["code"] == NA[0]]
    data: dict[str, Any] = {
        "patient": pat or patient(),
        "sodium": searchset(sodium) if sodium else None,
    }
    for key, group in LAB_GROUPS.items():  # each result under its query's key, as a client does
        found = [
            o
            for o in observations
            if (e := lookup(o["code"]["coding"][0]["code"])) and e.analyte in group.analytes
        ]
        data[key] = searchset(found) if found else None
    if others:
        data.update(medicationRequests=None, medicationStatements=None, conditions=None)
    return data


def hook_request(
    hook: str = "patient-view",
    *,
    observations: list[dict] | None = None,
    drafts: list[dict] | None = None,
    selections: list[str] | None = None,
    with_prefetch: bool = True,
    fhir_server: str | None = None,
    token: str | None = None,
    pid: str = PATIENT_ID,
) -> dict[str, Any]:
    context: dict[str, Any] = {"userId": "Practitioner/lvh-dr-ostrander", "patientId": pid}
    if hook in ("order-select", "order-sign"):
        context["draftOrders"] = searchset(drafts or [])
        context["draftOrders"]["type"] = "collection"
    if hook == "order-select":
        context["selections"] = (
            selections
            if selections is not None
            else [f"{d['resourceType']}/{d['id']}" for d in drafts or []]
        )
    body: dict[str, Any] = {
        "hook": hook,
        "hookInstance": "8f2c6a1e-5b0d-4c2e-9a77-3d1f0e6b4c21",
        "context": context,
    }
    if with_prefetch:
        body["prefetch"] = prefetch(observations or [])
    if fhir_server:
        body["fhirServer"] = fhir_server
    if token:
        body["fhirAuthorization"] = {
            "access_token": token,
            "token_type": "Bearer",
            "expires_in": 300,
            "scope": SCOPE,
            "subject": "tonicity-cds",
        }
    return body
