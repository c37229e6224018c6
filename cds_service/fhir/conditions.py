"""Problem-list Conditions -> ConditionEntry by SNOMED CT / ICD-10-CM code sets."""

from __future__ import annotations

from functools import cache
from typing import Any

from cds_service.clinical.context import ConditionCategory, ConditionEntry
from cds_service.fhir._data import load
from cds_service.fhir._json import codings, concept_text, text

SNOMED = "http://snomed.info/sct"
ICD10 = frozenset({"http://hl7.org/fhir/sid/icd-10-cm", "http://hl7.org/fhir/sid/icd-10"})
ACTIVE = frozenset({"active", "recurrence", "relapse"})
_NOT_TRUE = frozenset({"refuted", "entered-in-error"})


def _norm(code: str) -> str:
    return code.replace(".", "").strip().upper()


@cache
def _tables() -> tuple[dict[str, ConditionCategory], tuple[tuple[str, ConditionCategory], ...]]:
    snomed: dict[str, ConditionCategory] = {}
    prefixes: list[tuple[str, ConditionCategory]] = []
    for key, entry in load("conditions").items():
        category = ConditionCategory(key)
        for code in entry.get("snomed", []):
            snomed[str(code)] = category
        for code in entry.get("icd10cm", []):
            prefixes.append((_norm(str(code)), category))
    prefixes.sort(key=lambda p: -len(p[0]))  # longest prefix first
    return snomed, tuple(prefixes)


def categorise(system: str, code: str) -> ConditionCategory | None:
    snomed, prefixes = _tables()
    if system == SNOMED:
        return snomed.get(code)
    if system in ICD10:
        n = _norm(code)
        for prefix, category in prefixes:
            if n.startswith(prefix):
                return category
    return None


def status_problem(resource: dict[str, Any]) -> str | None:
    """Why a Condition does not count as an active problem, or None when it does."""
    clinical = [c for _, c, _ in codings(resource.get("clinicalStatus")) if c]
    if clinical and not ACTIVE.intersection(clinical):
        return f"clinical status {clinical[0]}: not an active problem"
    verification = [c for _, c, _ in codings(resource.get("verificationStatus")) if c]
    if _NOT_TRUE.intersection(verification):
        return f"verification status {verification[0]}"
    return None


def match(resource: dict[str, Any], key: str) -> list[ConditionEntry]:
    """Every category the Condition's codes fall in (one entry per category)."""
    found: dict[ConditionCategory, ConditionEntry] = {}
    display = concept_text(resource.get("code")) or (text(resource.get("id")) or "")
    for system, code, _ in codings(resource.get("code")):
        category = categorise(system, code) if code else None
        if category is not None and category not in found:
            found[category] = ConditionEntry(category, display, f"{system}|{code}", key)
    return list(found.values())
