"""Initial schema: card log, feedback, seen JWT ids, trend snapshots (as ``create_all`` made
it before migrations existed; such a database is adopted by recording this revision).

Revision ID: 0001
Revises:
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None

_INDEXES = {
    "card_log": (
        ("card_uuid", True),
        ("created_at", False),
        ("finding_code", False),
        ("service_id", False),
    ),
    "feedback": (("card_uuid", False), ("received_at", False), ("service_id", False)),
    "seen_token": (("expires_at", False),),
    "snapshot": (("expires_at", False),),
}


def upgrade() -> None:
    op.create_table(
        "card_log",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("card_uuid", sa.String(length=64), nullable=False),
        sa.Column("service_id", sa.String(length=100), nullable=False),
        sa.Column("finding_code", sa.String(length=64), nullable=False),
        sa.Column("indicator", sa.String(length=16), nullable=False),
        sa.Column("patient_hash", sa.String(length=64), nullable=True),
        sa.Column("client_id", sa.String(length=300), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_table(
        "feedback",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("card_uuid", sa.String(length=64), nullable=False),
        sa.Column("service_id", sa.String(length=100), nullable=False),
        sa.Column("outcome", sa.String(length=16), nullable=False),
        sa.Column("accepted_suggestions", sa.Text(), nullable=True),
        sa.Column("override_reason_code", sa.String(length=100), nullable=True),
        sa.Column("override_reason_display", sa.String(length=300), nullable=True),
        sa.Column("override_comment", sa.Text(), nullable=True),
        sa.Column("outcome_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("received_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("unknown_card", sa.Boolean(), nullable=False),
        sa.Column("client_id", sa.String(length=300), nullable=True),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_table(
        "seen_token",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("issuer", sa.String(length=300), nullable=False),
        sa.Column("jti", sa.String(length=300), nullable=False),
        sa.Column("tenant", sa.String(length=300), nullable=True),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("seen_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("issuer", "jti", name="uq_seen_token_issuer_jti"),
    )
    op.create_table(
        "snapshot",
        sa.Column("token_hash", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("payload", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("token_hash"),
    )
    for table, columns in _INDEXES.items():
        for column, unique in columns:
            op.create_index(op.f(f"ix_{table}_{column}"), table, [column], unique=unique)


def downgrade() -> None:
    for table in reversed(list(_INDEXES)):
        op.drop_table(table)  # its indexes go with it
