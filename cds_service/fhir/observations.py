"""Observations -> LabResult / RejectedResult, with a report line for every resource."""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from functools import lru_cache
from typing import Any, NamedTuple

import orjson

from cds_service.clinical.context import CANONICAL_UNITS, Analyte, LabResult, RejectedResult
from cds_service.fhir import loinc, units, validate
from cds_service.fhir._data import load
from cds_service.fhir._json import codings, concept_text, items, number, obj, system_uri, text
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


_INTERPRETATION_SYSTEM = "http://terminology.hl7.org/CodeSystem/v3-ObservationInterpretation"


def _words(concept: Any) -> str:
    """Lowercase text and coding displays of a CodeableConcept (or a Reference's display)."""
    c = obj(concept)
    parts = [text(c.get("text")) or "", text(c.get("display")) or ""]
    parts += [display for _, _, display in codings(c)]
    return " ".join(parts).lower()


def direct_ise(resource: dict[str, Any], entry: loinc.LoincEntry) -> bool:
    """Whether the result was measured by direct ISE: Observation.method says so first
    ("direct ISE", "indirect ISE"), then the specimen (whole blood or serum), then the LOINC
    code's specimen (data/observations.toml, data/loinc.toml)."""
    ise = load("observations")["ise"]
    method = _words(resource.get("method"))
    if any(w in method for w in ise["indirect"]):
        return False
    if any(w in method for w in ise["direct"]):
        return True
    specimen = _words(resource.get("specimen"))
    if any(w in specimen for w in ise["whole_blood"]):
        return True
    if any(w in specimen for w in ise["serum"]):
        return False
    return entry.direct_ise


def interpretation_flags(holder: dict[str, Any]) -> list[tuple[str, str]]:
    """(code, clinician's words) of the v3 interpretation flags of an Observation or component."""
    table = load("observations")["interpretation"]
    out = []
    for concept in items(holder.get("interpretation")):
        for system, code, _ in codings(concept):
            if system == _INTERPRETATION_SYSTEM and isinstance(table.get(code), str):
                out.append((code, table[code]))
    return out


def effective_time(resource: dict[str, Any]) -> datetime | None:
    """effectiveDateTime, effectivePeriod (end, else start), effectiveInstant, else issued."""
    for key in ("effectiveDateTime", "effectiveInstant"):
        if key in resource:
            return parse_datetime(resource[key])
    period = obj(resource.get("effectivePeriod"))
    if period:
        return parse_datetime(period.get("end")) or parse_datetime(period.get("start"))
    return parse_datetime(resource.get("issued"))


class _Plan(NamedTuple):
    """What every Observation of one shape (same code, subject, status, unit, comparator;
    see :meth:`ObservationReader.fast`) shares: read once per shape and request."""

    entry: loinc.LoincEntry
    factor: float  # to the analyte's canonical unit
    comparator: str | None
    unit_text: str  # as ``read_value`` writes it into ``raw``
    preliminary: bool
    low: float
    high: float
    direct_ise: bool


