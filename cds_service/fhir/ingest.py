"""build_context: FHIR R4 JSON (prefetch, fetched Bundles, draft orders) -> ClinicalContext.

The path is filter -> validate -> read: each raw dict is first sorted by resourceType (and
Observations by LOINC code), only the relevant ones are validated with fhir.resources' R4B
models, and only valid ones are read. Nothing here raises on any JSON shape; every resource
gets a report line saying what it was understood as, and used or ignored and why.
"""

from __future__ import annotations

from collections.abc import Collection, Iterable
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime, timedelta
from functools import lru_cache
from typing import Any

from cds_service.clinical.context import (
    ClinicalContext,
    ConditionEntry,
    DisplayUnits,
    DraftFluid,
    DraftMedication,
    DraftUnidentified,
    MedicationEntry,
)
from cds_service.config import IngestSettings
from cds_service.fhir import conditions, fluids, medications, patient, timeline, validate
from cds_service.fhir._json import obj, reference, text
from cds_service.fhir.observations import ObservationReader
from cds_service.fhir.report import IngestReport, ReportBuilder
from cds_service.fhir.resources import Collected, collect, report_duplicates
from cds_service.fhir.times import parse_datetime

MEDICATION_STATUSES = {
    "MedicationRequest": frozenset({"active", "on-hold", "draft"}),
    "MedicationStatement": frozenset({"active", "intended", "on-hold"}),
    "MedicationAdministration": frozenset({"in-progress", "completed"}),
}
_SUBJECT_FIELDS = ("subject", "patient")


@dataclass(frozen=True, slots=True)
class Ingested:
    context: ClinicalContext
    report: IngestReport


def _other_patient(resource: dict[str, Any], patient_id: str | None) -> str | None:
    """The reference when the resource names a different patient than ``patient_id``."""
    if not patient_id:
        return None
    for name in _SUBJECT_FIELDS:
        ref = reference(resource.get(name))
        if ref:
            pid = _patient_in(ref)
            if pid is not None and pid != patient_id:
                return ref
    return None


@lru_cache(maxsize=1024)  # every result of a record names the same patient
def _patient_in(ref: str) -> str | None:
    """The Patient id a reference names, or None when it names no Patient."""
    return ref.rsplit("Patient/", 1)[1].split("/")[0] if "Patient/" in ref else None


def _start(resource: dict[str, Any]) -> datetime | None:
    for value in (
        resource.get("authoredOn"),
        resource.get("effectiveDateTime"),
        obj(resource.get("effectivePeriod")).get("start"),
        resource.get("dateAsserted"),
    ):
        when = parse_datetime(value)
        if when is not None:
            return when
    return None


def _medication(
    resource: dict[str, Any],
    key: str,
    kind: str,
    collected: Collected,
    now: datetime,
    settings: IngestSettings,
    report: ReportBuilder,
) -> MedicationEntry | None:
    status = text(resource.get("status")) or "missing"
    if status not in MEDICATION_STATUSES[kind]:
        report.ignore(key, kind, f"status {status}: not a current medication")
        return None
    why = validate.problem(resource)
    if why:
        report.ignore(key, kind, why)
        return None
    start = _start(resource)
    if kind == "MedicationAdministration" and status == "completed":
        recent = now - timedelta(hours=settings.default_lookback_hours)
        if start is None or start < recent or start > now:
            report.ignore(key, kind, "completed administration outside the lookback window")
            return None
    found = medications.names_of(medications.medication_of(resource, collected.index))
    if not found.names and not found.rxnorm:
        report.ignore(key, kind, "no medication code or name")
        return None
    report.add(key, f"medication: {', '.join(found.names) or found.display}", True, status)
    return MedicationEntry(
        names=found.names,
        rxnorm=found.rxnorm,
        display=found.display,
        status=status,
        kind=kind,
        source_id=key,
        start=start,
    )


