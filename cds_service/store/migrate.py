"""The store's schema, managed by Alembic (revisions in ``migrations/versions``).

:func:`upgrade` brings a database to the newest revision (``head``). It is safe to run from
several processes at once, which is what happens when replicas start together on an empty
database: the work happens in one transaction that first takes a lock,

- PostgreSQL: a transaction-level advisory lock (``pg_advisory_xact_lock``), released at
  commit; DDL is transactional there, so a second replica waits, then finds the head
  revision already recorded and does nothing;
- SQLite: ``BEGIN IMMEDIATE`` (the database's write lock; others wait in the busy timeout).

A database created before migrations existed (tables made by ``create_all``, no
``alembic_version``) is adopted: when every table of the first revision is there, that
revision is recorded (``stamp``) and later revisions run from it.
"""

from __future__ import annotations

import functools
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Connection, Engine, inspect, text

MIGRATIONS = Path(__file__).parent / "migrations"
#: The first revision: the schema as ``create_all`` made it before migrations existed.
INITIAL_REVISION = "0001"
INITIAL_TABLES = frozenset({"card_log", "feedback", "seen_token", "snapshot"})
#: Key of the PostgreSQL advisory lock (any constant both replicas share: "tonicity" as bytes).
ADVISORY_LOCK_KEY = int.from_bytes(b"tonicity", "big") >> 1


class SchemaNotCurrent(Exception):
    """The database's schema revision is not this code's head (and upgrading is off)."""


def alembic_config(connection: Connection | None = None) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS))
    cfg.attributes["connection"] = connection
    return cfg


@functools.cache
def head_revision() -> str:
    """The newest revision of this code (read once per process)."""
    head = ScriptDirectory.from_config(alembic_config()).get_current_head()
    if head is None:  # pragma: no cover - the package always ships revisions
        raise RuntimeError("no schema revision found in the package")
    return head


def current_revision(engine: Engine) -> str | None:
    """The revision the database records (None: no migration ever ran on it)."""
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def upgrade(engine: Engine) -> bool:
    """Bring the database to the head revision; True when anything was changed."""
    if current_revision(engine) == head_revision():
        return False  # the common start: nothing to lock for
    with engine.connect() as conn, conn.begin():
        _lock(conn)
        before = MigrationContext.configure(conn).get_current_revision()
        if before == head_revision():
            return False  # another process upgraded while this one waited for the lock
        cfg = alembic_config(conn)
        if before is None and INITIAL_TABLES <= set(inspect(conn).get_table_names()):
            command.stamp(cfg, INITIAL_REVISION)
        command.upgrade(cfg, "head")
    return True


def check_current(engine: Engine) -> None:
    """Raise :class:`SchemaNotCurrent` unless the database is at this code's head."""
    found = current_revision(engine)
    if found != head_revision():
        raise SchemaNotCurrent(
            f"the database schema is at revision {found or 'none'}, this version needs "
            f"{head_revision()}: run `tonicity db upgrade` (or set storage.migrate_at_start)"
        )


def _lock(conn: Connection) -> None:
    if conn.dialect.name == "postgresql":
        conn.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": ADVISORY_LOCK_KEY})
    elif conn.dialect.name == "sqlite":
        conn.exec_driver_sql("BEGIN IMMEDIATE")
