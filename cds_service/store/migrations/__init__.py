"""Alembic migrations of the store's schema (``versions/``: one file per revision).

Run through :mod:`cds_service.store.migrate` (at start, or ``tonicity db upgrade``), never
with a separate ``alembic.ini``: the package carries everything Alembic needs.
"""
