"""Builders for FHIR R4 JSON used by the FHIR-layer tests (invented Larkspur Valley data)."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from cds_service.config import IngestSettings
from cds_service.fhir import Ingested, build_context

NOW = datetime(2026, 11, 30, 12, 0, tzinfo=UTC)
PATIENT_ID = "lvh-4471"
LOINC = "http://loinc.org"
UCUM = "http://unitsofmeasure.org"


def quantity(value: Any, unit: str | None = None, code: str | None = None) -> dict[str, Any]:
    q: dict[str, Any] = {"value": value}
    if unit is not None:
        q["unit"] = unit
    if code is not None:
        q["system"] = UCUM
        q["code"] = code
    return q


def observation(
    rid: str,
    loinc: str,
    value: Any = None,
    unit: str | None = "mmol/L",
    when: str = "2026-11-30T08:00:00Z",
    *,
    code: str | None = None,
    status: str = "final",
    **extra: Any,
) -> dict[str, Any]:
    obs: dict[str, Any] = {
        "resourceType": "Observation",
        "id": rid,
        "status": status,
        "code": {"coding": [{"system": LOINC, "code": loinc}]},
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
    }
    if when is not None:
        obs["effectiveDateTime"] = when
    if value is not None:
        obs["valueQuantity"] = quantity(value, unit, code)
    obs.update(extra)
    return obs


def patient(birth: str | None = "1951-03-14", gender: str | None = "female") -> dict[str, Any]:
    p: dict[str, Any] = {"resourceType": "Patient", "id": PATIENT_ID}
    if birth is not None:
        p["birthDate"] = birth
    if gender is not None:
        p["gender"] = gender
    return p


def bundle(*resources: Any, kind: str = "searchset") -> dict[str, Any]:
    return {
        "resourceType": "Bundle",
        "type": kind,
        "entry": [{"resource": r} for r in resources],
    }


def med_request(rid: str, text: str, status: str = "active", **extra: Any) -> dict[str, Any]:
    mr: dict[str, Any] = {
        "resourceType": "MedicationRequest",
        "id": rid,
        "status": status,
        "intent": "order" if status != "draft" else "proposal",
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
        "medicationCodeableConcept": {"text": text},
    }
    mr.update(extra)
    return mr


def ingest(
    *resources: Any,
    now: datetime = NOW,
    settings: IngestSettings | None = None,
    drafts: tuple[Any, ...] = (),
    selections: tuple[str, ...] = (),
) -> Ingested:
    return build_context(
        list(resources),
        now=now,
        settings=settings or IngestSettings(),
        patient_id=PATIENT_ID,
        draft_orders=drafts,
        selections=selections,
    )


def line_for(result: Ingested, key: str) -> list[Any]:
    return [line for line in result.report.lines if line.resource == key]
