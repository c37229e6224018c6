"""Observations -> LabResult / RejectedResult, with a report line for every resource."""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from functools import lru_cache
from typing import Any, NamedTuple

from cds_service.clinical.context import CANONICAL_UNITS, Analyte, LabResult, RejectedResult
from cds_service.fhir import loinc, units, validate
from cds_service.fhir._json import concept_text, items, number, obj, system_uri, text
from cds_service.fhir.report import ReportBuilder
from cds_service.fhir.times import parse_datetime

USED_STATUSES = frozenset({"final", "amended", "corrected"})
_STRING_VALUE = re.compile(r"^\s*(<=|>=|<|>)?\s*(-?\d+(?:\.\d+)?)\s*(.*?)\s*$")


def mapped_entries(concept: Any) -> list[loinc.LoincEntry]:
    """The map's entries for the LOINC codings of a CodeableConcept, in coding order."""
    out = []
    for coding in items(obj(concept).get("coding")):
        if isinstance(coding, dict):
            entry = _mapped(coding.get("system"), coding.get("code"))
            if entry is not None:
                out.append(entry)
    return out


@lru_cache(maxsize=1024)
def _lookup(system: str, code: str) -> loinc.LoincEntry | None:
    return loinc.lookup(code) if system_uri(system) == loinc.LOINC_SYSTEM else None


def _mapped(system: Any, code: Any) -> loinc.LoincEntry | None:
    """As ``codings`` reads a coding: system and code must be non-blank strings."""
    if isinstance(system, str) and isinstance(code, str) and system.strip() and code.strip():
        return _lookup(system, code)
    return None


def effective_time(resource: dict[str, Any]) -> datetime | None:
    """effectiveDateTime, effectivePeriod (end, else start), effectiveInstant, else issued."""
    for key in ("effectiveDateTime", "effectiveInstant"):
        if key in resource:
            return parse_datetime(resource[key])
    period = obj(resource.get("effectivePeriod"))
    if period:
        return parse_datetime(period.get("end")) or parse_datetime(period.get("start"))
    return parse_datetime(resource.get("issued"))


class _Value(NamedTuple):  # one per result read: a tuple is built ~4 x faster than a dataclass
    value: float
    comparator: str | None
    unit: str | None
    code: str | None
    system: str | None
    raw: str


def read_value(holder: dict[str, Any]) -> _Value | str:
    """The numeric value of an Observation or component, or why there is none."""
    q = holder.get("valueQuantity")
    if isinstance(q, dict):
        v = number(q.get("value"))
        if v is None:
            return "valueQuantity has no number"
        comparator = text(q.get("comparator"))
        unit, code = text(q.get("unit")), text(q.get("code"))
        raw = f"{comparator or ''}{q.get('value')} {unit or code or ''}".strip()
        return _Value(v, comparator, unit, code, text(q.get("system")), raw)
    s = text(holder.get("valueString"))
    if s is not None:
        m = _STRING_VALUE.match(s)
        if m is None:
            return f"valueString {s[:40]!r} is not a number"
        return _Value(float(m[2]), m[1], m[3] or None, None, None, s.strip())
    for key in ("valueInteger", "valueDecimal"):
        v = number(holder.get(key))
        if v is not None:
            return _Value(v, None, None, None, None, str(holder.get(key)))
    absent = holder.get("dataAbsentReason")
    if absent is not None:
        return f"no value (data absent: {concept_text(absent) or 'no reason given'})"
    if any(k.startswith("value") for k in holder):
        return "value is not a quantity"
    return "no value"


