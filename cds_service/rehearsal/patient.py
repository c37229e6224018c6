"""Replay one patient's exported record through the live service's own code.

Each moment of :func:`timeslice.events` is evaluated on the record as it stood then, the way
``hooks/service.py::evaluate`` does it: the service's prefetch templates filled from the
record (``timeslice.prefetch``, as ``hooks.client.build_request``), ``check_prefetch``, the
FHIR mapping ``build_context``, the clinical core ``evaluate_workup`` / ``evaluate_orders``,
``one_per_code``, and then the alert policy ``alerts.policy.decide`` with this patient's
in-memory history of shown cards. What comes out is a :class:`PatientOutcome`: every decision,
the hyponatremic episodes, the correction-limit breaches and, for each breach, which cards
were shown before it was complete.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

import orjson

from cds_service.alerts.policy import AlertSettings, Decision, Shown, decide
from cds_service.clinical import engine
from cds_service.clinical.context import Analyte, ClinicalContext, LabResult
from cds_service.clinical.correction import surveil
from cds_service.clinical.episode import chronological, current_episode
from cds_service.clinical.findings import Finding, FindingCode
from cds_service.clinical.severity import severity
from cds_service.clinical.thresholds import Thresholds
from cds_service.config import Settings
from cds_service.fhir import build_context
from cds_service.fhir.times import parse_datetime
from cds_service.hooks.cards import one_per_code
from cds_service.hooks.prefetch import check_prefetch
from cds_service.hooks.registry import SERVICES, prefetch_templates
from cds_service.rehearsal import timeslice
from cds_service.rehearsal.timeslice import Event, Timed

SERVICE_FOR_HOOK = {s.hook: s.id for s in SERVICES.values()}

#: Cards that warn about a rise of sodium (order safety and correction surveillance): one of
#: these shown between the start of a rise and the result that completed a breach means the
#: clinician was warned in time to act.
WARNING_CODES = frozenset(
    {
        FindingCode.HYPERTONIC_SALINE_ORDER,
        FindingCode.ISOTONIC_FLUID_ORDER,
        FindingCode.VAPTAN_ORDER,
        FindingCode.POTASSIUM_ORDER,
        FindingCode.UNIDENTIFIED_ORDER,
        FindingCode.CORRECTION_RATE,
    }
)
DAY = 86400


@dataclass(frozen=True, slots=True)
class Env:
    """Everything one evaluation needs besides the record, built once per process."""

    settings: Settings
    thresholds: Thresholds
    alerts: AlertSettings
    start: datetime
    end: datetime


@dataclass(slots=True)
class Call:
    """One replayed hook call and its decisions (kept only when tracing)."""

    hook: str
    at: datetime
    decisions: list[tuple[str, str, str]]  # (code, indicator, action)


@dataclass(slots=True)
class PatientOutcome:
    patient_id: str
    adult: bool
    patient_seconds: int
    calls: dict[str, int] = field(default_factory=dict)  # hook -> number of calls
    decisions: list[tuple[int, str, str, str]] = field(default_factory=list)  # day, code, ind, act
    episodes: list[dict[str, Any]] = field(default_factory=list)
    breaches: list[dict[str, Any]] = field(default_factory=list)
    trace: list[Call] = field(default_factory=list)


def load_record(lines: Sequence[bytes | str]) -> list[Timed]:
    return [timeslice.timed(orjson.loads(line)) for line in lines]


def patient_id_of(record: Sequence[Timed]) -> str | None:
    for t in record:
        if t.resource.get("resourceType") == "Patient" and isinstance(t.resource.get("id"), str):
            return str(t.resource["id"])
    return None


def context_at(
    record: Sequence[Timed], patient_id: str, moment: datetime, env: Env, order: Timed | None
) -> ClinicalContext:
    """The ClinicalContext the live service would have built at ``moment``."""
    data = timeslice.prefetch(patient_id, record, moment, leave_out=order)
    state = check_prefetch(data, list(prefetch_templates()))
    drafts = (timeslice.as_draft(order),) if order is not None else ()
    return build_context(
        state.resources(),
        now=moment,
        settings=env.settings.ingest,
        patient_id=patient_id,
        draft_orders=drafts,
        report_lines=False,
        partial_reads=state.partial,
    ).context


def findings_at(ctx: ClinicalContext, hook: str, env: Env) -> list[Finding]:
    if hook == "patient-view":
        return one_per_code(engine.evaluate_workup(ctx, env.thresholds))
    return one_per_code(engine.evaluate_orders(ctx, env.thresholds))


def _encounter_seconds(record: Sequence[Timed], env: Env) -> int:
    spans: list[tuple[datetime, datetime]] = []
    for t in record:
        res = t.resource
        if res.get("resourceType") != "Encounter":
            continue
        period = res.get("period") if isinstance(res.get("period"), dict) else {}
        begin = parse_datetime(period.get("start"))
        if begin is None:
            continue
        finish = parse_datetime(period.get("end")) or env.end
        lo, hi = max(begin, env.start), min(finish, env.end)
        if hi > lo:
            spans.append((lo, hi))
    total, reach = 0, None
    for lo, hi in sorted(spans):
        if reach is not None and lo < reach:
            lo = reach
        if hi > lo:
            total += int((hi - lo).total_seconds())
        reach = hi if reach is None else max(reach, hi)
    return total


def _first_after(
    series: Sequence[LabResult], since: datetime, until: datetime | None
) -> int | None:
    """Minutes from ``since`` to the first result at or after it (before ``until``)."""
    for r in series:
        if r.time >= since and (until is None or r.time <= until):
            return int((r.time - since).total_seconds() // 60)
    return None


def _episodes(ctx: ClinicalContext, env: Env) -> list[dict[str, Any]]:
    th = env.thresholds
    sodium = chronological(ctx.series.get(Analyte.SODIUM, ()))
    pairing = timedelta(hours=env.settings.ingest.pairing_hours)
    osm = chronological(ctx.series.get(Analyte.OSMOLALITY, ()))
    urine = chronological(
        ctx.series.get(Analyte.URINE_OSMOLALITY, ()) + ctx.series.get(Analyte.URINE_SODIUM, ())
    )
    out = []
    i = 0
    while i < len(sodium):
        if sodium[i].value >= th.sodium_lower_normal:
            i += 1
            continue
        j = i
        while j + 1 < len(sodium) and sodium[j + 1].value < th.sodium_lower_normal:
            j += 1
        first = sodium[i]
        until = sodium[j + 1].time if j + 1 < len(sodium) else None
        if env.start <= first.time < env.end:
            nadir = min(sodium[i : j + 1], key=lambda r: (r.value, r.time))
            grade = severity(nadir.value, th)
            since = first.time - pairing
            osm_min = _first_after(osm, since, until)
            urine_min = _first_after(urine, since, until)
            lead = int(pairing.total_seconds() // 60)
            out.append(
                {
                    "severity": grade.value if grade else "unknown",
                    "nadir": nadir.value,
                    "first_low": first.time,
                    "osmolality_minutes": None if osm_min is None else max(0, osm_min - lead),
                    "urine_minutes": None if urine_min is None else max(0, urine_min - lead),
                }
            )
        i = j + 1
    return out


def _breach(
    ctx: ClinicalContext, env: Env, at: datetime, action: str, history: list[Shown]
) -> tuple[str, dict[str, Any]] | None:
    status = surveil(ctx, env.thresholds)
    episode = current_episode(
        ctx.series.get(Analyte.SODIUM, ()), env.thresholds.sodium_lower_normal
    )
    if status is None or not status.exceeded or episode is None:
        return None
    limits = status.limits
    if status.exceeded_24h and status.rise_24h is not None:
        window, rise, limit = 24, status.rise_24h, limits.limit_24h
    else:
        assert status.rise_48h is not None
        window, rise, limit = 48, status.rise_48h, limits.limit_48h
    before = [
        s
        for s in history
        if rise.start.time <= s.at < rise.end.time and not getattr(s, "silent", False)
    ]
    warnings = [s for s in before if s.code in WARNING_CODES]
    return episode.first_low.source_id, {
        "window_hours": window,
        "rise": round(rise.amount, 1),
        "limit": limit,
        "limit_set": "high-risk" if limits.high_risk_reasons else "standard",
        "limits": [limits.limit_24h, limits.limit_48h],
        "high_risk_reasons": list(limits.high_risk_reasons),
        "rise_start": rise.start.time,
        "rise_end": rise.end.time,
        "detected_at": at,
        "detection_action": action,
        "shown_before": sorted({s.code for s in before}),
        "warned_before": bool(warnings),
        "warnings_before": sorted({s.code for s in warnings}),
        "warning_lead_minutes": (
            int((rise.end.time - min(s.at for s in warnings)).total_seconds() // 60)
            if warnings
            else None
        ),
    }


def rehearse_patient(
    lines: Sequence[bytes | str], env: Env, *, trace: bool = False
) -> PatientOutcome | None:
    """The outcome for one patient's lines (None when no Patient resource names them)."""
    record = load_record(lines)
    pid = patient_id_of(record)
    if pid is None:
        return None
    end_ctx = context_at(record, pid, env.end - timedelta(microseconds=1), env, None)
    age = end_ctx.patient.age_years
    out = PatientOutcome(
        patient_id=pid,
        adult=age is not None and age >= env.thresholds.adult_age_years,
        patient_seconds=_encounter_seconds(record, env),
    )
    out.episodes = _episodes(end_ctx, env) if out.adult else []
    history: list[Shown] = []
    found: set[str] = set()
    for event in timeslice.events(record, env.start, env.end):
        _replay(event, record, pid, env, out, history, found, trace)
    return out


