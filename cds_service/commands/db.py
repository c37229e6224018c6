"""`tonicity db upgrade | current [--config FILE]`: the store's schema (Alembic revisions).

``upgrade`` brings the database named by ``storage.url`` to this version's schema and exits;
run it as a step before the replicas start (a compose service, a Kubernetes Job or init
container) when they run with ``storage.migrate_at_start = false``. Replicas that migrate at
start do the same under a lock, so running both is harmless. ``current`` prints the recorded
revision and this version's head; it exits 1 when they differ.
"""

from __future__ import annotations

import argparse


def add_arguments(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="db_command", required=True, metavar="ACTION")
    for name, text in (
        ("upgrade", "bring the database to this version's schema"),
        ("current", "print the database's schema revision and this version's head"),
    ):
        p = sub.add_parser(name, help=text, description=text)
        p.add_argument("--config", metavar="FILE", default=None, help="TOML configuration")


def run(args: argparse.Namespace) -> int:
    from sqlalchemy import create_engine
    from sqlalchemy.exc import ArgumentError, SQLAlchemyError

    from cds_service.config import load_settings
    from cds_service.errors import UserError
    from cds_service.store import migrate
    from cds_service.store.database import safe_url

    settings = load_settings(args.config)
    url = settings.storage.url
    try:
        engine = create_engine(url)
    except (ArgumentError, ValueError) as exc:
        raise UserError(f"storage.url is not a database URL ({type(exc).__name__})") from None
    try:
        if args.db_command == "upgrade":
            before = migrate.current_revision(engine)
            changed = migrate.upgrade(engine)
            after = migrate.current_revision(engine)
            what = f"upgraded from {before or 'an empty schema'} to" if changed else "already at"
            print(f"{safe_url(url)}: {what} revision {after}")
            return 0
        found, head = migrate.current_revision(engine), migrate.head_revision()
        print(f"{safe_url(url)}: revision {found or 'none'} (this version's head: {head})")
        return 0 if found == head else 1
    except SQLAlchemyError as exc:
        detail = str(exc).splitlines()[0][:200]
        raise UserError(f"cannot reach the store {safe_url(url)}: {detail}") from None
    finally:
        engine.dispose()
