"""Alembic environment: always run on a connection that :mod:`cds_service.store.migrate`
opened, holds the migration lock on, and commits."""

from __future__ import annotations

from alembic import context

from cds_service.store.schema import Base

connection = context.config.attributes["connection"]
context.configure(
    connection=connection,
    target_metadata=Base.metadata,
    render_as_batch=connection.dialect.name == "sqlite",  # SQLite's ALTER TABLE is limited
    compare_type=True,
)
with context.begin_transaction():  # the caller's transaction: alembic adds none of its own
    context.run_migrations()
