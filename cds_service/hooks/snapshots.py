"""Trend snapshots: what one evaluation showed, stored for a while behind an unguessable token.

A card link carries only the token (``/trend/{token}``); the store keeps the token's SHA-256,
never the token itself, so a copy of the database does not open any page. The payload holds
times, values and findings but no patient identifier and no name. Snapshots expire after
``server.trend_link_ttl_hours`` and are purged on the next save (at most once a minute of
evaluation time on the hook path, see :func:`purge_due`; and by :func:`purge_expired`).
"""

from __future__ import annotations

import hashlib
import json
import secrets
from collections.abc import Mapping
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import delete, update
from sqlalchemy.orm import Session

from cds_service.clinical.context import Analyte, ClinicalContext, LabResult
from cds_service.clinical.correction import applicable_limits, episode_start
from cds_service.clinical.drugs import match_medication
from cds_service.clinical.findings import FINDING_DISPLAY, Finding
from cds_service.clinical.thresholds import Thresholds
from cds_service.hooks.models import strict_dumps
from cds_service.store import Store
from cds_service.store.schema import Snapshot

#: Bytes of randomness in a token: 32 bytes = 256 bits (the issue asks for at least 128).
TOKEN_BYTES = 32
PAYLOAD_VERSION = 1
#: Days an expired snapshot's bare row is kept so its link answers 410 instead of 404.
TOMBSTONE_DAYS = 30

#: Tests plotted as markers beside the sodium series, with their chart labels.
MARKER_ANALYTES: dict[Analyte, str] = {
    Analyte.OSMOLALITY: "Serum osmolality",
    Analyte.URINE_OSMOLALITY: "Urine osmolality",
    Analyte.URINE_SODIUM: "Urine sodium",
}


class SnapshotNotFound(LookupError):
    """No snapshot answers to this token (never issued, or already purged)."""


class SnapshotExpired(LookupError):
    """The snapshot existed but its time is over."""


def token_hash(token: str) -> str:
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def _utc(t: datetime) -> datetime:
    """Every time we store or compare is UTC; SQLite hands back naive datetimes (UTC)."""
    return t.replace(tzinfo=UTC) if t.tzinfo is None else t.astimezone(UTC)


def _iso(t: datetime | None) -> str | None:
    if t is None:
        return None
    return (t if t.tzinfo is UTC else _utc(t)).isoformat()  # most times are UTC already


# --- payload ----------------------------------------------------------------------------------


def _sodium_note(r: LabResult) -> str:
    notes = []
    if r.preliminary:
        notes.append("preliminary")
    if r.direct_ise:
        notes.append("whole blood")
    return ", ".join(notes)


def _limits(ctx: ClinicalContext, th: Thresholds) -> dict[str, Any]:
    start = episode_start(ctx, th)
    lim = applicable_limits(ctx, th)
    return {
        "episode_start": _iso(start),
        "start_value": _start_value(ctx, start),
        "limit_24h": float(lim.limit_24h),
        "limit_48h": float(lim.limit_48h),
        "high_risk_reasons": list(lim.high_risk_reasons),
    }


def _start_value(ctx: ClinicalContext, start: datetime | None) -> float | None:
    if start is None:
        return None
    series = ctx.series.get(Analyte.SODIUM, ())
    at = [r.value for r in series if r.time == start]
    return min(at) if at else None


def _starts(ctx: ClinicalContext, findings: list[Finding]) -> list[dict[str, Any]]:
    """Medication starts and drafts (at ``now``); ``associated`` when a finding relied on the
    medication or the clinical drug classes know it as sodium-relevant."""
    cited = {i.source_id for f in findings for i in f.inputs if i.source_id}
    out: list[dict[str, Any]] = [
        {
            "label": m.display,
            "time": _iso(m.start),
            "kind": "medication",
            "associated": m.source_id in cited or bool(match_medication(m)),
        }
        for m in ctx.medications
        if m.start is not None
    ]
    drafts = [d.display for d in ctx.draft_fluids] + [d.display for d in ctx.draft_medications]
    out += [
        {"label": f"{d} (draft)", "time": _iso(ctx.now), "kind": "draft", "associated": True}
        for d in drafts
    ]
    out.sort(key=lambda s: s["time"])
    return out


def _finding(f: Finding) -> dict[str, Any]:
    return {
        "code": str(f.code),
        "display": FINDING_DISPLAY.get(f.code, str(f.code)),
        "urgency": str(f.urgency),
        "summary": f.summary,
        "values": [{"name": str(v.name), "value": v.value, "unit": v.unit} for v in f.values],
        "inputs": [
            {"label": i.label, "value": i.value, "unit": i.unit, "time": _iso(i.time)}
            for i in f.inputs
        ],
    }


