"""`tonicity feedback-report [--config FILE] [--json]`: acceptance and override rates per
finding code, override reasons chosen, and feedback for unknown cards, from the configured
store."""

from __future__ import annotations

import argparse


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", metavar="FILE", help="TOML configuration (storage.url)")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from sqlalchemy import make_url
    from sqlalchemy.exc import ArgumentError, SQLAlchemyError

    from cds_service.config import load_settings
    from cds_service.errors import UserError
    from cds_service.store import Store
    from cds_service.store.feedback import feedback_report

    settings = load_settings(args.config)
    try:
        url = make_url(settings.storage.url)
    except ArgumentError:
        raise UserError("storage.url is not a database URL") from None
    if url.get_backend_name() == "sqlite" and url.database and url.database != ":memory:":
        if not Path(url.database).exists():  # do not create an empty store just to report on it
            raise UserError(f"no store at {url.database} (set storage.url or run from its folder)")
    try:
        store = Store(settings.storage.url)
    except (ValueError, SQLAlchemyError) as exc:
        raise UserError(f"cannot open store: {type(exc).__name__}") from None
    try:
        report = feedback_report(store)
    except SQLAlchemyError as exc:
        raise UserError(f"cannot read store {store.safe_url}: {type(exc).__name__}") from None
    finally:
        store.close()
    print(report.to_json() if args.json else f"Store: {store.safe_url}\n\n{report.to_text()}")
    return 0
