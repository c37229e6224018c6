"""`tonicity feedback-report [--config FILE] [--json]`: acceptance and override rates per
finding code, override reasons chosen, and feedback for unknown cards, from the configured
store."""

from __future__ import annotations

import argparse


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", metavar="FILE", help="TOML configuration (storage.url)")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")


def run(args: argparse.Namespace) -> int:
    from sqlalchemy.exc import SQLAlchemyError

    from cds_service.config import load_settings
    from cds_service.errors import UserError
    from cds_service.store import Store
    from cds_service.store.feedback import feedback_report

    settings = load_settings(args.config)
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
