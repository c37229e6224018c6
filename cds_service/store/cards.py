"""The card log: one row per finding evaluated (shown, suppressed or silent), written at
response time, and the one query repeat suppression makes per hook call.

Feedback joins to it by ``card_uuid`` (``show`` rows only: the others were never sent); the
feedback report and the quality view count from it.
"""

from __future__ import annotations

import json
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlalchemy import (
    ColumnElement,
    Select,
    and_,
    bindparam,
    cast,
    func,
    insert,
    literal,
    null,
    or_,
    select,
    union_all,
)
from sqlalchemy.engine import Connection
from sqlalchemy.orm import Session

from cds_service.store.database import Store, as_utc
from cds_service.store.schema import AlertQuiet, CardLog

INDICATORS = frozenset({"info", "warning", "critical"})
ACTIONS = frozenset({"show", "suppressed", "silent"})


@dataclass(frozen=True, slots=True)
class CardLogRow:
    """What is remembered of one card: no lab value, no name, the patient only as a hash."""

    card_uuid: str
    service_id: str
    finding_code: str
    indicator: str
    patient_hash: str | None
    client_id: str | None
    created_at: datetime
    action: str = "show"
    why: str | None = None
    inputs_digest: str | None = None
    user_hash: str | None = None
    replay_call: str | None = None
    suggestion_ids: tuple[str, ...] = ()
    #: A silent row that would have been shown (counts for later silent decisions only).
    would_show: bool = False

    def __post_init__(self) -> None:
        for name, limit in (("card_uuid", 64), ("service_id", 100), ("finding_code", 64)):
            value = getattr(self, name)
            if not isinstance(value, str) or not value or len(value) > limit:
                raise ValueError(f"{name} must be a non-empty string of at most {limit} characters")
        if self.indicator not in INDICATORS:
            raise ValueError(f"indicator {self.indicator!r} is not one of {sorted(INDICATORS)}")
        if self.action not in ACTIONS:
            raise ValueError(f"action {self.action!r} is not one of {sorted(ACTIONS)}")
        for name in ("patient_hash", "user_hash", "replay_call"):
            value = getattr(self, name)
            if value is not None and len(value) > 64:
                raise ValueError(f"{name} is longer than 64 characters")
        if self.created_at.tzinfo is None:
            raise ValueError("created_at must carry a time zone")


def log_cards(store: Store, rows: Iterable[CardLogRow]) -> None:
    """Write the cards of one response in one transaction (committed on return)."""
    rows = list(rows)
    if not rows:
        return
    with store.log_session() as s:
        add_cards(s, rows)


def add_cards(session: Session, rows: Iterable[CardLogRow]) -> None:
    """Insert the card-log rows in ``session``'s transaction (one multi-row INSERT, without
    the ORM's per-object bookkeeping: the rows are never read back in this session)."""
    values = [
        dict(
            card_uuid=r.card_uuid,
            service_id=r.service_id,
            finding_code=r.finding_code,
            indicator=r.indicator,
            patient_hash=r.patient_hash,
            client_id=(r.client_id or None) and r.client_id[:300],
            created_at=as_utc(r.created_at),
            action=r.action,
            would_show=r.action == "silent" and r.would_show,
            why=(r.why or None) and r.why[:300],
            inputs_digest=r.inputs_digest,
            user_hash=r.user_hash,
            replay_call=r.replay_call,
            suggestion_ids=json.dumps(list(r.suggestion_ids)) if r.suggestion_ids else None,
        )
        for r in rows
    ]
    if values:
        session.execute(insert(CardLog), values)


@dataclass(frozen=True, slots=True)
class Scope:
    """Whose history a decision reads: a patient, or a patient and one user."""

    patient_hash: str | None
    service_id: str
    user_hash: str | None = None
    per_user: bool = False

    def params(self) -> dict[str, Any]:
        """The bind parameters of :func:`recent`'s statement for this scope."""
        return {
            "patient_hash": self.patient_hash,
            "service_id": self.service_id,
            "user_hash": self.user_hash,
        }

    def matches(self, table: type[CardLog] | type[AlertQuiet]) -> ColumnElement[bool]:
        """The scope as a condition on ``table``, with bind parameters (see :meth:`params`):
        the statement depends only on the scope's shape, so it is built once per shape."""
        cond = and_(
            table.patient_hash.is_(None)
            if self.patient_hash is None
            else table.patient_hash == bindparam("patient_hash"),
            table.service_id == bindparam("service_id"),
        )
        if self.per_user:
            user = (
                table.user_hash.is_(None)
                if self.user_hash is None
                else table.user_hash == bindparam("user_hash")
            )
            cond = and_(cond, user)
        return cond

    @property
    def shape(self) -> tuple[bool, bool, bool]:
        return (self.patient_hash is None, self.per_user, self.user_hash is None)


