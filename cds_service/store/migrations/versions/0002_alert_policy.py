"""Alert policy: what was done with each finding (shown, suppressed, silent) and on what, in
the card log; clinicians' overrides that quiet a finding (``alert_quiet``).

Existing card-log rows were all returned to a client: ``action`` defaults to ``show``.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def _card_log_columns() -> list[sa.Column]:
    return [
        sa.Column("action", sa.String(length=16), server_default="show", nullable=False),
        sa.Column("why", sa.String(length=300), nullable=True),
        sa.Column("inputs_digest", sa.String(length=32), nullable=True),
        sa.Column("user_hash", sa.String(length=64), nullable=True),
        sa.Column("replay_call", sa.String(length=64), nullable=True),
        sa.Column("suggestion_ids", sa.Text(), nullable=True),
        sa.Column("would_show", sa.Boolean(), server_default=sa.false(), nullable=False),
    ]


def upgrade() -> None:
    # Only what is missing: a database adopted from ``create_all`` may already have all of it.
    inspector = sa.inspect(op.get_bind())
    present = {c["name"] for c in inspector.get_columns("card_log")}
    for column in _card_log_columns():
        if column.name not in present:
            op.add_column("card_log", column)
    indexes = {i["name"] for i in inspector.get_indexes("card_log")}
    if op.f("ix_card_log_replay_call") not in indexes:
        op.create_index(op.f("ix_card_log_replay_call"), "card_log", ["replay_call"])
    if "ix_card_log_scope" not in indexes:
        op.create_index(
            "ix_card_log_scope", "card_log", ["patient_hash", "service_id", "created_at"]
        )
    if inspector.has_table("alert_quiet"):
        return
    op.create_table(
        "alert_quiet",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("patient_hash", sa.String(length=64), nullable=True),
        sa.Column("user_hash", sa.String(length=64), nullable=True),
        sa.Column("service_id", sa.String(length=100), nullable=False),
        sa.Column("finding_code", sa.String(length=64), nullable=False),
        sa.Column("reason_code", sa.String(length=100), nullable=False),
        sa.Column("indicator", sa.String(length=16), nullable=False),
        sa.Column("inputs_digest", sa.String(length=32), nullable=True),
        sa.Column("since", sa.DateTime(timezone=True), nullable=False),
        sa.Column("until", sa.DateTime(timezone=True), nullable=True),
        sa.Column("card_uuid", sa.String(length=64), nullable=False),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index("ix_alert_quiet_scope", "alert_quiet", ["patient_hash", "service_id"])


def downgrade() -> None:
    op.drop_table("alert_quiet")
    op.drop_index("ix_card_log_scope", table_name="card_log")
    op.drop_index(op.f("ix_card_log_replay_call"), table_name="card_log")
    with op.batch_alter_table("card_log") as batch:
        for column in reversed(_card_log_columns()):
            batch.drop_column(column.name)
