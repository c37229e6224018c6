"""Builders for resources Tonicity suggests (CDS Hooks card suggestions)."""

from __future__ import annotations

from typing import Any

from cds_service.clinical.context import Analyte
from cds_service.fhir.loinc import LOINC_SYSTEM, primary_code


def service_request(analyte: Analyte, patient_id: str, reason: str) -> dict[str, Any]:
    """A draft laboratory ServiceRequest (intent proposal) for ``analyte``'s primary LOINC code."""
    if not patient_id or not patient_id.strip():
        raise ValueError("service_request needs a patient id")
    if not reason or not reason.strip():
        raise ValueError("service_request needs a reason")
    code, display = primary_code(Analyte(analyte))
    return {
        "resourceType": "ServiceRequest",
        "status": "draft",
        "intent": "proposal",
        "category": [
            {
                "coding": [
                    {
                        "system": "http://snomed.info/sct",
                        "code": "108252007",
                        "display": "Laboratory procedure",
                    }
                ]
            }
        ],
        "code": {
            "coding": [{"system": LOINC_SYSTEM, "code": code, "display": display}],
            "text": display,
        },
        "subject": {"reference": f"Patient/{patient_id.strip()}"},
        "reasonCode": [{"text": reason.strip()}],
    }