@dataclass
class ObservationReader:
    """Reads Observations one by one; collects results, rejections and report lines."""

    now: datetime
    report: ReportBuilder
    lookback: Callable[[Analyte], timedelta]
    results: list[LabResult] = field(default_factory=list)
    rejected: list[RejectedResult] = field(default_factory=list)
    _seen: dict[tuple[Analyte, datetime, float], str] = field(default_factory=dict)
    _valid: dict[bytes, str | None] = field(default_factory=dict)

    def read(self, resource: dict[str, Any], key: str) -> None:
        main = mapped_entries(resource.get("code"))[:1]
        parts = [
            (obj(c), entries[0])
            for c in items(resource.get("component"))
            if (entries := mapped_entries(obj(c).get("code")))
        ]
        if not main and not parts:
            label = concept_text(resource.get("code")) or "Observation"
            self.report.ignore(key, label, "code not in Tonicity's LOINC map")
            return
        label = f"{(main or [parts[0][1]])[0].analyte.value} observation"
        why = validate.problem(resource, self._valid)
        if why:
            self.report.ignore(key, label, why)
            return
        status = text(resource.get("status")) or "missing"
        if status not in USED_STATUSES and status != "preliminary":
            self.report.ignore(key, label, f"status {status}: not a usable result")
            return
        when = effective_time(resource)
        if when is None:
            self.report.ignore(key, label, "no effective time or issued time")
            return
        if when > self.now:
            self.report.ignore(key, label, "time is after the evaluation time", time=when)
            return
        holders = [(resource, entry) for entry in main] + parts
        for holder, entry in holders:
            self._read_one(holder, entry, key, when, preliminary=status == "preliminary")

    def _read_one(
        self,
        holder: dict[str, Any],
        entry: loinc.LoincEntry,
        key: str,
        when: datetime,
        *,
        preliminary: bool,
    ) -> None:
        analyte = entry.analyte
        label = f"{analyte.value} (LOINC {entry.code})"
        canonical = CANONICAL_UNITS[analyte]
        value = read_value(holder)
        if isinstance(value, str):
            self.report.ignore(key, label, value, analyte=analyte.value, time=when)
            return
        try:
            converted = round(
                value.value
                * units.factor(analyte, units.resolve(value.unit, value.code, value.system)),
                6,
            )
        except units.UnitProblem as problem:
            self._reject(analyte, value.raw, f"{problem}; not used", when, key, label)
            return
        if not units.plausible(analyte, converted):
            info = units.analyte_units(analyte)
            reason = (
                f"{converted:g} {canonical} is outside the plausible range "
                f"{info.low:g}-{info.high:g} {canonical} for {analyte.value}; not used"
            )
            self._reject(analyte, value.raw, reason, when, key, label, value=converted)
            return
        dedup = (analyte, when, round(converted, 6))
        if dedup in self._seen:
            self.report.ignore(
                key,
                label,
                f"same analyte, time and value as {self._seen[dedup]}: counted once",
                analyte=analyte.value,
                value=converted,
                unit=canonical,
                raw=value.raw,
                time=when,
            )
            return
        self._seen[dedup] = key
        self.results.append(
            LabResult(
                analyte=analyte,
                value=converted,
                time=when,
                source_id=key,
                raw=value.raw,
                comparator=value.comparator,
                preliminary=preliminary,
                direct_ise=entry.direct_ise,
                loinc=entry.code,
            )
        )
        if not self.report.enabled:
            return
        notes = [
            n for n, on in (("preliminary", preliminary), ("direct ISE", entry.direct_ise)) if on
        ]
        self.report.add(
            key,
            label,
            True,
            ", ".join(notes),
            analyte=analyte.value,
            value=converted,
            unit=canonical,
            raw=value.raw,
            time=when,
        )

    def _reject(
        self,
        analyte: Analyte,
        raw: str,
        reason: str,
        when: datetime,
        key: str,
        label: str,
        value: float | None = None,
    ) -> None:
        recent = when >= self.now - self.lookback(analyte)
        self.report.ignore(
            key,
            label,
            reason if recent else reason + " (older than the lookback, not reported)",
            analyte=analyte.value,
            value=value,
            unit=CANONICAL_UNITS[analyte] if value is not None else None,
            raw=raw,
            time=when,
        )
        if recent:
            self.rejected.append(RejectedResult(analyte, raw, reason, when, key))
