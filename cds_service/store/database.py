"""Engine and sessions for the store: SQLite by default, PostgreSQL by URL."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from datetime import UTC, datetime

from sqlalchemy import Engine, create_engine, event, make_url, text
from sqlalchemy.orm import Session, sessionmaker

from cds_service.store import migrate as _migrate


class Store:
    """Owns one engine and its session factory; brings the schema to this code's revision
    (Alembic, :mod:`cds_service.store.migrate`) when opened, or with ``migrate=False`` only
    checks that it is there (``tonicity db upgrade`` ran first)."""

    def __init__(self, url: str, *, migrate: bool = True) -> None:
        if not url or "://" not in url:
            raise ValueError(f"storage url {url!r} is not a database URL")
        self.url = url
        kwargs: dict[str, object] = {"future": True}
        if url.startswith("sqlite"):
            kwargs["connect_args"] = {"check_same_thread": False, "timeout": 30}
        else:
            kwargs.update(pool_pre_ping=True, pool_size=5, max_overflow=10)
        self.engine: Engine = create_engine(url, **kwargs)
        self._sqlite = url.startswith("sqlite")
        if self._sqlite:
            event.listen(self.engine, "connect", _sqlite_pragmas)
            event.listen(self.engine, "checkin", _sqlite_restore_full)
        self._sessions = sessionmaker(self.engine, expire_on_commit=False)
        self._log_writer: ThreadPoolExecutor | None = None
        self._log_writer_lock = threading.Lock()
        try:
            if migrate:
                _migrate.upgrade(self.engine)
            else:
                _migrate.check_current(self.engine)
        except BaseException:
            self.engine.dispose()
            raise

    @property
    def safe_url(self) -> str:
        """The URL with any password masked, fit for messages and logs."""
        return safe_url(self.url)

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A session that commits on success and rolls back on error.

        The commit happens when the ``with`` block ends, so a caller that answers only after
        leaving the block answers only for data that is on disk.
        """
        with self._sessions() as s, s.begin():
            yield s

    @contextmanager
    def log_session(self) -> Iterator[Session]:
        """A session for records a hook call leaves behind (card log, trend snapshots).

        Committed without waiting for the disk: SQLite (WAL) with ``synchronous=NORMAL`` for
        this transaction, PostgreSQL with ``synchronous_commit`` off. A commit still survives
        a crash of this process; only an operating-system crash or power loss may lose the
        last ones. Feedback, whose 200 promises it is stored, keeps :meth:`session`.
        """
        with self._sessions() as s, s.begin():
            conn = s.connection()
            if self._sqlite:
                conn.info[_RELAXED] = True  # set back to FULL when the connection is returned
                conn.exec_driver_sql("PRAGMA synchronous=NORMAL")
            elif conn.dialect.name == "postgresql":
                conn.execute(text("SET LOCAL synchronous_commit TO OFF"))
            yield s

    @property
    def log_writer(self) -> ThreadPoolExecutor:
        """The one thread that writes what hook calls leave behind (card log, trend snapshots)
        in this process, in arrival order.

        SQLite lets one connection write at a time and makes the others wait in its busy
        handler, which sleeps in steps of up to 100 ms: with a thread per concurrent call,
        eight calls at once gave a p95 latency over one second (benchmarks/load.py). Queued
        on one thread, this process's writes never wait on each other's lock; PostgreSQL
        loses nothing by it (these commits do not wait for the disk, see ``log_session``).
        """
        with self._log_writer_lock:
            if self._log_writer is None:
                self._log_writer = ThreadPoolExecutor(1, thread_name_prefix="tonicity-log")
            return self._log_writer

    def close(self) -> None:
        with self._log_writer_lock:
            writer, self._log_writer = self._log_writer, None
        if writer is not None:
            writer.shutdown(wait=True)  # queued records are written before the engine goes
        self.engine.dispose()


def safe_url(url: str) -> str:
    """``url`` with any password masked, fit for messages and logs."""
    return make_url(url).render_as_string(hide_password=True)


def as_utc(moment: datetime) -> datetime:
    """An aware datetime in UTC. SQLite keeps no zone, so every write goes through here.

    A naive value (as SQLite gives back) is read as UTC.
    """
    if moment.tzinfo is None:
        return moment.replace(tzinfo=UTC)
    return moment.astimezone(UTC)


_RELAXED = "tonicity_synchronous_normal"


def _sqlite_pragmas(dbapi_connection, _record) -> None:  # type: ignore[no-untyped-def]
    cur = dbapi_connection.cursor()
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA synchronous=FULL")  # a 200 for feedback means it is on disk
    cur.execute("PRAGMA busy_timeout=30000")
    cur.close()


def _sqlite_restore_full(dbapi_connection, record) -> None:  # type: ignore[no-untyped-def]
    """A connection relaxed by :meth:`Store.log_session` goes back to the pool durable."""
    if dbapi_connection is not None and record is not None and record.info.pop(_RELAXED, False):
        cur = dbapi_connection.cursor()
        cur.execute("PRAGMA synchronous=FULL")
        cur.close()
