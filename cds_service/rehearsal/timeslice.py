"""One patient's exported record as it stood at a moment, and the moments worth replaying.

An export holds each resource in its final state; the rehearsal needs the record as a
clinician's chart showed it at an earlier time. So a resource counts from when it entered the
record (a result when it was issued, an order when it was written, a problem when recorded),
and a status that changed later is set back to what it was then: an order completed or
stopped after the moment was still active at it, a problem resolved after it still active.

Moments (:func:`events`): a patient-view call when a new sodium result arrives (as if the
chart were opened then), and an order-sign call when an IV fluid or a drug Tonicity checks
is ordered (that order is the draft and is not yet in the record).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from cds_service.clinical.context import Analyte
from cds_service.clinical.drugs import classify
from cds_service.fhir import fluids, loinc, medications
from cds_service.fhir._json import items, obj, text
from cds_service.fhir.observations import effective_time
from cds_service.fhir.times import parse_datetime
from cds_service.hooks.client import run_query
from cds_service.hooks.registry import fill, prefetch_templates

ENDED_ORDER = frozenset({"completed", "stopped"})
ENDED_PROBLEM = frozenset({"resolved", "inactive", "remission"})
_CLINICAL = "http://terminology.hl7.org/CodeSystem/condition-clinical"


@dataclass(slots=True)
class Timed:
    """A resource and when it entered the record (None: always there, e.g. Patient).

    ``then`` is the resource as it was before ``until`` (its status set back), or the
    resource itself when nothing changed.
    """

    resource: dict[str, Any]
    since: datetime | None
    until: datetime | None = None  # when its status changed (orders ended, problems resolved)
    then: dict[str, Any] | None = None

    def __post_init__(self) -> None:
        if self.then is None:
            self.then = _before_change(self.resource, self.until)

    def at(self, moment: datetime) -> dict[str, Any]:
        """The resource as the record showed it at ``moment``."""
        if self.until is None or self.then is self.resource:
            return self.resource
        return self.then if self.until > moment else self.resource  # type: ignore[return-value]


@dataclass(frozen=True, slots=True)
class Event:
    hook: str  # "patient-view" | "order-sign"
    at: datetime
    order: Timed | None = None  # the drafted order (order-sign)


def _sodium_codes() -> frozenset[str]:
    return frozenset(loinc.codes_for(Analyte.SODIUM))


def _is_sodium(res: dict[str, Any], codes: frozenset[str]) -> bool:
    return any(
        obj(c).get("system") == loinc.LOINC_SYSTEM and obj(c).get("code") in codes
        for c in items(obj(res.get("code")).get("coding"))
    )


def _end_of_order(res: dict[str, Any]) -> datetime | None:
    end = parse_datetime(obj(obj(res.get("dispenseRequest")).get("validityPeriod")).get("end"))
    if end is None:
        for d in items(res.get("dosageInstruction")):
            bounds = obj(obj(obj(d).get("timing")).get("repeat")).get("boundsPeriod")
            end = parse_datetime(obj(bounds).get("end"))
            if end is not None:
                break
    return end


def timed(res: dict[str, Any]) -> Timed:
    """When ``res`` entered the record (and ended, for orders and problems)."""
    kind = res.get("resourceType")
    if kind == "Observation":
        return Timed(res, parse_datetime(res.get("issued")) or effective_time(res))
    if kind in ("MedicationRequest",):
        return Timed(res, parse_datetime(res.get("authoredOn")), _end_of_order(res))
    if kind in ("MedicationAdministration", "MedicationStatement"):
        period = obj(res.get("effectivePeriod"))
        since = parse_datetime(res.get("effectiveDateTime")) or parse_datetime(period.get("start"))
        return Timed(res, since or parse_datetime(res.get("dateAsserted")))
    if kind == "Condition":
        since = parse_datetime(res.get("recordedDate")) or parse_datetime(res.get("onsetDateTime"))
        return Timed(res, since, parse_datetime(res.get("abatementDateTime")))
    return Timed(res, None)


def _before_change(res: dict[str, Any], until: datetime | None) -> dict[str, Any]:
    """The resource as it was before ``until``: an order that ended then was active, a
    problem that resolved then was active; an order still marked active had not ended yet
    before ``until`` either (its later state is set by :meth:`Timed.at`)."""
    if until is None:
        return res
    kind = res.get("resourceType")
    if kind == "MedicationRequest" and text(res.get("status")) in ENDED_ORDER:
        return {**res, "status": "active"}
    if kind == "Condition":
        codes = {obj(c).get("code") for c in items(obj(res.get("clinicalStatus")).get("coding"))}
        if codes & ENDED_PROBLEM:
            return {**res, "clinicalStatus": {"coding": [{"system": _CLINICAL, "code": "active"}]}}
    return res


def as_of(record: Sequence[Timed], moment: datetime, leave_out: Timed | None = None) -> list[Timed]:
    """The record at ``moment``: what had entered it by then."""
    return [t for t in record if t is not leave_out and (t.since is None or t.since <= moment)]


def as_draft(order: Timed) -> dict[str, Any]:
    """The order as the ordering clinician's draft (status ``draft``)."""
    return {**order.resource, "status": "draft"}


