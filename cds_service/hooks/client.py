"""Play the CDS client for a patient's record held in one FHIR Bundle.

``tonicity evaluate`` on a Bundle builds the hook request a record system would send: the
context (patient id, draft orders, selections) and the prefetch, filled by running each of the
service's own prefetch templates against the Bundle's resources. Only the search parameters
our templates use are understood: ``patient``, ``code`` (token lists, ``system|code`` or bare
code), ``status``, ``clinical-status``, ``_sort`` (``date`` / ``-date``) and ``_count``
(a page size: every match is returned, as a client following ``next`` links would).
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from typing import Any
from urllib.parse import parse_qsl

from cds_service.errors import UserError
from cds_service.hooks.registry import SERVICES, fill, prefetch_templates

HOOK_INSTANCE = "00000000-0000-4000-8000-000000000000"


def flatten(resources: Iterable[Any]) -> Iterator[dict[str, Any]]:
    """Resources, with Bundles (of any type, nested) opened into their entries."""
    for r in resources:
        if not isinstance(r, Mapping):
            continue
        if r.get("resourceType") == "Bundle":
            yield from flatten(
                e.get("resource") for e in r.get("entry") or [] if isinstance(e, Mapping)
            )
        elif isinstance(r.get("resourceType"), str):
            yield dict(r)


def _reference_id(resource: Mapping[str, Any], field: str) -> str | None:
    ref = resource.get(field)
    if isinstance(ref, Mapping) and isinstance(ref.get("reference"), str):
        return ref["reference"].rstrip("/").rsplit("/", 1)[-1]
    return None


def _codings(concept: object) -> list[Mapping[str, Any]]:
    if not isinstance(concept, Mapping):
        return []
    return [c for c in concept.get("coding") or [] if isinstance(c, Mapping)]


def _token_match(concept: object, tokens: list[str]) -> bool:
    for coding in _codings(concept):
        for token in tokens:
            system, sep, code = token.rpartition("|")
            if coding.get("code") == code and (not sep or coding.get("system") == system):
                return True
    return False


def _date(resource: Mapping[str, Any]) -> str:
    for key in ("effectiveDateTime", "issued", "authoredOn", "recordedDate", "dateAsserted"):
        if isinstance(resource.get(key), str):
            return str(resource[key])
    period = resource.get("effectivePeriod")
    if isinstance(period, Mapping) and isinstance(period.get("start"), str):
        return str(period["start"])
    return ""


def _matches(resource: Mapping[str, Any], name: str, value: str) -> bool:
    values = value.split(",")
    if name == "patient":  # the bare id or the typed form Patient/{id}
        wanted = value.removeprefix("Patient/")
        return (_reference_id(resource, "subject") or _reference_id(resource, "patient")) == wanted
    if name == "code":
        return _token_match(resource.get("code"), values) or _token_match(
            resource.get("medicationCodeableConcept"), values
        )
    if name == "status":
        return resource.get("status") in values
    if name == "clinical-status":
        return _token_match(resource.get("clinicalStatus"), values)
    raise UserError(f"prefetch search parameter {name!r} is not supported")


def run_query(query: str, resources: list[dict[str, Any]]) -> dict[str, Any] | None:
    """A read (``Type/id``: the resource or None) or a search (a searchset Bundle)."""
    path, _, params = query.partition("?")
    rtype, _, rid = path.partition("/")
    if rid:
        return next(
            (r for r in resources if r["resourceType"] == rtype and r.get("id") == rid), None
        )
    matches = [r for r in resources if r["resourceType"] == rtype]
    sort = None
    for name, value in parse_qsl(params, keep_blank_values=True):
        if name == "_sort":
            sort = value
        elif name != "_count":
            matches = [r for r in matches if _matches(r, name, value)]
    if sort in ("date", "-date"):
        matches.sort(key=_date, reverse=sort == "-date")
    return {
        "resourceType": "Bundle",
        "type": "searchset",
        "total": len(matches),
        "entry": [{"resource": r} for r in matches],
    }


def build_request(
    record: Mapping[str, Any], hook: str, draft_orders: list[dict[str, Any]] | None = None
) -> dict[str, Any]:
    """The hook request a CDS client would send for this patient Bundle."""
    if not any(s.hook == hook for s in SERVICES.values()):
        known = ", ".join(sorted(s.hook for s in SERVICES.values()))
        raise UserError(f"unknown hook {hook!r} (one of: {known})")
    resources = list(flatten([record]))
    patients = {r.get("id") for r in resources if r["resourceType"] == "Patient"}
    if len(patients) != 1 or None in patients:
        raise UserError(
            f"the Bundle must hold exactly one Patient with an id (found {len(patients)})"
        )
    patient_id = str(patients.pop())
    context: dict[str, Any] = {"patientId": patient_id}
    if hook in ("order-select", "order-sign"):
        if draft_orders is None:
            raise UserError(f"the {hook} hook needs --draft-orders")
        context["draftOrders"] = {
            "resourceType": "Bundle",
            "type": "collection",
            "entry": [{"resource": d} for d in draft_orders],
        }
        if hook == "order-select":
            context["selections"] = [f"{d['resourceType']}/{d.get('id')}" for d in draft_orders]
    prefetch = {
        key: run_query(fill(template, context), resources)
        for key, template in prefetch_templates().items()
    }
    return {"hook": hook, "hookInstance": HOOK_INSTANCE, "context": context, "prefetch": prefetch}


def draft_resources(data: object) -> list[dict[str, Any]]:
    """Draft orders from a Bundle, a JSON list of resources or one resource; each needs an id."""
    items = list(flatten(data if isinstance(data, list) else [data]))
    if not items:
        raise UserError("--draft-orders holds no FHIR resource")
    for item in items:
        if not item.get("id"):
            raise UserError(f"a draft {item['resourceType']} has no id")
    return items
