"""Tables of the store. One metadata for SQLite (default) and PostgreSQL.

Nothing here holds a lab value, a name or a raw patient id: patients appear only as a salted
hash (``patient_hash``), and snapshots for the trend view expire and are purged.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Boolean, DateTime, Index, Integer, String, Text, UniqueConstraint, false
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column


class Base(DeclarativeBase):
    pass


class CardLog(Base):
    """One row per finding evaluated and not switched off, written at response time: the cards
    returned (``action`` ``show``) and those kept back (``suppressed``, ``silent``) with why.

    Only ``show`` rows were ever sent: feedback is accepted for those alone. The scope index
    serves the one repeat-suppression query of a hook call (``store.cards.recent``).
    """

    __tablename__ = "card_log"
    __table_args__ = (Index("ix_card_log_scope", "patient_hash", "service_id", "created_at"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    card_uuid: Mapped[str] = mapped_column(String(64), unique=True, index=True)
    service_id: Mapped[str] = mapped_column(String(100), index=True)
    finding_code: Mapped[str] = mapped_column(String(64), index=True)
    indicator: Mapped[str] = mapped_column(String(16))
    patient_hash: Mapped[str | None] = mapped_column(String(64), nullable=True)
    client_id: Mapped[str | None] = mapped_column(String(300), nullable=True)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), index=True)
    # Alert burden (cds_service/alerts): what was done with the finding, and on what.
    action: Mapped[str] = mapped_column(String(16), default="show", server_default="show")
    why: Mapped[str | None] = mapped_column(String(300), nullable=True)
    inputs_digest: Mapped[str | None] = mapped_column(String(32), nullable=True)
    user_hash: Mapped[str | None] = mapped_column(String(64), nullable=True)
    #: The call id ``tonicity replay`` sent (``X-Tonicity-Replay``); None for live traffic.
    replay_call: Mapped[str | None] = mapped_column(String(64), nullable=True, index=True)
    suggestion_ids: Mapped[str | None] = mapped_column(Text, nullable=True)  # JSON list
    #: A silent row that would have been shown: history for later silent decisions only.
    would_show: Mapped[bool] = mapped_column(Boolean, default=False, server_default=false())


class AlertQuiet(Base):
    """A clinician's override that hides a finding for a patient (``alerts.reasons``)."""

    __tablename__ = "alert_quiet"
    __table_args__ = (Index("ix_alert_quiet_scope", "patient_hash", "service_id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    patient_hash: Mapped[str | None] = mapped_column(String(64), nullable=True)
    user_hash: Mapped[str | None] = mapped_column(String(64), nullable=True)
    service_id: Mapped[str] = mapped_column(String(100))
    finding_code: Mapped[str] = mapped_column(String(64))
    reason_code: Mapped[str] = mapped_column(String(100))
    indicator: Mapped[str] = mapped_column(String(16))
    inputs_digest: Mapped[str | None] = mapped_column(String(32), nullable=True)
    since: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    until: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    card_uuid: Mapped[str] = mapped_column(String(64))


class Feedback(Base):
    """One row per feedback item (CDS Hooks 2.0 feedback endpoint)."""

    __tablename__ = "feedback"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    card_uuid: Mapped[str] = mapped_column(String(64), index=True)
    service_id: Mapped[str] = mapped_column(String(100), index=True)
    outcome: Mapped[str] = mapped_column(String(16))  # accepted | overridden | ignored
    accepted_suggestions: Mapped[str | None] = mapped_column(Text, nullable=True)  # JSON list
    override_reason_code: Mapped[str | None] = mapped_column(String(100), nullable=True)
    override_reason_display: Mapped[str | None] = mapped_column(String(300), nullable=True)
    override_comment: Mapped[str | None] = mapped_column(Text, nullable=True)
    outcome_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    received_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), index=True)
    unknown_card: Mapped[bool] = mapped_column(Boolean, default=False)
    client_id: Mapped[str | None] = mapped_column(String(300), nullable=True)


class SeenToken(Base):
    """JWT ``jti`` values already used, kept until the token's ``exp`` (replay protection)."""

    __tablename__ = "seen_token"
    __table_args__ = (UniqueConstraint("issuer", "jti", name="uq_seen_token_issuer_jti"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    issuer: Mapped[str] = mapped_column(String(300))
    jti: Mapped[str] = mapped_column(String(300))
    tenant: Mapped[str | None] = mapped_column(String(300), nullable=True)
    expires_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), index=True)
    seen_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


class Snapshot(Base):
    """A stored evaluation for the trend view, reached by an unguessable token."""

    __tablename__ = "snapshot"

    token_hash: Mapped[str] = mapped_column(String(64), primary_key=True)  # sha256 of token
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    expires_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), index=True)
    payload: Mapped[str] = mapped_column(Text)  # JSON