def prefetch(
    patient_id: str, record: Sequence[Timed], moment: datetime, leave_out: Timed | None = None
) -> dict[str, Any]:
    """The service's own prefetch templates run against the record at ``moment``
    (:func:`as_of`), as a CDS client would (``hooks.client.build_request`` does the same on a
    Bundle).

    ``run_query`` decides the matches; which versions of the record's resources match which
    query does not depend on the moment, so it runs once per patient on every version
    (:func:`memberships`), and each moment's selection keeps ``run_query``'s order.
    """
    queries = _queries(patient_id)
    member = memberships(queries, record)
    chosen: dict[str, list[dict[str, Any]]] = {key: [] for key in queries}
    for t in as_of(record, moment, leave_out):
        version = t.at(moment)
        for key in member.get(id(version), ()):
            chosen[key].append(version)
    out: dict[str, Any] = {}
    for key, query in queries.items():
        if "?" not in query:  # a read: the resource itself, or None
            out[key] = chosen[key][0] if chosen[key] else None
        else:
            order = member.get(("order", key), {})
            chosen[key].sort(key=lambda r: order[id(r)])
            out[key] = _searchset(chosen[key])
    return out


def _queries(patient_id: str) -> dict[str, str]:
    return {key: fill(q, {"patientId": patient_id}) for key, q in prefetch_templates().items()}


def _searchset(matches: list[dict[str, Any]]) -> dict[str, Any]:
    """The Bundle ``run_query`` answers a search with."""
    return {
        "resourceType": "Bundle",
        "type": "searchset",
        "total": len(matches),
        "entry": [{"resource": r} for r in matches],
    }


_MEMO: dict[int, tuple[Sequence[Timed], dict[Any, Any]]] = {}


def memberships(queries: dict[str, str], record: Sequence[Timed]) -> dict[Any, Any]:
    """id(version) -> prefetch keys it matches, and per search key the rank of each match in
    ``run_query``'s order; computed with ``run_query`` over every version of the record."""
    cached = _MEMO.get(id(record))
    if cached is not None and cached[0] is record:
        return cached[1]
    versions: dict[int, dict[str, Any]] = {}
    for t in record:
        for version in (t.resource, t.then):
            if version is not None:
                versions.setdefault(id(version), version)
    found: dict[Any, Any] = {}
    everything = list(versions.values())
    for key, query in queries.items():
        answer = run_query(query, everything)
        if answer is None:
            continue
        matched = [e["resource"] for e in answer["entry"]] if "?" in query else [answer]
        for rank, r in enumerate(matched):
            found[id(r)] = (*found.get(id(r), ()), key)
            found.setdefault(("order", key), {})[id(r)] = rank
    _MEMO.clear()  # one patient at a time: keep only the latest record
    _MEMO[id(record)] = (record, found)
    return found


def checked_order(res: dict[str, Any]) -> bool:
    """An IV fluid or a drug of a class Tonicity checks (read by the FHIR layer's own
    functions): the orders whose signing the rehearsal replays."""
    if res.get("resourceType") != "MedicationRequest":
        return False
    med = medications.medication_of(res, {})
    found = medications.names_of(med)
    if fluids.composition(res, med, list(found.texts)).is_fluid:
        return True
    return bool(classify(found.names, found.rxnorm, found.display))


def events(record: Iterable[Timed], start: datetime, end: datetime) -> list[Event]:
    """The calls to replay in ``[start, end)``, in time order (patient-view before order-sign
    at the same moment; several results arriving together make one call)."""
    codes = _sodium_codes()
    out: dict[tuple[datetime, int, str], Event] = {}
    for t in record:
        if t.since is None or not start <= t.since < end:
            continue
        res = t.resource
        kind = res.get("resourceType")
        if kind == "Observation" and _is_sodium(res, codes):
            out.setdefault((t.since, 0, ""), Event("patient-view", t.since))
        elif kind == "MedicationRequest" and checked_order(res):
            key = (t.since, 1, str(res.get("id")))
            out.setdefault(key, Event("order-sign", t.since, t))
    return [out[k] for k in sorted(out)]
