"""The live service's side of the alert policy: read the scope's history from the store (one
query), call :func:`~cds_service.alerts.policy.decide`, and build the card-log rows of what
was kept back. ``hooks/service.py`` calls :func:`gate` once per hook call.
"""

from __future__ import annotations

import asyncio
import dataclasses
import re
import uuid
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from cds_service import logs
from cds_service.alerts.policy import AlertSettings, Decision, Quiet, Shown, decide
from cds_service.alerts.reasons import quiet_for_override, reason_displays
from cds_service.clinical.findings import Finding, Urgency
from cds_service.store.cards import CardLogRow, Scope, recent

#: ``X-Tonicity-Replay``: the call id ``tonicity replay`` sends with each call it makes.
REPLAY_HEADER = "X-Tonicity-Replay"
REPLAY_CALL = re.compile(r"[A-Za-z0-9\-]{1,64}")

__all__ = [
    "Gate",
    "annotate_discovery",
    "gate",
    "kept_back_rows",
    "quiet_maker",
    "reason_displays",
    "settings_for",
]

_CACHE: dict[int, tuple[object, AlertSettings]] = {}


def settings_for(settings: Any, services: Iterable[str] | None = None) -> AlertSettings:
    """The :class:`AlertSettings` of these settings, built once per settings object."""
    section = getattr(settings, "alerts", None)
    hit = _CACHE.get(id(section))
    if hit is not None and hit[0] is section:
        return hit[1]
    built = AlertSettings.from_settings(settings, services)
    if len(_CACHE) > 16:
        _CACHE.clear()
    _CACHE[id(section)] = (section, built)
    return built


def scope_of(
    settings: Any, alert: AlertSettings, service_id: str, patient_id: str, user_id: object
) -> Scope:
    salt = settings.logging.patient_id_salt
    user = logs.hash_patient_id(salt, user_id) if isinstance(user_id, str) and user_id else None
    return Scope(
        patient_hash=logs.hash_patient_id(salt, patient_id),
        service_id=service_id,
        user_hash=user,
        per_user=alert.scope == "patient-and-user",
    )


@dataclass(slots=True)
class Gate:
    """What the policy decided for one call."""

    decisions: list[Decision]
    shown: list[Finding]
    scope: Scope | None
    kept_back: list[Decision] = field(default_factory=list)  # suppressed and silent

    def decision(self, code: str) -> Decision | None:
        return next((d for d in self.decisions if d.code == code), None)


def split(rows: Iterable[Any]) -> tuple[list[Shown], list[Quiet]]:
    history: list[Shown] = []
    quiets: list[Quiet] = []
    for r in rows:
        if r.quiet:
            quiets.append(
                Quiet(r.finding_code, r.reason_code, r.until, r.inputs_digest, r.indicator, r.at)
            )
        else:
            history.append(Shown(r.finding_code, r.indicator, r.inputs_digest, r.at, r.silent))
    return history, quiets


def _read(store: Any, scope: Scope, alert: AlertSettings, now: datetime) -> list[Any]:
    with store.session() as s:
        return recent(s, scope, since=now - alert.max_window, now=now)


async def gate(
    findings: Sequence[Finding],
    *,
    store: Any,
    settings: Any,
    alert: AlertSettings,
    service_id: str,
    patient_id: str,
    user_id: object,
    now: datetime,
    replay_call: str | None,
) -> Gate:
    """Decide which findings are shown. History is read only with a store and for live
    traffic: replay calls are never suppressed and never suppress (only silent and off
    settings apply to them)."""
    scope = None
    history: list[Shown] = []
    quiets: list[Quiet] = []
    if store is not None:
        scope = scope_of(settings, alert, service_id, patient_id, user_id)
        if replay_call is None and findings:
            history, quiets = split(await asyncio.to_thread(_read, store, scope, alert, now))
    decisions = decide(
        findings, service_id=service_id, history=history, quiets=quiets, settings=alert, now=now
    )
    shown = [
        f
        if f.urgency.value == d.indicator
        else dataclasses.replace(f, urgency=Urgency(d.indicator))
        for f, d in zip(findings, decisions, strict=True)
        if d.action == "show"
    ]
    kept = [d for d in decisions if d.action in ("suppressed", "silent")]
    return Gate(decisions, shown, scope, kept)


def kept_back_rows(
    g: Gate, *, client_id: str | None, now: datetime, replay_call: str | None
) -> list[CardLogRow]:
    """Card-log rows for what was kept back (each with an id never sent to a client)."""
    if g.scope is None:
        return []
    return [
        CardLogRow(
            card_uuid=str(uuid.uuid4()),
            service_id=g.scope.service_id,
            finding_code=d.code,
            indicator=d.indicator,
            patient_hash=g.scope.patient_hash,
            client_id=client_id,
            created_at=now,
            action=d.action,
            why=d.why,
            inputs_digest=d.inputs_digest,
            user_hash=g.scope.user_hash,
            replay_call=replay_call,
            would_show=d.would_show,
        )
        for d in g.kept_back
    ]


#: Discovery extension naming the live alert settings of each service.
DISCOVERY_EXTENSION = "tonicity.alerts"


def annotate_discovery(document: dict[str, Any], alert: AlertSettings) -> dict[str, Any]:
    """The discovery document with, on each service, which alert settings are live: the
    settings digest, whether the service is silent, and its silent and switched-off codes."""
    for service in document.get("services", []):
        silent, off = alert.quiet_codes(service["id"])
        info: dict[str, Any] = {
            "settingsDigest": alert.digest,
            "silent": service["id"] in alert.silent_services,
            "repeatSuppression": alert.suppression,
            "scope": alert.scope,
        }
        if silent:
            info["silentFindings"] = silent
        if off:
            info["offFindings"] = off
        service.setdefault("extension", {})[DISCOVERY_EXTENSION] = info
    return document


def quiet_maker(alert: AlertSettings) -> Any:
    """The ``quiet_for`` of ``store.feedback.record_feedback`` under these settings."""

    def quiet_for(card: Any, reason_code: str, at: datetime) -> tuple[Any, Any] | None:
        q = quiet_for_override(
            reason_code,
            code=card.finding_code,
            indicator=card.indicator,
            inputs_digest=card.inputs_digest,
            settings=alert,
            at=at,
        )
        return None if q is None else (q.until, q.inputs_digest)

    return quiet_for
