"""The CDS Hooks 2.0 feedback endpoint's body: validation and atomic storage.

Body shape (HL7 CDS Hooks 2.0, section "Feedback"; checked against the published logical model
CDSHooksFeedback): ``{"feedback": [Feedback, ...]}`` where each Feedback has ``card`` (the
card's uuid), ``outcome`` (``accepted`` | ``overridden``), ``acceptedSuggestions`` (list of
``{"id": uuid}``), ``overrideReason`` (``{"reason": Coding, "userComment": string}``, both
optional) and ``outcomeTimestamp`` (an instant, UTC). Unknown members are ignored, as the
specification's extension rules allow. "Ignored" is not an outcome a client sends: a card that
never receives feedback counts as ignored in the report.

Choices of ours: ``overrideReason`` only with ``overridden`` and ``acceptedSuggestions`` only
with ``accepted`` (the specification describes each for that outcome only); a timestamp without
a zone is read as UTC (the specification says the value is in UTC), and one that UTC cannot
hold (past the calendar's end after conversion) is a 400; at most 500 items per body.

Checked against the card log, and refused (the whole body, UserError naming the item) since
each breaks a SHALL or REQUIRED of the specification: a ``card`` this service never returned
(``card`` is "the card.uuid from the CDS Hooks response"; cards kept back by the alert policy
were never returned), an ``accepted`` outcome without ``acceptedSuggestions`` ("Required for
accepted outcomes"), and a suggestion id that card never carried (``id`` is "the
card.suggestion.uuid from the CDS Hooks response").

An ``overridden`` item whose reason is one of the alert policy's quieting reasons also writes
the quiet it gives (``quiet_for``, supplied by the caller: ``cds_service.alerts``), in the same
transaction.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)
from sqlalchemy import select

from cds_service.errors import UserError
from cds_service.store.database import Store, as_utc
from cds_service.store.report import FeedbackReport, feedback_report
from cds_service.store.schema import AlertQuiet, CardLog, Feedback

__all__ = [
    "FeedbackReport",
    "IssuedCard",
    "feedback_report",
    "parse_feedback",
    "record_feedback",
]

MAX_ITEMS = 500


class _Model(BaseModel):
    model_config = ConfigDict(extra="ignore", frozen=True, str_strip_whitespace=True)


class Coding(_Model):
    code: str = Field(min_length=1, max_length=100)
    system: str | None = Field(None, max_length=300)
    display: str | None = Field(None, max_length=300)


class OverrideReason(_Model):
    reason: Coding | None = None
    userComment: str | None = Field(None, max_length=2000)


class AcceptedSuggestion(_Model):
    id: str = Field(min_length=1, max_length=64)


class FeedbackItem(_Model):
    card: str = Field(min_length=1, max_length=64)
    outcome: Literal["accepted", "overridden"]
    acceptedSuggestions: list[AcceptedSuggestion] = Field(default_factory=list)
    overrideReason: OverrideReason | None = None
    outcomeTimestamp: datetime

    @field_validator("outcomeTimestamp")
    @classmethod
    def _in_utc(cls, moment: datetime) -> datetime:
        """The instant in UTC; one that UTC cannot hold (``9999-12-31T23:59:59-14:00`` is past
        the calendar's end there) is refused like any invalid value."""
        try:
            return as_utc(moment)
        except (OverflowError, ValueError):
            raise ValueError("outcomeTimestamp is outside the years 1 to 9999 in UTC") from None

    @model_validator(mode="after")
    def _fits_outcome(self) -> FeedbackItem:
        if self.overrideReason is not None and self.outcome != "overridden":
            raise ValueError("overrideReason is only allowed with outcome 'overridden'")
        if self.acceptedSuggestions and self.outcome != "accepted":
            raise ValueError("acceptedSuggestions is only allowed with outcome 'accepted'")
        if self.outcome == "accepted" and not self.acceptedSuggestions:
            raise ValueError("an 'accepted' outcome requires acceptedSuggestions")
        return self


class FeedbackBody(_Model):
    feedback: list[FeedbackItem] = Field(min_length=1, max_length=MAX_ITEMS)


def parse_feedback(payload: object) -> FeedbackBody:
    """Validate a feedback body; a bad one raises UserError naming the first problem."""
    if not isinstance(payload, dict):
        raise UserError("feedback body must be a JSON object with a 'feedback' array")
    try:
        return FeedbackBody.model_validate(payload)
    except ValidationError as exc:
        err = exc.errors(include_url=False, include_input=False)[0]
        where = _location(err.get("loc", ()))
        raise UserError(f"invalid feedback: {where}: {err.get('msg', 'invalid')}") from None


@dataclass(frozen=True, slots=True)
class IssuedCard:
    """What the card log knows of a card this service returned (for quiets)."""

    card_uuid: str
    service_id: str
    finding_code: str
    indicator: str
    inputs_digest: str | None
    patient_hash: str | None
    user_hash: str | None


#: Given the card overridden, the reason code and when: the quiet's ``(until, inputs_digest)``
#: or None when the reason hides nothing.
QuietFor = Callable[[IssuedCard, str, datetime], "tuple[datetime | None, str | None] | None"]


def record_feedback(
    store: Store,
    service_id: str,
    payload: dict,
    client_id: str | None,
    now: datetime,
    quiet_for: QuietFor | None = None,
) -> int:
    """Store every item of one feedback body, or none of them; returns the number stored.

    Raises UserError, storing nothing, for a body that does not fit the card log (see the
    module doc). The transaction is committed before this returns.
    """
    body = parse_feedback(payload)
    uuids = {item.card for item in body.feedback}
    received = as_utc(now)
    with store.session() as s:
        issued = {
            r.card_uuid: r
            for r in s.execute(
                select(
                    CardLog.card_uuid,
                    CardLog.finding_code,
                    CardLog.indicator,
                    CardLog.inputs_digest,
                    CardLog.patient_hash,
                    CardLog.user_hash,
                    CardLog.replay_call,
                    CardLog.suggestion_ids,
                ).where(
                    CardLog.card_uuid.in_(uuids),
                    CardLog.service_id == service_id,
                    CardLog.action == "show",
                )
            )
        }
        for n, item in enumerate(body.feedback):
            _check_against_log(n, item, issued.get(item.card))
        s.add_all(_row(item, service_id, client_id, received, False) for item in body.feedback)
        if quiet_for is not None:
            s.add_all(_quiets(body.feedback, issued, service_id, quiet_for, received))
    return len(body.feedback)


def _check_against_log(n: int, item: FeedbackItem, row: Any) -> None:
    if row is None:
        raise UserError(
            f"invalid feedback: feedback[{n}].card: this service never returned card "
            f"{item.card[:64]!r}"
        )
    if item.outcome == "accepted":
        carried = set(json.loads(row.suggestion_ids)) if row.suggestion_ids else set()
        for s in item.acceptedSuggestions:
            if s.id not in carried:
                raise UserError(
                    f"invalid feedback: feedback[{n}].acceptedSuggestions: card {item.card[:64]!r} "
                    f"carried no suggestion {s.id[:64]!r}"
                )


def _quiets(
    items: list[FeedbackItem],
    issued: dict[str, Any],
    service_id: str,
    quiet_for: QuietFor,
    received: datetime,
) -> list[AlertQuiet]:
    out = []
    for item in items:
        reason = item.overrideReason.reason if item.overrideReason else None
        row = issued[item.card]
        if item.outcome != "overridden" or reason is None or row.replay_call is not None:
            continue
        card = IssuedCard(
            row.card_uuid,
            service_id,
            row.finding_code,
            row.indicator,
            row.inputs_digest,
            row.patient_hash,
            row.user_hash,
        )
        at = min(as_utc(item.outcomeTimestamp), received)
        quiet = quiet_for(card, reason.code, at)
        if quiet is None:
            continue
        until, digest = quiet
        out.append(
            AlertQuiet(
                patient_hash=row.patient_hash,
                user_hash=row.user_hash,
                service_id=service_id,
                finding_code=row.finding_code,
                reason_code=reason.code,
                indicator=row.indicator,
                inputs_digest=digest,
                since=at,
                until=until,
                card_uuid=row.card_uuid,
            )
        )
    return out


def _row(
    item: FeedbackItem, service_id: str, client_id: str | None, received: datetime, unknown: bool
) -> Feedback:
    reason = item.overrideReason.reason if item.overrideReason else None
    accepted = [s.id for s in item.acceptedSuggestions]
    return Feedback(
        card_uuid=item.card,
        service_id=service_id,
        outcome=item.outcome,
        accepted_suggestions=json.dumps(accepted) if accepted else None,
        override_reason_code=reason.code if reason else None,
        override_reason_display=reason.display if reason else None,
        override_comment=item.overrideReason.userComment if item.overrideReason else None,
        outcome_at=as_utc(item.outcomeTimestamp),
        received_at=received,
        unknown_card=unknown,
        client_id=client_id[:300] if client_id else None,
    )


def _location(loc: tuple[int | str, ...] | list[int | str]) -> str:
    out = ""
    for part in loc:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "body"