def _condition(resource: dict[str, Any], key: str, report: ReportBuilder) -> list[ConditionEntry]:
    entries = conditions.match(resource, key)
    label = "condition: " + (
        ", ".join(e.category.value for e in entries) or "not in Tonicity's code sets"
    )
    if not entries:
        report.ignore(key, label, "no SNOMED CT or ICD-10-CM code Tonicity reads")
        return []
    why = conditions.status_problem(resource) or validate.problem(resource)
    if why:
        report.ignore(key, label, why)
        return []
    report.add(key, label, True)
    return entries


def _draft(
    resource: dict[str, Any],
    key: str,
    collected: Collected,
    selected: bool,
    report: ReportBuilder,
) -> DraftFluid | DraftMedication | DraftUnidentified | None:
    kind = text(resource.get("resourceType")) or "?"
    if kind not in ("MedicationRequest", "MedicationStatement"):
        report.ignore(key, f"draft {kind}", "draft order type not checked by Tonicity")
        return None
    why = validate.problem(resource)
    if why:
        report.ignore(key, f"draft {kind}", why)
        return None
    med = medications.medication_of(resource, collected.index)
    found = medications.names_of(med)
    comp = fluids.composition(resource, med, list(found.texts))
    flag = "selected" if selected else "not selected"
    if comp.is_fluid:
        report.add(key, f"draft IV fluid: {found.display}", True, flag)
        return DraftFluid(
            resource_id=key,
            display=found.display,
            nacl_percent=comp.nacl_percent,
            dextrose_percent=comp.dextrose_percent,
            added_potassium_mmol_per_l=comp.added_potassium_mmol_per_l,
            named_solution=comp.named_solution,
            volume_l=comp.volume_l,
            rate_ml_per_h=comp.rate_ml_per_h,
            selected=selected,
        )
    unknown = fluids.unidentified(resource, med, found, comp)
    if unknown is not None:
        report.add(key, f"draft {unknown.kind}, not identified: {unknown.display}", True, flag)
        return replace(unknown, resource_id=key, selected=selected)
    if not found.names and not found.rxnorm:
        report.ignore(key, f"draft {kind}", "no medication code or name")
        return None
    report.add(key, f"draft medication: {', '.join(found.names)}", True, flag)
    return DraftMedication(key, found.display, found.names, found.rxnorm, selected)


def _aware(now: datetime) -> datetime:
    return now if now.tzinfo is not None else now.replace(tzinfo=UTC)


def build_context(
    resources: Iterable[Any],
    *,
    now: datetime,
    settings: IngestSettings,
    patient_id: str | None = None,
    draft_orders: Iterable[Any] = (),
    selections: Collection[str] = (),
    report_lines: bool = True,
    partial_reads: Collection[str] = (),
    display_units: str = DisplayUnits.CONVENTIONAL,
) -> Ingested:
    """The ClinicalContext for one patient at ``now``, and what was understood of each resource
    (``report_lines`` False: the same context, an empty report, for callers that do not show
    it). ``partial_reads``: the queries (prefetch keys) of which only the first page(s) were
    read; the context carries them so that the cards resting on them say so.
    ``display_units``: the institution's units for card text (``display.units``)."""
    now = _aware(now)
    report = ReportBuilder(enabled=report_lines)
    collected = collect(resources, report)
    reader = ObservationReader(now, report, lambda a: timeline.lookback(a, settings))
    if patient_id is None:  # a Bundle of one patient's record: that patient is in context
        patient_id = next(
            (text(r.get("id")) for _, r in collected.resources if r["resourceType"] == "Patient"),
            None,
        )
    record = _Record(now, settings, patient_id, collected, report, reader)
    for key, res in collected.resources:
        try:
            record.read(key, res)
        except Exception as exc:  # a reader bug must cost one resource, never the request
            report.ignore(key, res["resourceType"], f"could not be read ({type(exc).__name__})")
    report_duplicates(collected, report)
    drafts = _drafts(draft_orders, collected, selections, report)
    series = timeline.build_series(reader.results)
    ctx = ClinicalContext(
        now=now,
        patient=patient.facts(record.patient, patient_id, now),
        series=series,
        current=timeline.choose_current(series, now, settings),
        rejected=tuple(reader.rejected),
        medications=tuple(record.meds),
        conditions=tuple(_unique_conditions(record.conds)),
        draft_fluids=tuple(d for d in drafts if isinstance(d, DraftFluid)),
        draft_medications=tuple(d for d in drafts if isinstance(d, DraftMedication)),
        draft_unidentified=tuple(d for d in drafts if isinstance(d, DraftUnidentified)),
        partial_reads=tuple(sorted(set(partial_reads))),
        display_units=DisplayUnits(display_units),
    )
    return Ingested(ctx, report.build())


