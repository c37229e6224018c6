"""Engine and sessions for the store: SQLite by default, PostgreSQL by URL."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker

from cds_service.store.schema import Base


class Store:
    """Owns one engine and its session factory; creates the tables on first use."""

    def __init__(self, url: str) -> None:
        if not url or "://" not in url:
            raise ValueError(f"storage url {url!r} is not a database URL")
        self.url = url
        kwargs: dict[str, object] = {"future": True}
        if url.startswith("sqlite"):
            kwargs["connect_args"] = {"check_same_thread": False, "timeout": 30}
        else:
            kwargs.update(pool_pre_ping=True, pool_size=5, max_overflow=10)
        self.engine: Engine = create_engine(url, **kwargs)
        if url.startswith("sqlite"):
            event.listen(self.engine, "connect", _sqlite_pragmas)
        self._sessions = sessionmaker(self.engine, expire_on_commit=False)
        Base.metadata.create_all(self.engine)

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A session that commits on success and rolls back on error."""
        with self._sessions() as s, s.begin():
            yield s

    def close(self) -> None:
        self.engine.dispose()


def _sqlite_pragmas(dbapi_connection, _record) -> None:  # type: ignore[no-untyped-def]
    cur = dbapi_connection.cursor()
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA synchronous=FULL")  # a 200 for feedback means it is on disk
    cur.execute("PRAGMA busy_timeout=30000")
    cur.close()
