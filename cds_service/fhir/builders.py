"""Builders for resources Tonicity suggests (CDS Hooks card suggestions).

A suggested ServiceRequest is a complete draft a CDS client can store as it is (FHIR R4
ServiceRequest): ``id``, ``status`` draft, ``intent`` proposal, ``subject``, the hook's
``encounter`` (``context.encounterId``) and ``requester`` (``context.userId``) when the
context names them, ``authoredOn`` (the evaluation time) and ``reasonCode``.
"""

from __future__ import annotations

import re
import uuid
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from cds_service.clinical.context import Analyte
from cds_service.fhir.loinc import LOINC_SYSTEM, primary_code

#: FHIR R4 ``id`` datatype.
_FHIR_ID = re.compile(r"[A-Za-z0-9\-.]{1,64}")
#: Resource types ServiceRequest.requester may reference (FHIR R4 ServiceRequest).
_REQUESTER_TYPES = frozenset(
    {"Practitioner", "PractitionerRole", "Organization", "Patient", "RelatedPerson", "Device"}
)


def _id(value: object) -> str | None:
    if isinstance(value, str) and _FHIR_ID.fullmatch(value) and value not in (".", ".."):
        return value
    return None


@dataclass(frozen=True, slots=True)
class OrderContext:
    """What a suggested order takes from the hook call: patient, encounter, user, time."""

    patient_id: str
    authored_on: datetime | None = None
    encounter_id: str | None = None
    user_id: str | None = None  # "Practitioner/123" (CDS Hooks context.userId)

    @classmethod
    def from_hook(
        cls, patient_id: str, context: dict[str, Any], authored_on: datetime
    ) -> OrderContext:
        encounter = context.get("encounterId")
        user = context.get("userId")
        return cls(
            patient_id=patient_id,
            authored_on=authored_on,
            encounter_id=encounter if isinstance(encounter, str) else None,
            user_id=user if isinstance(user, str) else None,
        )

    def requester(self) -> dict[str, str] | None:
        if not self.user_id:
            return None
        rtype, _, rid = self.user_id.partition("/")
        if rtype in _REQUESTER_TYPES and _id(rid):
            return {"reference": f"{rtype}/{rid}"}
        return None


def service_request(analyte: Analyte, order: OrderContext | str, reason: str) -> dict[str, Any]:
    """A draft laboratory ServiceRequest (intent proposal) for ``analyte``'s primary LOINC
    code; ``order`` is the hook's :class:`OrderContext` (or only a patient id)."""
    if isinstance(order, str):
        order = OrderContext(patient_id=order)
    patient_id = (order.patient_id or "").strip()
    if not patient_id:
        raise ValueError("service_request needs a patient id")
    if not reason or not reason.strip():
        raise ValueError("service_request needs a reason")
    code, display = primary_code(Analyte(analyte))
    resource: dict[str, Any] = {
        "resourceType": "ServiceRequest",
        "id": str(uuid.uuid4()),
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
        "subject": {"reference": f"Patient/{patient_id}"},
    }
    encounter = _id(order.encounter_id)
    if encounter:
        resource["encounter"] = {"reference": f"Encounter/{encounter}"}
    if order.authored_on is not None:
        resource["authoredOn"] = order.authored_on.isoformat()
    requester = order.requester()
    if requester:
        resource["requester"] = requester
    resource["reasonCode"] = [{"text": reason.strip()}]
    return resource