def snapshot_payload(
    ctx: ClinicalContext, findings: list[Finding], th: Thresholds
) -> dict[str, Any]:
    """A JSON-able picture of one evaluation for the trend page (no identifier, no name)."""
    sodium = [
        {"time": _iso(r.time), "value": r.value, "note": _sodium_note(r)}
        for r in ctx.series.get(Analyte.SODIUM, ())
    ]
    markers = [
        {"kind": str(a), "label": label, "time": _iso(r.time), "value": r.value, "unit": r.unit}
        for a, label in MARKER_ANALYTES.items()
        for r in ctx.series.get(a, ())
    ]
    return {
        "version": PAYLOAD_VERSION,
        "now": _iso(ctx.now),
        "sodium": sodium,
        "markers": markers,
        "starts": _starts(ctx, findings),
        "limits": _limits(ctx, th) if sodium else None,
        "findings": [_finding(f) for f in findings],
    }


# --- store ------------------------------------------------------------------------------------


def new_snapshot(
    payload: Mapping[str, Any], *, ttl_hours: float, now: datetime
) -> tuple[str, Snapshot]:
    """A fresh token and the row that stores ``payload`` under its hash until
    ``now + ttl_hours``; the caller adds the row to a session."""
    if ttl_hours <= 0:
        raise ValueError(f"ttl_hours must be positive, got {ttl_hours}")
    now = _utc(now)
    token = secrets.token_urlsafe(TOKEN_BYTES)
    row = Snapshot(
        token_hash=token_hash(token),
        created_at=now,
        expires_at=now + timedelta(hours=ttl_hours),
        payload=strict_dumps(payload).decode("utf-8"),
    )
    return token, row


def save_snapshot(
    store: Store, payload: Mapping[str, Any], *, ttl_hours: float, now: datetime
) -> str:
    """Store ``payload`` until ``now + ttl_hours``; return the token for the link."""
    token, row = new_snapshot(payload, ttl_hours=ttl_hours, now=now)
    with store.session() as s:
        purge_in(s, row.created_at)
        s.add(row)
    return token


def load_snapshot(store: Store, token: str, now: datetime) -> dict[str, Any]:
    """The payload behind ``token``; raises SnapshotExpired or SnapshotNotFound."""
    return load_snapshot_until(store, token, now)[0]


def load_snapshot_until(store: Store, token: str, now: datetime) -> tuple[dict[str, Any], datetime]:
    """The payload behind ``token`` and when it expires (UTC)."""
    if not token or len(token) > 200:
        raise SnapshotNotFound(token)
    with store.session() as s:
        row = s.get(Snapshot, token_hash(token))
        if row is None:
            raise SnapshotNotFound(token)
        expires_at, body = _utc(row.expires_at), row.payload
    if expires_at <= _utc(now) or not body:
        raise SnapshotExpired(token)
    payload: dict[str, Any] = json.loads(body)
    return payload, expires_at


def purge_expired(store: Store, now: datetime) -> int:
    """Drop the payload of every snapshot whose time is over; return how many were purged.

    The bare row (hash and times, nothing clinical) stays :data:`TOMBSTONE_DAYS` longer so an
    old link still says "expired" (410) rather than "unknown" (404); then it goes too.
    """
    with store.session() as s:
        return purge_in(s, _utc(now))


#: Evaluation-time seconds between two purges on the hook path: a purge is two statements,
#: a quarter of the card log's write, and expired rows are refused on reading anyway.
PURGE_INTERVAL = timedelta(seconds=60)
_last_purge: dict[str, datetime] = {}  # per database URL: evaluation time of the last purge


def purge_due(store: Store, now: datetime) -> bool:
    """True (and noted) when the hook path should purge ``store`` at ``now``: the first time,
    a minute after its last purge, or when ``now`` is before it (a replayed or shifted
    evaluation time)."""
    now = _utc(now)
    last = _last_purge.get(store.url)
    if last is not None and last <= now < last + PURGE_INTERVAL:
        return False
    _last_purge[store.url] = now
    return True


def purge_in(s: Session, now: datetime) -> int:
    """Purge expired snapshots inside an open session (see :func:`purge_expired`)."""
    s.execute(delete(Snapshot).where(Snapshot.expires_at <= now - timedelta(days=TOMBSTONE_DAYS)))
    result = s.execute(
        update(Snapshot)
        .where(Snapshot.expires_at <= now, Snapshot.payload != "")
        .values(payload="")
    )
    return int(getattr(result, "rowcount", 0) or 0)
