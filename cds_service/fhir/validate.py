"""Validate one raw resource with its fhir.resources R4B model; a short reason when invalid."""

from __future__ import annotations

from functools import cache
from importlib import import_module
from typing import Any

_MODULES = {
    "Observation": "observation",
    "Patient": "patient",
    "Condition": "condition",
    "Medication": "medication",
    "MedicationRequest": "medicationrequest",
    "MedicationStatement": "medicationstatement",
    "MedicationAdministration": "medicationadministration",
}


@cache
def _model(resource_type: str) -> Any:
    module = import_module(f"fhir.resources.R4B.{_MODULES[resource_type]}")
    return getattr(module, resource_type)


def problem(resource: dict[str, Any]) -> str | None:
    """None when ``resource`` is valid FHIR R4 for its type, else a one-line reason."""
    resource_type = resource.get("resourceType")
    if resource_type not in _MODULES:
        return f"resource type {resource_type!r} is not read"
    try:
        _model(resource_type).model_validate(resource)
    except Exception as exc:  # pydantic ValidationError, or anything the models raise
        errors = getattr(exc, "errors", None)
        if callable(errors):
            try:
                first = errors()[0]
                where = ".".join(str(p) for p in first.get("loc", ()))
                return f"invalid FHIR R4 {resource_type}: {where}: {first.get('msg', '')}"[:200]
            except Exception:  # noqa: S110 - fall through to the generic message
                pass
        return f"invalid FHIR R4 {resource_type}: {type(exc).__name__}"
    return None