def _replay(
    event: Event,
    record: Sequence[Timed],
    pid: str,
    env: Env,
    out: PatientOutcome,
    history: list[Shown],
    found: set[str],
    trace: bool,
) -> None:
    ctx = context_at(record, pid, event.at, env, event.order)
    findings = findings_at(ctx, event.hook, env)
    decisions: list[Decision] = decide(
        findings,
        service_id=SERVICE_FOR_HOOK[event.hook],
        history=tuple(history),
        quiets=(),
        settings=env.alerts,
        now=event.at,
    )
    out.calls[event.hook] = out.calls.get(event.hook, 0) + 1
    day = int((event.at - env.start).total_seconds() // DAY)
    for d in decisions:
        out.decisions.append((day, d.code, d.indicator, d.action))
    if event.hook == "patient-view" and any(
        f.code is FindingCode.CORRECTION_RATE for f in findings
    ):
        action = next(d.action for d in decisions if d.code == FindingCode.CORRECTION_RATE.value)
        breach = _breach(ctx, env, event.at, action, history)
        if breach is not None and breach[0] not in found:
            found.add(breach[0])
            out.breaches.append(breach[1])
    for d in decisions:
        # what later repeat suppression counts as seen: a shown card, and (once the policy has
        # silent mode) a silent one that would have been shown, kept apart as ``silent``
        if getattr(d, "seen", d.action == "show"):
            extra = {"silent": True} if d.action == "silent" else {}
            history.append(Shown(d.code, d.indicator, d.inputs_digest, event.at, **extra))
    if trace:
        out.trace.append(
            Call(event.hook, event.at, [(d.code, d.indicator, d.action) for d in decisions])
        )