#: The fields that make up an Observation's shape: the validated read fields except the
#: volatile ones (id and times), in validate's key order, valueQuantity's value set to 0;
#: a shape is the JSON text of those present (an absent field is no key, a null is null).
_SHAPE_FIELDS = validate.shared_fields("Observation")
_UNSEEN: Any = object()


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
    _plans: dict[bytes, _Plan | None] = field(default_factory=dict)

    def fast(
        self, resource: dict[str, Any], key: str, same_patient: Callable[[dict[str, Any]], bool]
    ) -> bool:
        """Read a plain Observation (one numeric valueQuantity, no component) through the plan
        of its shape; False, having done nothing, when :meth:`read` must read it instead.

        A prefetch repeats a handful of shapes (sodium in mmol/L from one laboratory, final,
        of this patient) hundreds of times. Everything that depends only on the shape (LOINC
        entry, validation, status, patient, unit factor) is decided once per shape and
        request, by the same functions :meth:`read` uses; per Observation only its time and
        value are read. Anything the plan does not cover (a rejection, a duplicate, a time
        after now, a report being written) goes to :meth:`read`, which then says why, so
        both ways give the same results (tests/fhir/test_fast_path.py).
        """
        if self.report.enabled or "component" in resource or "patient" in resource:
            return False
        quantity = resource.get("valueQuantity")
        if type(quantity) is not dict:
            return False
        number_ = quantity.get("value")
        if type(number_) is not float and type(number_) is not int:  # bool is neither
            return False
        present = {k: resource[k] for k in _SHAPE_FIELDS if k in resource}
        present["valueQuantity"] = {**quantity, "value": 0}
        try:  # equal JSON text means equal data (1, 1.0 and true differ): same plan
            shape = orjson.dumps(present)
        except TypeError:  # not JSON orjson writes (too deep, over 64-bit, lone surrogate)
            return False
        plan = self._plans.get(shape, _UNSEEN)
        if plan is _UNSEEN:
            plan = self._plans[shape] = self._plan(resource, same_patient)
        if plan is None:
            return False
        when = effective_time(resource)
        value = float(number_)
        if when is None or when > self.now or not math.isfinite(value):
            return False
        converted = round(value * plan.factor, 6)
        if not plan.low <= converted <= plan.high:
            return False
        entry = plan.entry
        dedup = (entry.analyte, when, converted)
        if dedup in self._seen:
            return False
        self._seen[dedup] = key
        self.results.append(
            LabResult(  # positional: a fifth cheaper than keywords, in the field order
                entry.analyte,
                converted,
                when,
                key,
                f"{plan.comparator or ''}{number_} {plan.unit_text}".strip(),
                plan.comparator,
                plan.preliminary,
                plan.direct_ise,
                entry.code,
            )
        )
        return True

    def _plan(
        self, resource: dict[str, Any], same_patient: Callable[[dict[str, Any]], bool]
    ) -> _Plan | None:
        """The plan of ``resource``'s shape, or None when :meth:`read` must read every
        Observation of this shape (not mapped, invalid, unusable status, other patient, unit
        not convertible)."""
        main = mapped_entries(resource.get("code"))
        if not main or not same_patient(resource) or validate.problem(resource, self._valid):
            return None
        status = text(resource.get("status"))
        if status not in USED_STATUSES and status != "preliminary":
            return None
        value = read_value(resource)
        if isinstance(value, str):
            return None
        analyte = main[0].analyte
        try:
            factor = units.factor(analyte, units.resolve(value.unit, value.code, value.system))
        except units.UnitProblem:
            return None
        info = units.analyte_units(analyte)
        unit_text = value.unit or value.code or ""
        preliminary = status == "preliminary"
        return _Plan(
            main[0],
            factor,
            value.comparator,
            unit_text,
            preliminary,
            info.low,
            info.high,
            direct_ise(resource, main[0]),
        )

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
            self._read_one(
                holder,
                entry,
                key,
                when,
                preliminary=status == "preliminary",
                direct=direct_ise(resource, entry),
                resource=resource,
            )

    def _read_one(
        self,
        holder: dict[str, Any],
        entry: loinc.LoincEntry,
        key: str,
        when: datetime,
        *,
        preliminary: bool,
        direct: bool,
        resource: dict[str, Any],
    ) -> None:
        analyte = entry.analyte
        label = f"{analyte.value} (LOINC {entry.code})"
        canonical = CANONICAL_UNITS[analyte]
        value = read_value(holder)
        if isinstance(value, str):
            flags = interpretation_flags(holder) or interpretation_flags(resource)
            if flags:  # the result exists, flagged, but has no number: say so, never drop it
                code, words = flags[0]
                reason = f"reported as {words} ({code}) without a number: {value}; not used"
                self._reject(analyte, f"no number, flagged {code}", reason, when, key, label)
                return
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
                direct_ise=direct,
                loinc=entry.code,
            )
        )
        if not self.report.enabled:
            return
        notes = [n for n, on in (("preliminary", preliminary), ("direct ISE", direct)) if on]
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
