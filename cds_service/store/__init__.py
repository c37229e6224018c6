"""The store: card log, feedback, seen JWT ids, trend snapshots (SQLAlchemy 2)."""

from cds_service.store.database import Store

__all__ = ["Store"]
