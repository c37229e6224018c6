"""Patient -> PatientFacts (age at evaluation time, administrative gender)."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from cds_service.clinical.context import PatientFacts, Sex
from cds_service.fhir._json import text
from cds_service.fhir.times import age_years, parse_birth_date

_SEX = {"male": Sex.MALE, "female": Sex.FEMALE}


def sex_of(resource: dict[str, Any]) -> Sex:
    return _SEX.get((text(resource.get("gender")) or "").lower(), Sex.UNKNOWN)


def facts(resource: dict[str, Any] | None, patient_id: str | None, now: datetime) -> PatientFacts:
    if resource is None:  # none sent, found or readable: age and sex were never checked
        return PatientFacts(patient_id=patient_id, age_years=None, sex=Sex.UNKNOWN, known=False)
    birth = parse_birth_date(resource.get("birthDate"))
    age = age_years(birth, now) if birth is not None and birth <= now.date() else None
    return PatientFacts(
        patient_id=patient_id or text(resource.get("id")),
        age_years=age,  # never rounded: 17.997 must stay under 18
        sex=sex_of(resource),
    )