@dataclass(frozen=True, slots=True)
class Recent:
    """One row of :func:`recent`: a card shown (``quiet`` False) or an override in force."""

    quiet: bool
    finding_code: str
    indicator: str
    inputs_digest: str | None
    at: datetime  # shown at, or override given at
    until: datetime | None = None  # override only
    reason_code: str | None = None  # override only
    silent: bool = False  # a silent card that would have been shown


def recent(
    session: Session | Connection, scope: Scope, *, since: datetime, now: datetime
) -> list[Recent]:
    """The cards shown in ``scope`` since ``since`` and the overrides still in force at
    ``now``: one statement (a UNION ALL of index lookups), so one round trip per call.
    Replay traffic is never history.

    Shown cards come cut as ``alerts.policy.latest_per_kind`` cuts them (the latest of each
    kind at or before ``now``, the earliest after it), grouped in the database: a patient
    whose chart was opened a thousand times in the window gives a few rows, not a thousand
    (tests/alerts/test_live.py checks the cut against the policy's own)."""
    params = {**scope.params(), "since": as_utc(since), "now": as_utc(now)}
    return [
        Recent(bool(q), code, indicator, digest, _moment(at), _moment(until), reason, bool(silent))
        for q, code, indicator, digest, at, until, reason, silent in session.execute(
            _recent_statement(scope), params
        )
    ]


_STATEMENTS: dict[tuple[bool, bool, bool], Any] = {}


def _recent_statement(scope: Scope) -> Any:
    """:func:`recent`'s statement for the scope's shape, built once (building it was a third
    of the read's cost on SQLite); the values travel as bind parameters."""
    statement = _STATEMENTS.get(scope.shape)
    if statement is None:
        statement = _STATEMENTS.setdefault(scope.shape, _build_recent(scope))
    return statement


def _build_recent(scope: Scope) -> Any:
    kind = (CardLog.finding_code, CardLog.indicator, CardLog.inputs_digest, CardLog.would_show)
    shown_where = (
        scope.matches(CardLog),
        CardLog.created_at >= bindparam("since"),
        or_(CardLog.action == "show", CardLog.would_show.is_(True)),
        CardLog.replay_call.is_(None),
        CardLog.inputs_digest.is_not(None),
    )

    def shown(moment: Any, *where: ColumnElement[bool]) -> Select[Any]:
        return (
            select(
                literal(False).label("quiet"),
                *kind[:3],
                moment.label("at"),
                cast(null(), AlertQuiet.until.type).label("until"),  # typed for PostgreSQL
                null().label("reason"),
                kind[3],
            )
            .where(*shown_where, *where)
            .group_by(*kind)
        )

    latest = shown(func.max(CardLog.created_at), CardLog.created_at <= bindparam("now"))
    ahead = shown(func.min(CardLog.created_at), CardLog.created_at > bindparam("now"))
    quiet = select(
        literal(True).label("quiet"),
        AlertQuiet.finding_code,
        AlertQuiet.indicator,
        AlertQuiet.inputs_digest,
        AlertQuiet.since.label("at"),
        AlertQuiet.until,
        AlertQuiet.reason_code.label("reason"),
        literal(False).label("would_show"),
    ).where(
        scope.matches(AlertQuiet),
        or_(AlertQuiet.until.is_(None), AlertQuiet.until > bindparam("now")),
    )
    return union_all(latest, ahead, quiet)


def _moment(value: object) -> datetime | None:
    """A stored date-time in UTC (SQLite returns a UNION's date-times as text)."""
    if value is None:
        return None
    if isinstance(value, datetime):
        return as_utc(value)
    return as_utc(datetime.fromisoformat(str(value)))