@dataclass
class _Record:
    """One patient's record being read: the collections build_context fills."""

    now: datetime
    settings: IngestSettings
    patient_id: str | None
    collected: Collected
    report: ReportBuilder
    reader: ObservationReader
    meds: list[MedicationEntry] = field(default_factory=list)
    conds: list[ConditionEntry] = field(default_factory=list)
    patient: dict[str, Any] | None = None

    def read(self, key: str, res: dict[str, Any]) -> None:
        kind, report = res["resourceType"], self.report
        if kind == "Observation" and self.reader.fast(res, key, self._same_patient):
            return
        other = _other_patient(res, self.patient_id)
        if other:
            report.ignore(key, kind, f"belongs to another patient ({other})")
        elif kind == "Observation":
            self.reader.read(res, key)
        elif kind in MEDICATION_STATUSES:
            entry = _medication(res, key, kind, self.collected, self.now, self.settings, report)
            if entry is not None:
                self.meds.append(entry)
        elif kind == "Condition":
            self.conds.extend(_condition(res, key, report))
        elif kind == "Patient":
            self.patient = _patient(res, key, self.patient_id, self.patient, report)
        elif kind == "Medication":
            report.add(key, "medication definition", True, "read through references")
        else:
            report.ignore(key, kind, "resource type not read by Tonicity")

    def _same_patient(self, res: dict[str, Any]) -> bool:
        return _other_patient(res, self.patient_id) is None


def _patient(
    res: dict[str, Any],
    key: str,
    patient_id: str | None,
    chosen: dict[str, Any] | None,
    report: ReportBuilder,
) -> dict[str, Any] | None:
    rid = text(res.get("id"))
    if patient_id and rid and rid != patient_id:
        report.ignore(key, "patient", f"not the patient in context (Patient/{patient_id})")
        return chosen
    if chosen is not None:
        report.ignore(key, "patient", "a second Patient resource; the first one is used")
        return chosen
    why = validate.problem(res)
    if why:
        report.ignore(key, "patient", why)
        return chosen
    sex = patient.sex_of(res).value
    born = text(res.get("birthDate")) or "birth date unknown"
    report.add(key, f"patient: {sex}, born {born}", True)
    return res


def _drafts(
    draft_orders: Iterable[Any],
    collected: Collected,
    selections: Collection[str],
    report: ReportBuilder,
) -> list[DraftFluid | DraftMedication | DraftUnidentified]:
    draft_set = collect(draft_orders, report, Collected(index=dict(collected.index)))
    wanted = {s for s in selections if isinstance(s, str)}
    out: list[DraftFluid | DraftMedication | DraftUnidentified] = []
    for key, res in draft_set.resources:
        if res.get("resourceType") == "Medication":
            continue
        selected = not wanted or key in wanted
        try:
            draft = _draft(res, key, draft_set, selected, report)
        except Exception as exc:  # as for the record: one order lost, never the request
            report.ignore(
                key, f"draft {res['resourceType']}", f"could not be read ({type(exc).__name__})"
            )
            continue
        if draft is not None:
            out.append(draft)
    report_duplicates(draft_set, report)
    return out


def _unique_conditions(entries: list[ConditionEntry]) -> list[ConditionEntry]:
    seen: set[tuple[str, str]] = set()
    out = []
    for e in entries:
        if (e.category.value, e.source_id) not in seen:
            seen.add((e.category.value, e.source_id))
            out.append(e)
    return out
