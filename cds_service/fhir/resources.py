"""Flatten what a client sends (Bundles of any type, single resources, None) into resources.

Duplicates (same resourceType/id, e.g. the same Observation under two prefetch keys) are kept
once and listed in ``Collected.duplicates``; every item that is not a resource gets a report
line.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any

from cds_service.fhir._json import items, text
from cds_service.fhir.report import ReportBuilder

_MAX_DEPTH = 6


@dataclass
class Collected:
    resources: list[tuple[str, dict[str, Any]]] = field(default_factory=list)  # (key, resource)
    index: dict[str, dict[str, Any]] = field(default_factory=dict)  # "Type/id" and fullUrl
    duplicates: list[str] = field(default_factory=list)  # keys seen again (reported last)
    _seen: set[str] = field(default_factory=set)
    _anonymous: int = 0


def collect(
    roots: Iterable[Any], report: ReportBuilder, into: Collected | None = None
) -> Collected:
    out = into if into is not None else Collected()
    try:
        iterator = iter(roots)
    except TypeError:
        report.ignore("(input)", "not read", "input is not a list of resources")
        return out
    for root in iterator:
        _walk(root, None, 0, out, report)
    return out


def report_duplicates(collected: Collected, report: ReportBuilder) -> None:
    for key in collected.duplicates:
        report.ignore(
            key, "duplicate", "same resourceType/id as a resource already read: counted once"
        )


def _plain_entry(entry: Any, out: Collected) -> bool:
    """Collect the common entry (a resource with a type other than Bundle and an id, seen
    for the first time) without the general walk; False, having done nothing, otherwise.
    Same outcome as ``_walk`` for it: the walk is a tenth of ingestion at 5,000 entries."""
    if type(entry) is not dict:
        return False
    item = entry.get("resource")
    if type(item) is not dict:
        return False
    resource_type, rid = item.get("resourceType"), item.get("id")
    if type(resource_type) is not str or type(rid) is not str or resource_type == "Bundle":
        return False
    if not resource_type.strip() or not rid.strip():
        return False
    key = f"{resource_type}/{rid}"
    if key in out._seen:
        return False
    _keep(out, key, item, text(entry.get("fullUrl")))
    return True


def _keep(out: Collected, key: str, item: dict[str, Any], full_url: str | None) -> None:
    """Record a resource seen for the first time under its key (and its fullUrl)."""
    out._seen.add(key)
    out.resources.append((key, item))
    out.index.setdefault(key, item)
    if full_url:
        out.index.setdefault(full_url, item)


def _walk(
    item: Any, full_url: str | None, depth: int, out: Collected, report: ReportBuilder
) -> None:
    if item is None:
        return
    if not isinstance(item, dict):
        report.ignore(
            "(not a resource)", "not read", f"a {type(item).__name__} is not a JSON object"
        )
        return
    resource_type = text(item.get("resourceType"))
    if resource_type is None:
        report.ignore("(not a resource)", "not read", "JSON object without resourceType")
        return
    if resource_type == "Bundle":
        if depth >= _MAX_DEPTH:
            report.ignore("Bundle/" + (text(item.get("id")) or ""), "not read", "nested too deep")
            return
        for entry in items(item.get("entry")):
            if _plain_entry(entry, out):
                continue
            if not isinstance(entry, dict):
                report.ignore("(bundle entry)", "not read", "bundle entry is not a JSON object")
                continue
            _walk(entry.get("resource"), text(entry.get("fullUrl")), depth + 1, out, report)
        return
    rid = text(item.get("id"))
    if rid:
        key = f"{resource_type}/{rid}"
    else:
        out._anonymous += 1
        key = f"{resource_type}/#{out._anonymous}"
    if key in out._seen:
        out.duplicates.append(key)
        return
    _keep(out, key, item, full_url)
