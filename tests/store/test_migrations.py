"""The schema is managed by Alembic (``cds_service/store/migrations``).

- The migration head equals the SQLAlchemy metadata of ``store/schema.py``: a table or column
  added to the models without a revision fails here (Alembic's ``compare_metadata``, the
  autogenerate comparison, must find nothing).
- Replicas starting at once on an empty database all come up (issue 14, defect 7: with
  ``create_all`` one of two PostgreSQL replicas exited with an IntegrityError).
- A database made by ``create_all`` before migrations existed is adopted, rows kept.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import create_engine, func, inspect, select

from cds_service.store import Store, migrate
from cds_service.store.schema import Base, CardLog

from .helpers import logged

ROOT = Path(__file__).resolve().parents[2]


def _diff(url: str) -> list[object]:
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            return compare_metadata(MigrationContext.configure(conn), Base.metadata)
    finally:
        engine.dispose()


def test_migration_head_equals_the_models(store_url: str) -> None:
    Store(store_url).close()
    assert _diff(store_url) == [], (
        "store/schema.py differs from the migrations: add a revision under "
        "cds_service/store/migrations/versions"
    )
    engine = create_engine(store_url)
    assert migrate.current_revision(engine) == migrate.head_revision()
    engine.dispose()


def test_an_empty_database_without_migrations_differs(sqlite_url: str) -> None:
    """The comparison above can fail: on a database with no tables it lists every table."""
    create_engine(sqlite_url).dispose()
    added = {d[1].name for d in _diff(sqlite_url) if d[0] == "add_table"}
    assert added == set(Base.metadata.tables)


def test_upgrade_twice_changes_nothing_the_second_time(store_url: str) -> None:
    engine = create_engine(store_url)
    try:
        assert migrate.upgrade(engine) is True
        assert migrate.upgrade(engine) is False
    finally:
        engine.dispose()


def test_downgrade_to_base_and_up_again(sqlite_url: str) -> None:
    engine = create_engine(sqlite_url)
    migrate.upgrade(engine)
    with engine.connect() as conn, conn.begin():
        command.downgrade(migrate.alembic_config(conn), "base")
    assert not set(Base.metadata.tables) & set(inspect(engine).get_table_names())
    assert migrate.upgrade(engine) is True
    engine.dispose()
    assert _diff(sqlite_url) == []


def test_a_database_made_by_create_all_is_adopted_with_its_rows(store_url: str) -> None:
    engine = create_engine(store_url)
    Base.metadata.create_all(engine)  # what every earlier version did at start
    engine.dispose()
    with pytest.raises(migrate.SchemaNotCurrent, match="tonicity db upgrade"):
        Store(store_url, migrate=False)
    store = Store(store_url)
    try:
        logged(store, "hypotonic-hyponatremia")
        with store.session() as s:
            assert s.scalar(select(func.count()).select_from(CardLog)) == 1
        assert migrate.current_revision(store.engine) == migrate.head_revision()
    finally:
        store.close()


def test_a_store_that_may_not_migrate_refuses_an_empty_database(sqlite_url: str) -> None:
    with pytest.raises(migrate.SchemaNotCurrent, match="revision none"):
        Store(sqlite_url, migrate=False)
    Store(sqlite_url).close()
    Store(sqlite_url, migrate=False).close()  # at head now: opens


_CHILD = textwrap.dedent(
    """
    import sys
    from cds_service.store import Store
    print("ready", flush=True)
    sys.stdin.readline()          # every process starts at the same moment
    Store(sys.argv[1]).close()
    print("up", flush=True)
    """
)


def _start_together(url: str, processes: int) -> list[subprocess.CompletedProcess[str]]:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    children = [
        subprocess.Popen(
            [sys.executable, "-c", _CHILD, url],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            env=env,
            cwd=ROOT,
        )
        for _ in range(processes)
    ]
    for child in children:
        assert child.stdout is not None and child.stdout.readline().strip() == "ready"
    for child in children:
        assert child.stdin is not None
        child.stdin.write("go\n")
        child.stdin.flush()
    results = []
    for child in children:
        out, err = child.communicate(timeout=120)
        results.append(subprocess.CompletedProcess(child.args, child.returncode, out, err))
    return results


@pytest.mark.parametrize("processes", [2, 4])
def test_replicas_starting_at_once_on_an_empty_database_all_come_up(
    store_url: str, processes: int
) -> None:
    results = _start_together(store_url, processes)
    for r in results:
        assert r.returncode == 0, r.stderr[-2000:]
        assert r.stdout.split() == ["up"]
    engine = create_engine(store_url)
    try:
        assert migrate.current_revision(engine) == migrate.head_revision()
    finally:
        engine.dispose()
    assert _diff(store_url) == []
